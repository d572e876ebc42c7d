"""The ``cubage`` command line (argparse), its terminal display and exit codes."""

import sys


def _interrupt(signum, frame):
    raise KeyboardInterrupt


def main(argv=None) -> int:
    """The ``cubage`` command (:func:`cubage.cli.commands.main`), quiet on Ctrl-C while it loads.

    Until the command installs its own signal handling, SIGTERM and SIGHUP
    end it the way Ctrl-C does (quietly, exit 130) instead of killing it.
    """
    import signal
    for name in ("SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is not None and signal.getsignal(sig) == signal.SIG_DFL:
            signal.signal(sig, _interrupt)
    try:
        from cubage.cli.commands import main as _main
    except KeyboardInterrupt:
        print("cubage: interrupted", file=sys.stderr)
        return 130
    return _main(argv)


__all__ = ["main"]
