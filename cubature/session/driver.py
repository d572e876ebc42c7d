"""Driving a run: the loop both front ends use, and the signal handling of a command.

:class:`RunDriver` steps an engine :class:`~cubage.engine.run.Run` to its end
in the calling thread (the command line's main thread, or a worker thread of
the text UI).  It hands every snapshot to ``on_snapshot`` (the display; a
display that raises is counted and ignored, never allowed to end the run),
keeps the run directory's trail, checkpoints on a timer and at the end, and
honours a stop from any thread (:meth:`RunDriver.stop`, a ``halt-request``
file, a signal), a pause, and goal or budget changes (:meth:`RunDriver.set_goal`;
a run that had ended by meeting its goal or spending its budget goes on
when :meth:`RunDriver.drive` is called again).

:class:`StopSignals` is installed at the very start of a command, before any
worker pool can start, and covers every phase: the first SIGINT, SIGTERM or
SIGHUP asks whatever is attached (the main run, then the second-opinion run)
to stop after its step; a second one (or one while nothing is attached)
raises :class:`KeyboardInterrupt`, the way out of a step that hangs.
"""

from __future__ import annotations

import math
import signal
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

from cubage.session.run_directory import RunDir, RunDirError, TrailLog, storage_message

__all__ = ["Outcome", "RunDriver", "StopSignals", "MAX_CHECKPOINT_SHARE"]

#: Checkpoints are spaced at least this many times the time the last one took to write.
MAX_CHECKPOINT_SHARE = 5.0


@dataclass
class Outcome:
    """What :meth:`RunDriver.drive` ended with.

    Attributes
    ----------
    result : cubage.Result
    snapshot : Snapshot
        The last snapshot.
    failure : str or None
        The integrand's failure.
    stop_reason : str or None
        ``"SIGTERM"``, ``"halt-request"``, ``"request"``, ...
    storage_error : str or None
        A run-directory write that failed (disk full, read-only, ...): the
        run was stopped and the last good checkpoint kept.
    checkpoints : int
    display_errors : int
        Snapshots the display could not show (the run went on).
    display_error : str
        The first such failure.
    """

    result: object = None
    snapshot: object = None
    failure: str | None = None
    stop_reason: str | None = None
    storage_error: str | None = None
    checkpoints: int = 0
    display_errors: int = 0
    display_error: str = ""


