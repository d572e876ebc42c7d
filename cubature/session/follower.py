"""Following a run directory from another process: ``cubage watch DIR`` and the text UI.

:class:`RunFollower` reads what the working process appended to the trail
since the last :meth:`~RunFollower.poll`, the newest map record, the verdict
once it exists, and whether the working process is still alive.  When it is
gone without a verdict (killed, crashed, its machine rebooted), the
follower's :attr:`~RunFollower.status` is ``"runner-gone"`` and
:attr:`~RunFollower.gone_message` says how to continue (``cubage resume DIR``).
"""

from __future__ import annotations

import os
import socket
from pathlib import Path

import numpy as np

from cubage.engine.run import Snapshot
from cubage.session.jsonio import read_json_object
from cubage.session.progress_records import record_to_snapshot, with_map
from cubage.session.run_directory import (
    LEDGER,
    OCCUPANT,
    TRAIL,
    TRAIL_MAP,
    VERDICT,
    RunDir,
    pid_alive,
)

__all__ = ["RunFollower"]

_NOFOLLOW = getattr(os, "O_NOFOLLOW", 0)
#: Bytes read from the trail per poll at most (a follower far behind catches up over several polls).
READ_LIMIT = 8 << 20


class RunFollower:
    """Reads the new lines of ``DIR/trail.jsonl`` on each :meth:`poll`.

    Parameters
    ----------
    run_dir : path
        The run directory.

    Attributes
    ----------
    snapshot : Snapshot or None
        The newest snapshot rebuilt so far (history accumulated over all lines).
    result : dict or None
        The verdict (``DIR/verdict.json``) once it exists and parses.
    bad_lines : int
        Lines that could not be used (skipped; a partial last line is kept
        back until it is complete).
    last_error : str
        Why the last bad line was skipped ('' if none was).
    """

    def __init__(self, run_dir):
        self.dir = Path(run_dir)
        self.rundir = RunDir(self.dir)
        self.snapshot: Snapshot | None = None
        self.result: dict | None = None
        self.bad_lines = 0
        self.last_error = ""
        self._offset = 0
        self._partial = b""
        self._history: np.ndarray | None = None
        self._map_stamp = None
        self._gone: bool = False

    @property
    def trail_path(self) -> Path:
        """``DIR/trail.jsonl``."""
        return self.dir / TRAIL

    progress_path = trail_path

    def _read_new(self) -> bytes:
        try:
            fd = os.open(self.trail_path, os.O_RDONLY | _NOFOLLOW)
        except FileNotFoundError:
            return b""
        except OSError as exc:
            self.last_error = f"{TRAIL}: cannot read it ({exc.strerror or exc})"
            return b""
        with os.fdopen(fd, "rb") as fh:
            size = os.fstat(fh.fileno()).st_size
            if size < self._offset:  # the trail was replaced: start over
                self._offset, self._partial, self._history, self.snapshot = 0, b"", None, None
            fh.seek(self._offset)
            chunk = fh.read(READ_LIMIT)
        self._offset += len(chunk)
        return chunk

    def _new_map(self) -> dict | None:
        p = self.dir / TRAIL_MAP
        try:
            st = os.stat(p, follow_symlinks=False)
        except OSError:
            return None
        stamp = (st.st_mtime_ns, st.st_size, st.st_ino)
        if stamp == self._map_stamp:
            return None
        rec = read_json_object(p)
        if rec is None:
            return None
        self._map_stamp = stamp
        return rec

    def poll(self) -> int:
        """Take in what was appended since the last call.

        Never raises for bad content: unusable lines are counted in
        :attr:`bad_lines` and explained in :attr:`last_error`.

        Returns
        -------
        int
            The number of new snapshot lines taken in.
        """
        import json
        n = 0
        data = self._partial + self._read_new()
        lines = data.split(b"\n")
        self._partial = lines.pop()  # incomplete (or empty) tail
        map_rec = self._new_map()
        for raw in lines:
            if not raw.strip():
                continue
            try:
                rec = json.loads(raw)
                if not isinstance(rec, dict):
                    raise TypeError(f"a JSON {type(rec).__name__}, not an object")
                if rec.get("kind", "tick") != "tick":
                    continue
                snap = record_to_snapshot(rec, history=self._history, map_rec=map_rec, previous=self.snapshot)
            except (ValueError, KeyError, TypeError, IndexError, AttributeError, RecursionError) as exc:
                self.bad_lines += 1
                self.last_error = f"{TRAIL}: unreadable line skipped ({type(exc).__name__}: {exc})"[:300]
                continue
            map_rec = None
            self._history = snap.history
            self.snapshot = snap
            n += 1
        if map_rec is not None and self.snapshot is not None:
            try:
                self.snapshot = with_map(self.snapshot, map_rec)
            except (ValueError, KeyError, TypeError, IndexError) as exc:
                self.last_error = f"{TRAIL_MAP}: unreadable ({type(exc).__name__}: {exc})"[:300]
        if self.result is None:
            self.result = read_json_object(self.dir / VERDICT)
        return n

    def settings(self) -> dict:
        """The ledger (empty when missing or unreadable)."""
        return read_json_object(self.dir / LEDGER) or {}

    def runner_alive(self) -> bool | None:
        """Whether the process named in the lock is alive (None: unknown, e.g. another host).

        A missing lock reads as not alive once the ledger exists (the run has started).
        """
        lock = read_json_object(self.dir / OCCUPANT)
        if lock is None:
            if os.path.lexists(self.dir / OCCUPANT):
                return None          # being written
            return False if os.path.lexists(self.dir / LEDGER) else None
        pid = lock.get("pid")
        host = lock.get("host")
        if not isinstance(pid, int) or isinstance(pid, bool):
            return None
        if isinstance(host, str) and host and host != socket.gethostname():
            return None
        return pid_alive(pid)

    @property
    def runner_gone(self) -> bool:
        """True when the working process is gone and wrote no verdict (checked at each :meth:`poll` caller's ask)."""
        if self.result is not None:
            return False
        if self.runner_alive() is False:
            # it may have written its verdict between our two reads
            self.result = read_json_object(self.dir / VERDICT)
            return self.result is None
        return False

    @property
    def status(self) -> str:
        """The verdict's status, ``"runner-gone"``, the newest snapshot's status, or ``"waiting"``."""
        if self.result is not None:
            return str(self.result.get("status", "stopped"))
        if self.runner_gone:
            return "runner-gone"
        if self.snapshot is not None:
            return self.snapshot.status
        return "waiting"

    @property
    def gone_message(self) -> str:
        """How to go on after the runner died ('' while it lives or after a verdict)."""
        if self.status != "runner-gone":
            return ""
        return (f"the process working in {self.dir} is gone and wrote no result; "
                f"continue from its last checkpoint with: cubage resume {self.dir}")

    def request_stop(self) -> Path:
        """Create ``DIR/halt-request``; the runner checkpoints, writes its verdict and exits."""
        return self.rundir.request_stop(by=f"follower pid {os.getpid()}")

    @property
    def stop_requested(self) -> bool:
        """Whether a stop request is waiting for the runner."""
        return os.path.lexists(self.dir / "halt-request")
