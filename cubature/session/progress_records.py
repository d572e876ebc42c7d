"""Snapshots as JSON records, so that another process can follow a run.

A headless ``cubage run --run-dir DIR`` appends one record per snapshot
interval to ``DIR/progress.jsonl``; ``cubage watch DIR`` (the text UI) reads
them back into :class:`~cubage.engine.run.Snapshot` objects.  The record is our
own plain JSON layout::

    {"kind": "snapshot", "time": <unix seconds>, "step": int, "evaluations": int,
     "regions": int, "elapsed": float, "rate": float, "status": str, "message": str,
     "value": [..m], "error": [..m], "goal": [..m],
     "rel_tol": float, "abs_tol": float, "budget": int,
     "top": [{"lower": [..d], "upper": [..d], "value": [..m], "error": [..m], "depth": int,
              "vertices": [[..d] x (d+1)] or null}, ...],
     "depth_error": [...],
     "map": {"centres": [[..d], ...], "sizes": [[..d], ...], "lower": [..d], "upper": [..d]} or null,
     "history": [[evaluations, regions, value.., error..], ...]   # only the rows new since the last record
    }

Infinite numbers are written as the strings "inf"/"-inf" (JSON has none).
"""

from __future__ import annotations

import math
import time

import numpy as np

from cubage.engine.run import Snapshot, TopRegion


def _num(x: float):
    x = float(x)
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if math.isnan(x):
        return "nan"
    return x


def _list(a) -> list:
    a = np.asarray(a, dtype=float)
    if a.ndim == 0:
        return _num(a)
    return [_list(r) for r in a] if a.ndim > 1 else [_num(v) for v in a]


def _arr(v) -> np.ndarray:
    def conv(x):
        if isinstance(x, list):
            return [conv(y) for y in x]
        if isinstance(x, str):
            return float(x)
        return x
    return np.asarray(conv(v), dtype=float)


def snapshot_to_record(snap: Snapshot, *, history_from: int = 0, with_map: bool = True) -> dict:
    """A JSON-ready dict of ``snap``; ``history`` rows from index ``history_from`` on."""
    return {
        "kind": "snapshot", "time": time.time(), "step": snap.step, "evaluations": int(snap.evaluations),
        "regions": int(snap.regions), "elapsed": snap.elapsed, "rate": snap.rate, "status": snap.status,
        "message": snap.message, "value": _list(snap.value), "error": _list(snap.error),
        "goal": _list(snap.goal), "rel_tol": snap.rel_tol, "abs_tol": snap.abs_tol,
        "budget": int(snap.budget),
        "top": [{"lower": _list(t.lower), "upper": _list(t.upper), "value": _list(t.value),
                 "error": _list(t.error), "depth": t.depth,
                 "vertices": None if t.vertices is None else _list(t.vertices)} for t in snap.top],
        "depth_error": _list(snap.depth_error),
        "map": ({"centres": _list(snap.map_centres), "sizes": _list(snap.map_sizes),
                 "lower": _list(snap.map_lower), "upper": _list(snap.map_upper)} if with_map else None),
        "history": _list(snap.history[history_from:]) if len(snap.history) > history_from else [],
    }


def record_to_snapshot(rec: dict, history: np.ndarray | None = None, previous: Snapshot | None = None) -> Snapshot:
    """Rebuild a :class:`Snapshot` from a record.

    ``history``: the accumulated history rows so far (the record's own new
    rows are appended to it).  ``previous``: the last snapshot, whose map is
    reused when this record carries none.
    """
    value = _arr(rec["value"])
    m = value.size
    new = _arr(rec.get("history") or np.zeros((0, 2 + 2 * m)))
    if new.ndim == 1:
        new = new.reshape(0, 2 + 2 * m) if new.size == 0 else new[None]
    hist = new if history is None or len(history) == 0 else np.concatenate([history, new])
    tops = tuple(TopRegion(_arr(t["lower"]), _arr(t["upper"]), _arr(t["value"]), _arr(t["error"]),
                           int(t.get("depth", 0)), None if t.get("vertices") is None else _arr(t["vertices"]))
                 for t in rec.get("top", []))
    mp = rec.get("map")
    if mp is not None:
        d = len(mp["lower"])
        centres = _arr(mp["centres"]).reshape(-1, d)
        sizes = _arr(mp["sizes"]).reshape(-1, d)
        lo, hi = _arr(mp["lower"]), _arr(mp["upper"])
    elif previous is not None:
        centres, sizes, lo, hi = previous.map_centres, previous.map_sizes, previous.map_lower, previous.map_upper
    else:
        centres = sizes = np.zeros((0, 1))
        lo, hi = np.zeros(1), np.ones(1)
    return Snapshot(int(rec["step"]), int(rec["evaluations"]), value, _arr(rec["error"]), _arr(rec["goal"]),
                    int(rec["regions"]), float(rec["elapsed"]), str(rec["status"]), float(rec.get("rate", 0.0)),
                    tops, _arr(rec.get("depth_error", [])), centres, sizes, lo, hi, hist,
                    str(rec.get("message", "")), float(rec.get("rel_tol", 0.0)), float(rec.get("abs_tol", 0.0)),
                    int(rec.get("budget", 0)))
