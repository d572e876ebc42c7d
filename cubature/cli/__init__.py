"""The ``cubage`` command line (argparse), its terminal display and exit codes."""

import sys

#: numbers of the signals received while the command loads (before its own signal handling is in place)
_received: list[int] = []


def _interrupt(signum, frame):
    # nothing here may import: the signal can land inside an import (of ``signal`` itself, half initialised)
    _received.append(signum)
    raise KeyboardInterrupt


#: the signals ended quietly while the command loads
_EARLY = ("SIGINT", "SIGTERM", "SIGHUP")


def interrupted_while_loading() -> bool:
    """Whether a signal arrived while the command loaded (and forget it).

    The :class:`KeyboardInterrupt` that a signal handler raises is lost
    where Python ignores exceptions (the weakref callback of an import lock,
    a ``__del__``): the command would go on as if the signal never came.
    The record lets the command act on it at its next safe point.
    """
    seen = bool(_received)
    _received.clear()
    return seen


def _quiet_unraisable(hook):
    """``sys.unraisablehook`` that drops a KeyboardInterrupt (a signal's, recorded and acted on elsewhere)."""
    def quiet(unraisable):
        if isinstance(unraisable.exc_value, KeyboardInterrupt):
            return
        hook(unraisable)
    return quiet


def main(argv=None) -> int:
    """The ``cubage`` command (:func:`cubage.cli.commands.main`), quiet on Ctrl-C while it loads.

    Until the command installs its own signal handling, SIGINT, SIGTERM and
    SIGHUP end it quietly (exit 130) instead of killing it or printing a
    traceback, also when the interrupt lands where Python ignores
    exceptions (then the signal is recorded and the command ends at its
    next safe point; see :func:`interrupted_while_loading`).
    """
    # the interpreter's built-in signal module, loaded at start-up: importing ``signal`` itself (its enums)
    # takes long enough under load for a Ctrl-C to land in it with a traceback
    import _signal as signal
    old = {}
    for name in _EARLY:
        sig = getattr(signal, name, None)
        if sig is not None and signal.getsignal(sig) in (signal.SIG_DFL, signal.default_int_handler):
            old[sig] = signal.signal(sig, _interrupt)
    hook = sys.unraisablehook
    sys.unraisablehook = _quiet_unraisable(hook)
    try:
        try:
            from cubage.cli.commands import main as _main
        except KeyboardInterrupt:
            print("cubage: interrupted", file=sys.stderr)
            return 130
        return _main(argv)
    finally:
        sys.unraisablehook = hook
        for sig, handler in old.items():
            signal.signal(sig, handler)
        _received.clear()


__all__ = ["main", "interrupted_while_loading"]
