"""Run directories: a headless run that survives signals, crashes and logouts.

A run directory ``DIR`` holds (layout ``cubage-run-dir 2``)::

    DIR/source.toml      the problem file as it was when the run started
    DIR/ledger.json      layout tag, settings and overrides, cubage version, and one entry per
                         working session (the start and every resume: time, host, pid)
    DIR/partition.npz    the engine's state, i.e. the current partition (see cubage.engine.checkpoint)
    DIR/trail.jsonl      one small line per second: totals and new history rows (progress_records)
    DIR/trail-map.json   the newest region map and worst regions, rewritten every few seconds
    DIR/verdict.json     the result record (cubage.session.result_record) once the run ends
    DIR/occupant.json    {pid, host, started}: the process working in DIR (the lock)
    DIR/halt-request     made by a follower to ask the working process to stop

Every file is written atomically (temporary file, fsync, rename) except the
trail, which is appended to; no file is ever followed if it is a symbolic
link (a run directory whose files are links is refused).  Directories of the
older layout (``run.json``, ``progress.jsonl``, ...) are refused with a
message that says so.

:class:`RunDir` owns the files and the lock; :class:`TrailLog` writes the
trail and the map record.  Driving the run is :mod:`cubage.session.driver`;
following it from another process is :mod:`cubage.session.follower`.
"""

from __future__ import annotations

import errno
import math
import os
import socket
import stat
import time
from dataclasses import dataclass, field
from pathlib import Path

from cubage.session.jsonio import dumps, read_json_object, write_atomic, write_json

__all__ = ["LAYOUT", "SOURCE", "LEDGER", "PARTITION", "TRAIL", "TRAIL_MAP", "VERDICT", "OCCUPANT",
           "HALT_REQUEST", "OUR_FILES", "OLD_LAYOUT_FILES", "RunDir", "RunDirError", "TrailLog", "pid_alive",
           "PROGRESS_INTERVAL", "MAP_INTERVAL", "storage_message"]

LAYOUT = "cubage-run-dir 2"

SOURCE = "source.toml"
LEDGER = "ledger.json"
PARTITION = "partition.npz"
TRAIL = "trail.jsonl"
TRAIL_MAP = "trail-map.json"
VERDICT = "verdict.json"
OCCUPANT = "occupant.json"
HALT_REQUEST = "halt-request"

OUR_FILES = (SOURCE, LEDGER, PARTITION, TRAIL, TRAIL_MAP, VERDICT, OCCUPANT, HALT_REQUEST)
#: The files of the first layout (refused with a clear message).
OLD_LAYOUT_FILES = ("run.json", "progress.jsonl", "checkpoint.npz", "problem.toml", "result.json")

#: Seconds between trail lines.
PROGRESS_INTERVAL = 1.0
#: Seconds between rewrites of the map record.
MAP_INTERVAL = 5.0

_NOFOLLOW = getattr(os, "O_NOFOLLOW", 0)
_CLOEXEC = getattr(os, "O_CLOEXEC", 0)


class RunDirError(Exception):
    """A run directory that cannot be used (in use, of another problem, unwritable, ...).

    ``str(err)`` is one line naming the directory or file and the cause.
    """


def storage_message(path, exc: OSError, what: str) -> str:
    """One line for an OSError on ``path``: ``"<path>: cannot <what>: <cause>"``."""
    cause = exc.strerror or str(exc)
    if exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        cause += " (the disk is full or over quota)"
    elif exc.errno == errno.EROFS and "read-only" not in cause.lower():
        cause += " (read-only file system)"
    return f"{path}: cannot {what}: {cause}"


# --------------------------------------------------------------------------
# processes
# --------------------------------------------------------------------------

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
    if not isinstance(pid, int) or isinstance(pid, bool) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except (OverflowError, OSError):
        return False
    state = _proc_stat_field(pid, 0)
    return state is None or state not in ("Z", "X")


def _now() -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%S%z")


# --------------------------------------------------------------------------
# the directory
# --------------------------------------------------------------------------

