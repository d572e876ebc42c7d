"""Run directories: a headless run that survives signals, crashes and logouts.

A run directory ``DIR`` holds::

    DIR/problem.toml     copy of the problem file as it was when the run started
    DIR/run.json         settings and overrides, cubage version, start time, host, pid (and resumes)
    DIR/checkpoint.npz   latest engine state (written atomically, see cubage.engine.checkpoint)
    DIR/progress.jsonl   one snapshot record per log interval (cubage.session.progress_records)
    DIR/result.json      written at the end: Result.to_json() plus reference info
    DIR/lock             {pid, host, started}: the process working in DIR
    DIR/stop-request     created by a watcher to ask the running process to stop

:class:`RunDir` owns the files; :func:`drive` runs the engine loop in the
main thread, feeding a display, the progress log and the checkpoint timer,
and turning SIGINT/SIGTERM/SIGHUP or a ``stop-request`` file into a clean
stop (checkpoint + result, status ``"stopped"``).
"""

from __future__ import annotations

import json
import math
import os
import signal
import socket
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from cubage.engine.checkpoint import write_atomic
from cubage.session.progress_records import snapshot_to_record

PROBLEM = "problem.toml"
RUN_JSON = "run.json"
CHECKPOINT = "checkpoint.npz"
PROGRESS = "progress.jsonl"
RESULT = "result.json"
LOCK = "lock"
STOP_REQUEST = "stop-request"

OUR_FILES = (PROBLEM, RUN_JSON, CHECKPOINT, PROGRESS, RESULT, LOCK, STOP_REQUEST)

#: Seconds between progress-log lines.
PROGRESS_INTERVAL = 1.0
#: Checkpoints are spaced at least this many times the time the last one took to write.
MAX_CHECKPOINT_SHARE = 5.0
#: A progress line carries the region map once every this many lines.
MAP_EVERY = 5


class RunDirError(Exception):
    """A run directory that cannot be used (in use, of another problem, ...).

    ``str(err)`` is one line naming the directory.
    """


# --------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------

def json_number(x):
    """A float for JSON: finite floats as they are, NaN/inf as ``None``."""
    x = float(x)
    return x if math.isfinite(x) else None


def json_numbers(v):
    """``json_number`` over a scalar or a 1-D sequence."""
    a = np.asarray(v, dtype=float)
    if a.ndim == 0:
        return json_number(a)
    return [json_number(x) for x in a.ravel()]


def write_json(path: Path, obj: dict) -> None:
    """Write ``obj`` as indented JSON, atomically."""
    write_atomic(Path(path), (json.dumps(obj, indent=2, allow_nan=False) + "\n").encode("utf-8"))


def _read_json(path: Path) -> dict | None:
    try:
        with open(path, encoding="utf-8") as fh:
            obj = json.load(fh)
    except (OSError, ValueError):
        return None
    return obj if isinstance(obj, dict) else None


def _proc_stat_field(pid: int, index: int) -> str | None:
    """Field ``index`` (counted after the command name) of ``/proc/<pid>/stat``, or None (Linux only)."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            return fh.read().rsplit(")", 1)[1].split()[index]
    except (OSError, IndexError):
        return None


def _proc_start(pid: int) -> str | None:
    """Start time of ``pid`` in clock ticks since boot (Linux), to tell a reused pid apart."""
    return _proc_stat_field(pid, 19)


def pid_alive(pid: int) -> bool:
    """Whether a process with this pid exists on this host (zombies count as dead)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    state = _proc_stat_field(pid, 0)
    return state is None or state not in ("Z", "X")


# --------------------------------------------------------------------------
# the directory
# --------------------------------------------------------------------------

