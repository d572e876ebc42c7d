"""cubage's text UI: pick a problem, watch it integrate, or follow a headless run.

Entry point :func:`main` (called by ``cubage tui`` and ``cubage watch``).
"""

from __future__ import annotations

import sys
from pathlib import Path

from textual.app import App
from textual.binding import Binding

from cubage.problem.problem_file import ProblemError, find_problem, list_problems, problem_dirs
from cubage.session.follower import RunFollower
from cubage.session.run_directory import SOURCE
from cubage.session.status import EXIT_INTERRUPTED

from .picker import PickerScreen
from .problem_facts import ProblemFacts
from .run_view import RunView


class CubageApp(App):
    """The application: a picker screen (or, when following, a run view alone).

    Parameters
    ----------
    files : list of Path
        Problem files for the picker.
    follow : (RunFollower, ProblemFacts), optional
        Follow this run directory instead of offering the picker.
    allow_python : bool
        Import Python integrands without asking.
    """

    CSS_PATH = "app.tcss"
    TITLE = "cubage"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = [Binding("ctrl+q", "quit", "Quit", show=False)]

    def __init__(self, files: list[Path] | None = None, follow: tuple[RunFollower, ProblemFacts] | None = None,
                 allow_python: bool = False):
        super().__init__()
        self.files = list(files or [])
        self.follow = follow
        self.allow_python = allow_python

    #: Signals that end the UI cleanly: a closed terminal or SSH session (SIGHUP) and a polite kill (SIGTERM).
    END_SIGNALS = ("SIGHUP", "SIGTERM")

    def on_mount(self) -> None:
        self.ended_by: str | None = None
        self._watch_signals()
        if self.follow is not None:
            follower, meta = self.follow
            self.push_screen(RunView(meta, follower=follower, can_go_back=False))
        else:
            self.push_screen(PickerScreen(self.files, allow_python=self.allow_python))

    def _watch_signals(self) -> None:
        """End the UI on SIGHUP/SIGTERM instead of living on without a terminal.

        Without this, the command's own handlers (which stop a headless run)
        swallowed the signal and a UI whose SSH session dropped kept running
        and drawing into a dead terminal.  The handlers live on the event
        loop, so they act between two of its callbacks.
        """
        import asyncio
        import signal
        try:
            loop = asyncio.get_running_loop()
        except RuntimeError:
            return
        for name in self.END_SIGNALS:
            sig = getattr(signal, name, None)
            if sig is None:
                continue
            try:
                loop.add_signal_handler(sig, self.end_for_signal, name)
            except (NotImplementedError, RuntimeError, ValueError):   # not the main thread, or no such support
                pass

    def end_for_signal(self, name: str) -> None:
        """Stop what runs (each screen keeps its estimate: a live run writes its result record), then exit."""
        if self.ended_by is not None:
            return
        self.ended_by = name
        for screen in list(self.screen_stack):
            fn = getattr(screen, "end_for_signal", None)
            if callable(fn):
                try:
                    fn(name)
                except Exception:  # noqa: BLE001 - ending must go on whatever a screen does
                    pass
        self.exit(EXIT_INTERRUPTED)

    async def action_quit(self) -> None:
        screen = self.screen
        if isinstance(screen, RunView):
            screen.action_leave()
        else:
            self.exit(0)


def collect_files(paths: list[str] | None) -> list[Path]:
    """Problem files from files, folders and problem names in ``paths`` (default: :func:`problem_dirs`).

    A name that is neither a file nor a folder means what it means to ``cubage run``
    (:func:`cubage.problem.problem_file.find_problem`: ``NAME.toml`` here, in ./problems or among the bundled
    examples).

    Raises
    ------
    FileNotFoundError
        Naming the first path that is no file, folder or problem name (``args[1]``: why, with suggestions).
    """
    if not paths:
        return list_problems(problem_dirs())
    out: list[Path] = []
    for p in paths:
        q = Path(p)
        if q.is_dir():
            out.extend(list_problems([q]))
        elif q.is_file():
            out.append(q)
        else:
            try:
                out.append(find_problem(p))
            except ProblemError as exc:
                raise FileNotFoundError(p, exc.headline if hasattr(exc, "headline") else str(exc)) from None
    seen, uniq = set(), []
    for f in out:
        k = f.resolve()
        if k not in seen:
            seen.add(k)
            uniq.append(f)
    return uniq


def main(paths: list[str] | None = None, watch: str | None = None, allow_python: bool = False) -> int:
    """Run the text UI; returns the exit code.

    Parameters
    ----------
    paths : list of str, optional
        Problem files or folders for the picker (default: ``./problems`` when
        present, else the bundled examples).
    watch : str, optional
        A run directory of a headless run to follow instead.
    allow_python : bool
        Import Python integrands without asking first.

    Returns
    -------
    int
        0 on a normal exit, 2 for bad input (message on stderr).
    """
    follow = None
    files: list[Path] = []
    if watch is not None:
        d = Path(watch)
        if not d.is_dir():
            print(f"cubage watch: {watch}: no such run directory", file=sys.stderr)
            return 2
        from .scan_view import is_scan_dir, watch_scan
        if is_scan_dir(d):
            return watch_scan(d)
        if not (d / SOURCE).is_file():
            print(f"cubage watch: {watch}: not a run directory (no {SOURCE})", file=sys.stderr)
            return 2
        try:
            meta = ProblemFacts.from_file(d / SOURCE)
        except ProblemError as exc:
            print(f"cubage watch: {str(exc).splitlines()[0]}", file=sys.stderr)
            return 2
        follow = (RunFollower(d), meta)
    else:
        try:
            files = collect_files(paths)
        except FileNotFoundError as exc:
            why = exc.args[1] if len(exc.args) > 1 else f"{exc.args[0]}: no such file or folder"
            print(f"cubage tui: {why}", file=sys.stderr)
            return 2
        if not files:
            where = ", ".join(paths) if paths else ", ".join(str(p) for p in problem_dirs())
            print(f"cubage tui: no problem files (*.toml) in {where}", file=sys.stderr)
            return 2
    app = CubageApp(files, follow=follow, allow_python=allow_python)
    rc = app.run()
    return int(rc) if isinstance(rc, int) else int(app.return_code or 0)


def _cli(argv: list[str] | None = None) -> int:
    """``python -m cubage.tui.app [PATH ...] [--watch DIR] [--allow-python]`` (the same as ``cubage tui``/``watch``)."""
    import argparse
    ap = argparse.ArgumentParser(prog="python -m cubage.tui.app", description="cubage's text UI: pick a problem and "
                                 "watch it integrate, or follow a run directory of a headless run.")
    ap.add_argument("paths", nargs="*", metavar="PATH", help="problem files or folders (default: ./problems "
                    "when present, else the bundled examples)")
    ap.add_argument("--watch", metavar="DIR", help="follow this run directory instead")
    ap.add_argument("--allow-python", action="store_true", help="import Python integrands without asking")
    args = ap.parse_args(argv)
    return main(args.paths or None, watch=args.watch, allow_python=args.allow_python)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(_cli())
