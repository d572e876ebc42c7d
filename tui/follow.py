"""Following a run directory written by a headless ``cubage run --run-dir DIR``.

The directory layout is the project's shared contract: ``problem.toml``,
``run.json``, ``checkpoint.npz``, ``progress.jsonl`` (one snapshot record
per line, see :mod:`cubage.session.progress_records`), ``result.json`` at the end, ``lock``
and ``stop-request`` (created here to ask the runner to stop).
"""

from __future__ import annotations

import json
import os
import socket
import time
from pathlib import Path

import numpy as np

from cubage.engine.run import Snapshot
from cubage.session.progress_records import record_to_snapshot
from cubage.session.run_directory import pid_alive

PROGRESS = "progress.jsonl"
RESULT = "result.json"
PROBLEM = "problem.toml"
SETTINGS = "run.json"
LOCK = "lock"
STOP_REQUEST = "stop-request"


class RunDirFollower:
    """Reads the new lines of ``DIR/progress.jsonl`` on each :meth:`poll`.

    Parameters
    ----------
    run_dir : path
        The run directory.

    Attributes
    ----------
    snapshot : Snapshot or None
        The newest snapshot rebuilt so far (history accumulated over all lines).
    result : dict or None
        The content of ``result.json`` once it exists and parses.
    bad_lines : int
        Lines that could not be parsed (skipped; a partial last line is
        kept back until it is complete).
    """

    def __init__(self, run_dir):
        self.dir = Path(run_dir)
        self.snapshot: Snapshot | None = None
        self.result: dict | None = None
        self.bad_lines = 0
        self.last_error = ""
        self._offset = 0
        self._partial = b""
        self._history: np.ndarray | None = None

    @property
    def progress_path(self) -> Path:
        return self.dir / PROGRESS

    def poll(self) -> int:
        """Read what was appended since the last call.

        Returns
        -------
        int
            The number of new snapshot records taken in.
        """
        n = 0
        try:
            with open(self.progress_path, "rb") as fh:
                size = os.fstat(fh.fileno()).st_size
                if size < self._offset:  # the file was replaced: start over
                    self._offset, self._partial, self._history, self.snapshot = 0, b"", None, None
                fh.seek(self._offset)
                chunk = fh.read()
                self._offset += len(chunk)
        except FileNotFoundError:
            chunk = b""
        data = self._partial + chunk
        lines = data.split(b"\n")
        self._partial = lines.pop()  # incomplete (or empty) tail
        for raw in lines:
            if not raw.strip():
                continue
            try:
                rec = json.loads(raw)
                if rec.get("kind", "snapshot") != "snapshot":
                    continue
                snap = record_to_snapshot(rec, history=self._history, previous=self.snapshot)
            except (ValueError, KeyError, TypeError) as exc:
                self.bad_lines += 1
                self.last_error = f"{PROGRESS}: unreadable line skipped ({type(exc).__name__}: {exc})"
                continue
            self._history = snap.history
            self.snapshot = snap
            n += 1
        if self.result is None:
            self.result = self._read_result()
        return n

    def _read_result(self) -> dict | None:
        p = self.dir / RESULT
        try:
            return json.loads(p.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None

    def settings(self) -> dict:
        """``run.json`` (empty when missing or unreadable)."""
        try:
            d = json.loads((self.dir / SETTINGS).read_text(encoding="utf-8"))
            return d if isinstance(d, dict) else {}
        except (OSError, ValueError):
            return {}

    def runner_alive(self) -> bool | None:
        """Whether the process named in ``DIR/lock`` is alive (None: unknown, e.g. another host)."""
        try:
            lock = json.loads((self.dir / LOCK).read_text(encoding="utf-8"))
            pid = int(lock["pid"])
            host = str(lock.get("host", ""))
        except (OSError, ValueError, KeyError, TypeError):
            return None
        if host and host != socket.gethostname():
            return None
        return pid_alive(pid)

    def request_stop(self) -> Path:
        """Create ``DIR/stop-request``; the runner checkpoints, writes its result and exits."""
        p = self.dir / STOP_REQUEST
        p.write_text(json.dumps({"requested": time.time(), "by": f"tui pid {os.getpid()}",
                                 "host": socket.gethostname()}) + "\n", encoding="utf-8")
        return p

    @property
    def stop_requested(self) -> bool:
        return (self.dir / STOP_REQUEST).exists()