@dataclass
class RunDir:
    """One run directory and the lock on it.

    Parameters
    ----------
    path : path
        The directory (created by :meth:`create`).
    """

    path: Path
    notes: list[str] = field(default_factory=list)
    _locked: bool = False

    def __post_init__(self):
        self.path = Path(self.path)

    def file(self, name: str) -> Path:
        return self.path / name

    @property
    def checkpoint(self) -> Path:
        return self.file(CHECKPOINT)

    # -- checks ----------------------------------------------------------------
    def check_new_run(self, fingerprint: str) -> None:
        """Refuse a directory that holds another problem's run or a resumable one.

        Raises
        ------
        RunDirError
        """
        p = self.path
        if p.exists() and not p.is_dir():
            raise RunDirError(f"--run-dir {p}: exists and is not a directory")
        if not p.is_dir():
            return
        entries = [e.name for e in p.iterdir()]
        if not entries:
            return
        info = _read_json(self.file(RUN_JSON))
        if info is None:
            foreign = [e for e in entries if e not in OUR_FILES and not e.startswith(".")]
            if foreign or self.checkpoint.exists():
                raise RunDirError(f"--run-dir {p}: not an empty folder nor a cubage run directory; "
                                  "choose a new folder")
            return
        if info.get("problem_fingerprint") != fingerprint:
            title = info.get("title") or info.get("problem_source") or "another problem"
            raise RunDirError(f"--run-dir {p}: holds a run of another problem ({title}); choose another folder")
        if self.checkpoint.exists():
            res = _read_json(self.file(RESULT))
            what = f"a finished run (status {res.get('status')})" if res and res.get("status") else "a checkpoint"
            raise RunDirError(f"--run-dir {p}: already holds {what} of this problem; "
                              f"continue it with: cubage resume {p}")

    # -- lock ------------------------------------------------------------------
    def acquire(self) -> None:
        """Take ``DIR/lock``; a lock of a dead process on this host is taken over (with a note).

        Raises
        ------
        RunDirError
            When a live process (or one on another host) holds the lock.
        """
        host = socket.gethostname()
        me = {"pid": os.getpid(), "host": host, "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
              "pid_start": _proc_start(os.getpid())}
        lock = self.file(LOCK)
        tmp = self.file(f".lock.tmp-{os.getpid()}")
        tmp.write_text(json.dumps(me) + "\n", encoding="utf-8")
        try:
            for _ in range(3):
                try:
                    os.link(tmp, lock)     # atomic: fails if the lock exists
                    self._locked = True
                    return
                except FileExistsError:
                    pass
                held = _read_json(lock)
                if held is None:
                    # half-written or garbage: give a writer a moment, then treat it as stale
                    time.sleep(0.2)
                    held = _read_json(lock)
                    if held is None:
                        self.notes.append(f"{lock}: unreadable lock file taken over")
                        lock.unlink(missing_ok=True)
                        continue
                pid = held.get("pid")
                where = held.get("host")
                if not isinstance(pid, int):
                    self.notes.append(f"{lock}: lock without a pid taken over")
                    lock.unlink(missing_ok=True)
                    continue
                if where != host:
                    raise RunDirError(f"{self.path}: in use by pid {pid} on host {where} "
                                      f"(since {held.get('started', '?')}); if that process is gone, "
                                      f"delete {lock}")
                reused = held.get("pid_start") is not None and _proc_start(pid) not in (None, held.get("pid_start"))
                if pid_alive(pid) and not reused and pid != os.getpid():
                    raise RunDirError(f"{self.path}: in use by pid {pid} (since {held.get('started', '?')}); "
                                      f"stop it first (touch {self.file(STOP_REQUEST)} or kill {pid})")
                self.notes.append(f"{self.path}: took over a stale lock of pid {pid} (no longer running)")
                lock.unlink(missing_ok=True)
            raise RunDirError(f"{self.path}: could not take the lock {lock}")
        finally:
            tmp.unlink(missing_ok=True)

    def release(self) -> None:
        """Remove the lock if this process holds it."""
        if not self._locked:
            return
        held = _read_json(self.file(LOCK))
        if held is not None and held.get("pid") == os.getpid():
            self.file(LOCK).unlink(missing_ok=True)
        self._locked = False

    # -- files -----------------------------------------------------------------
    def create(self, problem_text: str, info: dict) -> None:
        """Make the directory, take the lock, copy the problem, write run.json, start a new log."""
        self.path.mkdir(parents=True, exist_ok=True)
        self.acquire()
        write_atomic(self.file(PROBLEM), problem_text.encode("utf-8"))
        write_json(self.file(RUN_JSON), info)
        for name in (PROGRESS, RESULT, STOP_REQUEST):
            self.file(name).unlink(missing_ok=True)

    def open_existing(self) -> dict:
        """Check that this is a resumable run directory, take its lock; returns run.json.

        Raises
        ------
        RunDirError
        """
        p = self.path
        if not p.is_dir():
            raise RunDirError(f"{p}: no such run directory")
        info = _read_json(self.file(RUN_JSON))
        if info is None:
            raise RunDirError(f"{p}: not a cubage run directory (no readable {RUN_JSON})")
        if not self.file(PROBLEM).is_file():
            raise RunDirError(f"{p}: the problem copy {PROBLEM} is missing")
        if not self.checkpoint.is_file():
            raise RunDirError(f"{p}: no checkpoint yet (the run ended before its first one); "
                              f"start again with: cubage run {p / PROBLEM} --run-dir {p}")
        self.acquire()
        if self.file(STOP_REQUEST).exists():
            self.file(STOP_REQUEST).unlink(missing_ok=True)
            self.notes.append(f"{p}: removed a leftover {STOP_REQUEST}")
        return info

    def add_resume(self, info: dict, entry: dict) -> None:
        """Record one resume in run.json."""
        info = dict(info)
        info.setdefault("resumes", []).append(entry)
        write_json(self.file(RUN_JSON), info)

    def stop_requested(self) -> bool:
        """Whether a watcher asked for a stop (the request file is consumed)."""
        f = self.file(STOP_REQUEST)
        if f.exists():
            f.unlink(missing_ok=True)
            return True
        return False

    def last_logged_evaluations(self) -> float:
        """The largest evaluation count already in the progress log (history rows or records)."""
        best = -1.0
        try:
            with open(self.file(PROGRESS), encoding="utf-8") as fh:
                for line in fh:
                    try:
                        rec = json.loads(line)
                    except ValueError:
                        continue      # a line cut short by a crash
                    if not isinstance(rec, dict):
                        continue
                    for row in rec.get("history") or []:
                        if row and isinstance(row[0], (int, float)):
                            best = max(best, float(row[0]))
        except OSError:
            pass
        return best