class RunDriver:
    """Drives one engine run; safe to control from other threads.

    Parameters
    ----------
    run : cubage.Run
    rundir : RunDir, optional
        Where to keep the trail, checkpoint and look for ``halt-request``.
    checkpoint_every : float
        Seconds between checkpoints (0 or less: only at the end).  A
        checkpoint that took long to write spaces the next ones out to at
        least :data:`MAX_CHECKPOINT_SHARE` times its duration.
    log_after : float
        History rows up to this evaluation count are already on the trail.
    on_snapshot : callable, optional
        ``on_snapshot(snapshot)`` for every snapshot, in the driving thread.
    """

    def __init__(self, run, *, rundir: RunDir | None = None, checkpoint_every: float = 60.0,
                 log_after: float = -1.0, on_snapshot: Callable | None = None):
        self.run = run
        self.rundir = rundir
        self.checkpoint_every = checkpoint_every
        self.on_snapshot = on_snapshot
        self._log_after = log_after
        self._trail: TrailLog | None = None
        self._stop_reason: str | None = None
        self._lock = threading.Lock()
        self.outcome = Outcome()

    # -- control (any thread) ---------------------------------------------------
    def stop(self, reason: str = "request") -> None:
        """Stop after the current step; the estimate is kept."""
        with self._lock:
            if self._stop_reason is None:
                self._stop_reason = reason
        self.run.stop()

    def pause(self) -> None:
        """Hold after the current step."""
        self.run.pause()

    def resume(self) -> None:
        """Go on after :meth:`pause`."""
        self.run.resume()

    @property
    def paused(self) -> bool:
        return self.run.paused

    @property
    def done(self) -> bool:
        return self.run.done

    def set_goal(self, rel_tol: float | None = None, abs_tol: float | None = None, budget: int | None = None,
                 time_limit: float | None = None) -> bool:
        """Change the goal or the budget (checked by :mod:`cubage.session.prepare`).

        Returns
        -------
        bool
            True when the run can go on (it is running, or it had ended by
            meeting its goal, spending its budget or its time and the new goal
            reopened it: call :meth:`drive` again).

        Raises
        ------
        cubage.session.prepare.InputError
        """
        from cubage.session.prepare import InputError, check_budget, check_time_limit, check_tolerance
        rel = None if rel_tol is None else check_tolerance(rel_tol, "rel_tol")
        ab = None if abs_tol is None else check_tolerance(abs_tol, "abs_tol")
        bud = None if budget is None else check_budget(budget, "budget")
        tl = None if time_limit is None else check_time_limit(time_limit, "time_limit")
        if bud is not None and bud <= self.run.evaluations:
            raise InputError(f"budget: {bud:,} is not above the {self.run.evaluations:,} evaluations already spent")
        try:
            self.run.set_goal(rel_tol=rel, abs_tol=ab, budget=bud, time_limit=tl)
        except ValueError as exc:
            raise InputError(str(exc)) from None
        if not self.run.done:
            with self._lock:
                self._stop_reason = None      # a reopened run's next ending has its own cause
        return not self.run.done

    # -- the loop ------------------------------------------------------------------
    def _show(self, snap) -> None:
        if self.on_snapshot is None:
            return
        try:
            self.on_snapshot(snap)
        except Exception as exc:  # noqa: BLE001 - a display must never end a run (issue 10 item 1)
            out = self.outcome
            out.display_errors += 1
            if not out.display_error:
                out.display_error = f"{type(exc).__name__}: {exc}"

    def _save(self) -> bool:
        try:
            self.run.save_checkpoint(self.rundir.checkpoint)
        except OSError as exc:
            self.outcome.storage_error = storage_message(self.rundir.checkpoint, exc, "be written")
            return False
        self.outcome.checkpoints += 1
        return True

    def drive(self, on_snapshot: Callable | None = None) -> Outcome:
        """Step the run to its end in this thread; returns (and keeps) the :class:`Outcome`."""
        from cubage.engine.run import IntegrandError
        if on_snapshot is not None:
            self.on_snapshot = on_snapshot
        out = self.outcome
        run, rd = self.run, self.rundir
        if rd is not None and self._trail is None:
            self._trail = TrailLog(rd, self._log_after)
        trail = self._trail
        last_ck = time.monotonic()
        last_log = -math.inf
        spacing = self.checkpoint_every
        snap = None
        try:
            for snap in run:
                now = time.monotonic()
                if rd is not None:
                    if run.done or now - last_log >= 1.0:
                        trail.write(snap, final=run.done)
                        last_log = now
                    if not run.done and rd.stop_requested():
                        self.stop("halt-request")
                    if (not run.done and self.checkpoint_every > 0 and now - last_ck >= spacing
                            and run.store is not None):
                        t0 = time.monotonic()
                        if not self._save():
                            self.stop("storage-error")
                        last_ck = time.monotonic()
                        spacing = max(self.checkpoint_every, MAX_CHECKPOINT_SHARE * (last_ck - t0))
                self._show(snap)
        except IntegrandError as exc:
            out.failure = str(exc)
            snap = run.snapshot()
            if trail is not None:
                self._trail_quietly(snap)
            self._show(snap)
        except RunDirError as exc:            # the trail or map could not be written
            out.storage_error = str(exc)
            self.stop("storage-error")
            while run.step():                 # the stop is honoured at once: no further evaluation
                pass
            snap = run.snapshot()
        with self._lock:
            out.stop_reason = self._stop_reason if run.status == "stopped" else None
        if rd is not None and out.failure is None and out.storage_error is None and run.store is not None:
            self._save()                      # the final state (after a failure the last good one stays)
        out.snapshot = snap if snap is not None else run.snapshot()
        out.result = run.result()
        return out

    def _trail_quietly(self, snap) -> None:
        try:
            self._trail.write(snap, final=True)
        except RunDirError as exc:
            self.outcome.storage_error = str(exc)

    def close(self) -> None:
        """Close the trail (never raises)."""
        if self._trail is not None:
            self._trail.close()
            self._trail = None


class StopSignals:
    """SIGINT/SIGTERM/SIGHUP handling for a whole command (use as a context manager, in the main thread).

    Install it before anything that may start a worker pool, and attach the
    run before starting the pool.  The first signal is remembered in
    :attr:`received` and passed to every attached target's ``stop(reason)``;
    a target attached later is stopped at once.  A signal while nothing is
    attached, or a second signal, raises :class:`KeyboardInterrupt` (the
    command ends quietly, exit 130).  Outside the main thread nothing is
    installed.  A signal the command was started ignoring stays ignored:
    ``nohup`` (SIGHUP) and a background job of a script (SIGINT) mean the
    run must outlive the terminal, so logging out does not stop it.
    """

    SIGNALS = ("SIGINT", "SIGTERM", "SIGHUP")

    def __init__(self):
        self.received: str | None = None
        self._targets: list = []
        self._old: dict = {}

    def _handler(self, signum, frame):
        name = signal.Signals(signum).name
        if self.received is not None or not self._targets:
            self.received = self.received or name
            raise KeyboardInterrupt     # nothing to stop cleanly (or asked twice): end the command now
        self.received = name
        for t in list(self._targets):
            try:
                t.stop(name)
            except TypeError:
                t.stop()

    def attach(self, target) -> None:
        """Send the stop to ``target`` (a RunDriver or a Run) from now on."""
        self._targets.append(target)
        if self.received is not None:
            try:
                target.stop(self.received)
            except TypeError:
                target.stop()

    def detach(self, target) -> None:
        """Stop sending to ``target``."""
        if target in self._targets:
            self._targets.remove(target)

    def __enter__(self) -> StopSignals:
        if threading.current_thread() is threading.main_thread():
            for name in self.SIGNALS:
                sig = getattr(signal, name, None)
                if sig is not None and signal.getsignal(sig) is not signal.SIG_IGN:
                    self._old[sig] = signal.signal(sig, self._handler)
        return self

    def __exit__(self, *exc) -> bool:
        for sig, old in self._old.items():
            signal.signal(sig, old)
        self._old.clear()
        return False