@dataclass
class RunDir:
    """One run directory and the lock on it.

    Parameters
    ----------
    path : path
        The directory (made by :meth:`create`).

    Attributes
    ----------
    notes : list of str
        One-line notes for the user (a stale lock taken over, ...).
    """

    path: Path
    notes: list[str] = field(default_factory=list)
    _locked: bool = False

    def __post_init__(self):
        self.path = Path(self.path)

    def file(self, name: str) -> Path:
        """``DIR/name``."""
        return self.path / name

    @property
    def checkpoint(self) -> Path:
        """``DIR/partition.npz``."""
        return self.file(PARTITION)

    # -- checks ----------------------------------------------------------------
    def _refuse_links(self) -> None:
        for name in OUR_FILES:
            f = self.file(name)
            try:
                st = os.lstat(f)
            except FileNotFoundError:
                continue
            except OSError as exc:
                raise RunDirError(storage_message(f, exc, "be examined")) from None
            if stat.S_ISLNK(st.st_mode):
                raise RunDirError(f"{f}: is a symbolic link; cubage never follows links out of a run directory "
                                  "(replace it by a regular file or use a new folder)")
            if name != HALT_REQUEST and not stat.S_ISREG(st.st_mode):
                raise RunDirError(f"{f}: is not a regular file")

    def _refuse_old_layout(self, ledger: dict | None) -> None:
        if ledger is None and any(os.path.lexists(self.file(n)) for n in OLD_LAYOUT_FILES):
            raise RunDirError(f"{self.path}: a run directory of an older cubage layout (run.json, progress.jsonl, "
                              f"checkpoint.npz); this version cannot continue it: start again with "
                              f"cubage run {self.file('problem.toml')} --run-dir NEW_FOLDER")

    def _read_ledger(self) -> dict | None:
        led = read_json_object(self.file(LEDGER))
        if led is not None and led.get("layout") != LAYOUT:
            raise RunDirError(f"{self.file(LEDGER)}: not a ledger of this cubage layout (layout "
                              f"{led.get('layout')!r}, expected {LAYOUT!r})")
        return led

    def occupant(self) -> dict | None:
        """The lock's content, or None."""
        return read_json_object(self.file(OCCUPANT))

    def live_occupant(self) -> dict | None:
        """The lock's content when it names a live process (or one on another host), else None."""
        held = self.occupant()
        if held is None or not isinstance(held.get("pid"), int):
            return None
        if held.get("host") != socket.gethostname():
            return held
        reused = held.get("pid_start") is not None and _proc_start(held["pid"]) not in (None, held.get("pid_start"))
        if pid_alive(held["pid"]) and not reused and held["pid"] != os.getpid():
            return held
        return None

    def _in_use_message(self, held: dict) -> str:
        where = "" if held.get("host") == socket.gethostname() else f" on host {held.get('host')}"
        return (f"{self.path}: in use by pid {held.get('pid')}{where} (since {held.get('started', '?')}); "
                f"follow it with: cubage watch {self.path}; stop it with: touch {self.file(HALT_REQUEST)}; "
                "or give this run another --run-dir")

    def check_new_run(self, fingerprint: str) -> None:
        """Refuse a directory that holds another problem's run, a resumable one, or one in use.

        Raises
        ------
        RunDirError
        """
        p = self.path
        try:
            if p.exists() and not p.is_dir():
                raise RunDirError(f"--run-dir {p}: exists and is not a directory")
            if not p.is_dir():
                for parent in p.parents:
                    if parent.exists():
                        if not parent.is_dir():
                            raise RunDirError(f"--run-dir {p}: {parent} is a file, not a folder")
                        break
                return
            entries = [e.name for e in p.iterdir()]
        except OSError as exc:
            raise RunDirError(storage_message(p, exc, "be read")) from None
        if not entries:
            return
        self._refuse_links()
        ledger = self._read_ledger()
        self._refuse_old_layout(ledger)
        if ledger is None:
            foreign = [e for e in entries if e not in OUR_FILES and not e.startswith(".")]
            if foreign or os.path.lexists(self.checkpoint):
                raise RunDirError(f"--run-dir {p}: not an empty folder nor a cubage run directory; "
                                  "choose a new folder")
            return
        held = self.live_occupant()
        if held is not None:
            raise RunDirError(self._in_use_message(held))
        if ledger.get("problem_fingerprint") != fingerprint:
            title = ledger.get("title") or ledger.get("problem_source") or "another problem"
            raise RunDirError(f"--run-dir {p}: holds a run of another problem ({title}); choose another folder")
        if self.checkpoint.exists():
            res = read_json_object(self.file(VERDICT))
            what = f"a finished run (status {res.get('status')})" if res and res.get("status") else "a checkpoint"
            raise RunDirError(f"--run-dir {p}: already holds {what} of this problem; "
                              f"continue it with: cubage resume {p}")

    # -- lock ------------------------------------------------------------------
    def acquire(self) -> None:
        """Take ``DIR/occupant.json``; a lock of a dead process on this host is taken over (with a note).

        Raises
        ------
        RunDirError
            When a live process (or one on another host) holds the lock, or the folder is not writable.
        """
        me = {"pid": os.getpid(), "host": socket.gethostname(), "started": _now(),
              "pid_start": _proc_start(os.getpid())}
        lock = self.file(OCCUPANT)
        tmp = self.file(f".{OCCUPANT}.tmp-{os.getpid()}")
        try:
            tmp.unlink(missing_ok=True)
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | _NOFOLLOW | _CLOEXEC, 0o644)
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                fh.write(dumps(me) + "\n")
        except OSError as exc:
            raise RunDirError(storage_message(self.path, exc, "write in the run directory")) from None
        try:
            for _ in range(3):
                try:
                    os.link(tmp, lock, follow_symlinks=False)     # atomic: fails if the lock exists
                    self._locked = True
                    return
                except FileExistsError:
                    pass
                except OSError as exc:
                    raise RunDirError(storage_message(lock, exc, "take the lock")) from None
                if os.path.islink(lock):
                    raise RunDirError(f"{lock}: is a symbolic link; cubage never follows links out of a run "
                                      "directory")
                held = self.occupant()
                if held is None:
                    time.sleep(0.2)           # half-written: give its writer a moment, then call it stale
                    held = self.occupant()
                    if held is None:
                        self.notes.append(f"{lock}: unreadable lock file taken over")
                        lock.unlink(missing_ok=True)
                        continue
                pid = held.get("pid")
                if not isinstance(pid, int) or isinstance(pid, bool):
                    self.notes.append(f"{lock}: lock without a pid taken over")
                    lock.unlink(missing_ok=True)
                    continue
                live = self.live_occupant()
                if live is not None:
                    raise RunDirError(self._in_use_message(live))
                if pid == os.getpid():
                    self._locked = True
                    return
                self.notes.append(f"{self.path}: took over a stale lock of pid {pid} (no longer running)")
                lock.unlink(missing_ok=True)
            raise RunDirError(f"{self.path}: could not take the lock {lock}")
        finally:
            try:
                tmp.unlink(missing_ok=True)
            except OSError:
                pass

    def release(self) -> None:
        """Remove the lock if this process holds it.  Never raises (it runs while another error is reported)."""
        if not self._locked:
            return
        self._locked = False
        try:
            held = self.occupant()
            if held is not None and held.get("pid") == os.getpid():
                self.file(OCCUPANT).unlink(missing_ok=True)
        except OSError:
            pass

    # -- files -----------------------------------------------------------------
    def create(self, problem_text: str, ledger: dict) -> None:
        """Make the directory, take the lock, copy the problem, write the ledger, start a new trail."""
        try:
            self.path.mkdir(parents=True, exist_ok=True)
        except FileExistsError:
            raise RunDirError(f"--run-dir {self.path}: exists and is not a directory") from None
        except NotADirectoryError:
            raise RunDirError(f"--run-dir {self.path}: a part of this path is a file, not a folder") from None
        except OSError as exc:
            raise RunDirError(storage_message(self.path, exc, "be made")) from None
        self._refuse_links()
        self.acquire()
        try:
            write_atomic(self.file(SOURCE), problem_text.encode("utf-8"))
            write_json(self.file(LEDGER), {"layout": LAYOUT, **ledger})
            for name in (TRAIL, TRAIL_MAP, VERDICT, HALT_REQUEST):
                self.file(name).unlink(missing_ok=True)
        except OSError as exc:
            raise RunDirError(storage_message(self.path, exc, "write in the run directory")) from None

    def open_existing(self) -> dict:
        """Check that this is a resumable run directory and take its lock; returns the ledger.

        Raises
        ------
        RunDirError
        """
        p = self.path
        if not p.is_dir():
            if p.exists():
                raise RunDirError(f"{p}: not a folder")
            raise RunDirError(f"{p}: no such run directory")
        self._refuse_links()
        ledger = self._read_ledger()
        self._refuse_old_layout(ledger)
        if ledger is None:
            raise RunDirError(f"{p}: not a cubage run directory (no readable {LEDGER})")
        _check_ledger(self.file(LEDGER), ledger)
        if not self.file(SOURCE).is_file():
            raise RunDirError(f"{p}: the problem copy {SOURCE} is missing")
        if not self.checkpoint.is_file():
            raise RunDirError(f"{p}: no checkpoint yet (the run ended before its first one); "
                              f"start again with: cubage run {p / SOURCE} --run-dir {p}")
        held = self.live_occupant()
        if held is not None:
            raise RunDirError(self._in_use_message(held).replace("; or give this run another --run-dir", ""))
        self.acquire()
        try:
            if os.path.lexists(self.file(HALT_REQUEST)):
                self.file(HALT_REQUEST).unlink(missing_ok=True)
                self.notes.append(f"{p}: removed a leftover {HALT_REQUEST}")
        except OSError as exc:
            raise RunDirError(storage_message(self.file(HALT_REQUEST), exc, "be removed")) from None
        return ledger

    def add_session(self, ledger: dict, entry: dict) -> dict:
        """Record one working session (a resume) in the ledger; returns the new ledger."""
        ledger = dict(ledger)
        ledger["sessions"] = [*ledger.get("sessions", []), entry]
        self.write_file(LEDGER, ledger)
        return ledger

    def write_file(self, name: str, obj: dict) -> None:
        """Write one of the JSON files atomically; an OSError becomes a one-line RunDirError."""
        try:
            write_json(self.file(name), obj)
        except OSError as exc:
            raise RunDirError(storage_message(self.file(name), exc, "be written")) from None

    def clear_verdict(self) -> None:
        """Remove the verdict (a follower must not take an old ending for the new session's)."""
        try:
            self.file(VERDICT).unlink(missing_ok=True)
        except OSError as exc:
            raise RunDirError(storage_message(self.file(VERDICT), exc, "be removed")) from None

    def read_source(self) -> str:
        """The problem copy's text."""
        f = self.file(SOURCE)
        try:
            fd = os.open(f, os.O_RDONLY | _NOFOLLOW | _CLOEXEC)
            with os.fdopen(fd, "rb") as fh:
                return fh.read().decode("utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise RunDirError(f"{f}: cannot read the problem copy ({exc})") from None

    def stop_requested(self) -> bool:
        """Whether a follower asked for a stop (the request file is consumed)."""
        f = self.file(HALT_REQUEST)
        if os.path.lexists(f):
            try:
                f.unlink(missing_ok=True)
            except OSError:
                pass
            return True
        return False

    def request_stop(self, by: str = "") -> Path:
        """Create ``DIR/halt-request``: the working process checkpoints, writes its verdict and exits."""
        f = self.file(HALT_REQUEST)
        try:
            fd = os.open(f, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | _NOFOLLOW | _CLOEXEC, 0o644)
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                fh.write(dumps({"requested": time.time(), "by": by or f"pid {os.getpid()}",
                                "host": socket.gethostname()}) + "\n")
        except OSError as exc:
            raise RunDirError(storage_message(f, exc, "be written")) from None
        return f

    def last_logged_evaluations(self) -> float:
        """The largest evaluation count already on the trail (history rows)."""
        best = -1.0
        try:
            fd = os.open(self.file(TRAIL), os.O_RDONLY | _NOFOLLOW | _CLOEXEC)
        except OSError:
            return best
        import json
        with os.fdopen(fd, "rb") as fh:
            for line in fh:
                try:
                    rec = json.loads(line)
                except (ValueError, RecursionError):
                    continue      # a line cut short by a crash
                if not isinstance(rec, dict) or not isinstance(rec.get("rows"), list):
                    continue
                for row in rec["rows"]:
                    if isinstance(row, list) and row and isinstance(row[0], (int, float)) \
                            and not isinstance(row[0], bool):
                        best = max(best, float(row[0]))
        return best


_LEDGER_TYPES = {"problem": (str,), "title": (str,), "problem_source": (str, type(None)),
                 "problem_fingerprint": (str,), "overrides": (dict,), "sessions": (list,),
                 "allow_python": (bool,)}


def _check_ledger(path: Path, ledger: dict) -> None:
    for key, types in _LEDGER_TYPES.items():
        if key in ledger and not isinstance(ledger[key], types):
            want = " or ".join("null" if t is type(None) else {"str": "a string", "dict": "an object",
                                                                  "list": "a list", "bool": "true/false"}[t.__name__]
                               for t in types)
            raise RunDirError(f"{path}: key {key!r} must be {want}, not {type(ledger[key]).__name__} "
                              "(the file was edited or damaged)")


# --------------------------------------------------------------------------
# the trail
# --------------------------------------------------------------------------

class TrailLog:
    """Appends trail lines to ``DIR/trail.jsonl`` and rewrites ``DIR/trail-map.json``.

    History rows are written once each (rows up to ``after_evaluations`` are
    already on the trail, e.g. before a resume), at most
    :data:`~cubage.session.progress_records.ROWS_PER_LINE` per line.

    Raises
    ------
    RunDirError
        When the trail cannot be opened (a link, a read-only folder, ...).
    """

    def __init__(self, rundir: RunDir, after_evaluations: float = -1.0, map_interval: float = MAP_INTERVAL):
        self.rundir = rundir
        self.path = rundir.file(TRAIL)
        self.after = after_evaluations
        self.lines = 0
        self.map_interval = map_interval
        self._last_map = -math.inf
        try:
            fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT | _NOFOLLOW | _CLOEXEC, 0o644)
        except OSError as exc:
            if exc.errno == errno.ELOOP:
                raise RunDirError(f"{self.path}: is a symbolic link; cubage never follows links out of a run "
                                  "directory") from None
            raise RunDirError(storage_message(self.path, exc, "be opened for writing")) from None
        self._fh = os.fdopen(fd, "a", encoding="utf-8")
        try:   # a crash can leave a line without its newline: start on a fresh line
            size = os.fstat(fd).st_size
            if size > 0:
                rfd = os.open(self.path, os.O_RDONLY | _NOFOLLOW | _CLOEXEC)
                with os.fdopen(rfd, "rb") as fh:
                    fh.seek(-1, os.SEEK_END)
                    if fh.read(1) != b"\n":
                        self._fh.write("\n")
        except OSError:
            pass

    def write(self, snap, *, final: bool = False) -> None:
        """One trail line for ``snap`` (and the map record when due, or at the end)."""
        from cubage.session.progress_records import map_record, new_rows, trail_line
        now = time.monotonic()
        if final or now - self._last_map >= self.map_interval:
            self.rundir.write_file(TRAIL_MAP, map_record(snap))
            self._last_map = now
        rows = new_rows(snap.history, self.after)
        if len(rows):
            self.after = max(self.after, float(rows[-1, 0]))
        try:
            self._fh.write(dumps(trail_line(snap, rows)) + "\n")
            self._fh.flush()
        except OSError as exc:
            raise RunDirError(storage_message(self.path, exc, "be written")) from None
        self.lines += 1

    def close(self) -> None:
        """Close the trail (never raises)."""
        try:
            self._fh.close()
        except OSError:
            pass