# --------------------------------------------------------------------------
# the progress log
# --------------------------------------------------------------------------

class ProgressLog:
    """Appends snapshot records to ``progress.jsonl``, history rows only once each.

    Rows are de-duplicated by their evaluation count, so the engine's history
    thinning and a resume from an older checkpoint (after a crash) never
    repeat rows already in the file.
    """

    def __init__(self, path: Path, after_evaluations: float = -1.0):
        self.path = Path(path)
        self.after = after_evaluations
        self.lines = 0
        self._fh = open(self.path, "a", encoding="utf-8")
        # a crash can leave a line without its newline: start on a fresh line
        try:
            if self.path.stat().st_size > 0:
                with open(self.path, "rb") as fh:
                    fh.seek(-1, os.SEEK_END)
                    if fh.read(1) != b"\n":
                        self._fh.write("\n")
        except OSError:
            pass

    def write(self, snap) -> None:
        hist = snap.history
        start = 0
        if len(hist):
            start = int(np.searchsorted(hist[:, 0], self.after, side="right"))
        rec = snapshot_to_record(snap, history_from=start, with_map=(self.lines % MAP_EVERY == 0))
        if len(hist):
            self.after = max(self.after, float(hist[-1, 0]))
        self._fh.write(json.dumps(rec, separators=(",", ":")) + "\n")
        self._fh.flush()
        self.lines += 1

    def close(self) -> None:
        self._fh.close()


# --------------------------------------------------------------------------
# signals
# --------------------------------------------------------------------------

