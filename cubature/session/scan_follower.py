"""Following a scan's run directory from another process: the text UI's scan view, ``cubage watch --plain``,
``cubage plot``.

:class:`ScanFollower` is the public, read-only view of the files a scan keeps
in its run directory (written by :mod:`cubage.session.scan`): the finished
points (``scan-points.jsonl``, read incrementally, whole lines only), the
current points' live records (``scan-live-<chain>.json``), the verdict once
the scan has ended, and whether the scan's process is alive.  Its one write
is the halt request (``halt-request``), the same file ``cubage watch`` uses
for runs.  :func:`read_scan_points` reads every finished point at once.
"""

from __future__ import annotations

import os
from pathlib import Path

from cubage.session.jsonio import read_json_object
from cubage.session.run_directory import HALT_REQUEST, VERDICT
from cubage.session.scan import LIVE_FILE, POINTS_FILE, PointResult

__all__ = ["ScanFollower", "read_scan_points"]

_NOFOLLOW = getattr(os, "O_NOFOLLOW", 0)


class ScanFollower:
    """Reads what a scan's process wrote to its run directory since the last :meth:`poll`.

    Parameters
    ----------
    path : path
        The scan's run directory.

    Attributes
    ----------
    points : dict of int to PointResult
        Every finished point read so far, by grid index.
    """

    def __init__(self, path):
        self.path = Path(path)
        self.points: dict[int, PointResult] = {}
        self._offset = 0

    def poll(self) -> dict[int, PointResult]:
        """Read the points appended since the last call (a line still being written waits); :attr:`points`."""
        import json
        try:
            fd = os.open(self.path / POINTS_FILE, os.O_RDONLY | _NOFOLLOW)   # never through a link
        except OSError:
            return self.points
        with os.fdopen(fd, "rb") as fh:
            fh.seek(self._offset)
            data = fh.read()
        end = data.rfind(b"\n") + 1
        for line in data[:end].splitlines():
            try:
                pr = PointResult.from_json(json.loads(line))
            except (ValueError, KeyError, TypeError, AttributeError):
                continue                     # a line torn by a crash, before the next complete one
            self.points[pr.index] = pr
        self._offset += end
        return self.points

    def live(self) -> list[dict]:
        """The live records of the points being worked on (newest progress of each chain), finished ones left out."""
        out = []
        for f in sorted(self.path.glob(LIVE_FILE.format(chain="*"))):
            rec = read_json_object(f)
            if rec is not None and rec.get("index") not in self.points:
                out.append(rec)
        return out

    @property
    def verdict(self) -> dict | None:
        """The scan's verdict (``verdict.json``) once it has ended, else None."""
        return read_json_object(self.path / VERDICT)

    def runner_alive(self) -> bool | None:
        """Whether the scan's process is alive (None: unknown, e.g. on another host, or ended with a verdict)."""
        from cubage.session.follower import RunFollower
        alive = RunFollower(self.path).runner_alive()
        return None if alive is False and (self.path / VERDICT).is_file() else alive

    def halt(self) -> None:
        """Ask the scan's process to stop (it checkpoints its current points; ``cubage resume DIR`` continues)."""
        (self.path / HALT_REQUEST).touch()


def read_scan_points(path) -> dict[int, PointResult]:
    """Every finished point recorded in the scan's run directory ``path``, by grid index."""
    return ScanFollower(path).poll()