class StopSignals:
    """While active, SIGINT/SIGTERM/SIGHUP ask ``run`` to stop after its step.

    Installed only in the main thread.  A second SIGINT while stopping
    raises :class:`KeyboardInterrupt` (the way out of a step that hangs).
    """

    SIGNALS = ("SIGINT", "SIGTERM", "SIGHUP")

    def __init__(self, run):
        self.run = run
        self.received: str | None = None
        self._old: dict = {}

    def _handler(self, signum, frame):
        name = signal.Signals(signum).name
        if self.received is not None and signum == signal.SIGINT:
            raise KeyboardInterrupt
        self.received = name
        self.run.stop()

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            for name in self.SIGNALS:
                sig = getattr(signal, name, None)
                if sig is not None:
                    self._old[sig] = signal.signal(sig, self._handler)
        return self

    def __exit__(self, *exc):
        for sig, old in self._old.items():
            signal.signal(sig, old)
        self._old.clear()
        return False


# --------------------------------------------------------------------------
# the loop
# --------------------------------------------------------------------------

@dataclass
class Outcome:
    """What :func:`drive` ended with."""

    result: object                      # cubage.Result
    snapshot: object                    # the last Snapshot
    failure: str | None = None          # IntegrandError message
    stop_reason: str | None = None      # "SIGTERM", "stop-request", ...
    checkpoints: int = 0


def drive(run, *, rundir: RunDir | None = None, on_snapshot: Callable | None = None,
          checkpoint_every: float = 60.0, log_after: float = -1.0) -> Outcome:
    """Run ``run`` to its end in this thread.

    Parameters
    ----------
    run : cubage.Run
    rundir : RunDir, optional
        Where to log progress, checkpoint every ``checkpoint_every`` seconds
        and at the end, and look for ``stop-request``.
    on_snapshot : callable, optional
        Called with every snapshot (about 4 per second) — the display.
    checkpoint_every : float
        Seconds between checkpoints (0 or less: only at the end).  When a
        checkpoint takes long to write, the next one waits at least
        ``MAX_CHECKPOINT_SHARE`` times as long, so that writing stays a
        small part of the run.
    log_after : float
        History rows up to this evaluation count are already in the log.

    Returns
    -------
    Outcome
    """
    from cubage.engine.run import IntegrandError

    log = ProgressLog(rundir.file(PROGRESS), log_after) if rundir is not None else None
    out = Outcome(result=None, snapshot=None)
    last_log = -math.inf
    last_ck = time.monotonic()
    spacing = checkpoint_every
    snap = None
    try:
        with StopSignals(run) as sigs:
            try:
                for snap in run:
                    now = time.monotonic()
                    if rundir is not None:
                        if run.done or now - last_log >= PROGRESS_INTERVAL:
                            log.write(snap)
                            last_log = now
                        if not run.done and out.stop_reason is None and rundir.stop_requested():
                            out.stop_reason = "stop-request"
                            run.stop()
                        if (not run.done and checkpoint_every > 0 and now - last_ck >= spacing
                                and run.store is not None):
                            t0 = time.monotonic()
                            run.save_checkpoint(rundir.checkpoint)
                            out.checkpoints += 1
                            last_ck = time.monotonic()
                            # big states take long to write: keep checkpointing under ~1/5 of the time
                            spacing = max(checkpoint_every, MAX_CHECKPOINT_SHARE * (last_ck - t0))
                    if on_snapshot is not None:
                        on_snapshot(snap)
            except IntegrandError as exc:
                out.failure = str(exc)
                snap = run.snapshot()
                if log is not None:
                    log.write(snap)
                if on_snapshot is not None:
                    on_snapshot(snap)
            if out.stop_reason is None and sigs.received is not None:
                out.stop_reason = sigs.received
            # the end: a checkpoint of the final state (not of a failed step: the last good one stays)
            if rundir is not None and out.failure is None and run.store is not None:
                run.save_checkpoint(rundir.checkpoint)
                out.checkpoints += 1
    finally:
        if log is not None:
            log.close()
    out.snapshot = snap if snap is not None else run.snapshot()
    out.result = run.result()
    return out
