"""Snapshots as JSON, so that another process can follow a run: the trail line and the map record.

A headless ``cubage run --run-dir DIR`` appends one *trail line* per second
to ``DIR/trail.jsonl`` and rewrites the *map record* ``DIR/trail-map.json``
every few seconds (atomically); a follower
(:class:`cubage.session.follower.RunFollower`, used by ``cubage watch`` and
the text UI) rebuilds :class:`~cubage.engine.run.Snapshot` objects from them.

A trail line is small and of constant size (issue 10 item 10): the running
totals and at most :data:`ROWS_PER_LINE` new convergence-history rows (a
delta: only rows newer than the previous line's, thinned evenly when more
arrived)::

    {"kind": "tick", "t": <unix seconds>, "step": int, "evaluations": int, "regions": int,
     "elapsed": float, "rate": float, "status": str, "message": str (at most 400 characters),
     "value": [..m], "error": [..m], "goal": [..m], "rel_tol": float, "abs_tol": float, "budget": int,
     "rows": [[evaluations, regions, value.., error..], ...]}

The map record holds what is large and only needed as its newest state::

    {"kind": "map", "t": ..., "evaluations": int,
     "top": [{"lower": [..d], "upper": [..d], "value": [..m], "error": [..m], "depth": int,
              "vertices": [[..d] x (d+1)] or null}, ...],
     "depth_error": [...],
     "map": {"centres": [[..d], ...], "sizes": [[..d], ...], "lower": [..d], "upper": [..d]}}

Non-finite numbers follow the project's one rule (:mod:`cubage.session.jsonio`).
"""

from __future__ import annotations

import time

import numpy as np

from cubage.engine.run import Snapshot, TopRegion
from cubage.session.jsonio import json_safe, number_from_json

__all__ = ["ROWS_PER_LINE", "MESSAGE_CHARS", "trail_line", "map_record", "record_to_snapshot", "new_rows", "with_map"]

#: At most this many history rows ride on one trail line.
ROWS_PER_LINE = 4
#: Messages are cut to this many characters on a trail line.
MESSAGE_CHARS = 400


def _arr(v) -> np.ndarray:
    def conv(x):
        if isinstance(x, list):
            return [conv(y) for y in x]
        if isinstance(x, (str, type(None))):
            return number_from_json(x)
        if isinstance(x, bool) or not isinstance(x, (int, float)):
            raise TypeError(f"expected a number, got {type(x).__name__}")
        return x
    return np.asarray(conv(v), dtype=float)


def new_rows(history: np.ndarray, after: float, limit: int = ROWS_PER_LINE) -> np.ndarray:
    """History rows with an evaluation count above ``after``, thinned evenly to ``limit`` (always the newest)."""
    h = np.asarray(history, dtype=float)
    if h.ndim != 2 or len(h) == 0:
        return np.zeros((0, h.shape[1] if h.ndim == 2 else 0))
    start = int(np.searchsorted(h[:, 0], after, side="right"))
    rows = h[start:]
    if len(rows) > limit:
        pick = np.unique(np.linspace(0, len(rows) - 1, limit).round().astype(np.int64))
        rows = rows[pick]
    return rows


def trail_line(snap: Snapshot, rows: np.ndarray | None = None) -> dict:
    """The trail line of ``snap`` carrying ``rows`` (default: the last history row)."""
    if rows is None:
        rows = snap.history[-1:] if len(snap.history) else np.zeros((0, 2 + 2 * snap.components))
    msg = snap.message if len(snap.message) <= MESSAGE_CHARS else snap.message[: MESSAGE_CHARS - 1] + "…"
    return json_safe({
        "kind": "tick", "t": round(time.time(), 3), "step": int(snap.step), "evaluations": int(snap.evaluations),
        "regions": int(snap.regions), "elapsed": float(snap.elapsed), "rate": float(snap.rate),
        "status": snap.status, "message": msg, "value": np.asarray(snap.value, float),
        "error": np.asarray(snap.error, float), "goal": np.atleast_1d(np.asarray(snap.goal, float)),
        "rel_tol": float(snap.rel_tol), "abs_tol": float(snap.abs_tol), "budget": int(snap.budget),
        "rows": np.asarray(rows, float),
    })


def map_record(snap: Snapshot) -> dict:
    """The map record of ``snap`` (worst regions, error by depth, region map)."""
    return json_safe({
        "kind": "map", "t": round(time.time(), 3), "evaluations": int(snap.evaluations),
        "top": [{"lower": t.lower, "upper": t.upper, "value": t.value, "error": t.error, "depth": int(t.depth),
                 "vertices": t.vertices} for t in snap.top],
        "depth_error": np.asarray(snap.depth_error, float),
        "map": {"centres": snap.map_centres, "sizes": snap.map_sizes, "lower": snap.map_lower,
                "upper": snap.map_upper},
    })


def _map_parts(map_rec: dict):
    if not isinstance(map_rec, dict):
        raise TypeError(f"a map record is a JSON object, got {type(map_rec).__name__}")
    tops = tuple(TopRegion(_arr(t["lower"]), _arr(t["upper"]), _arr(t["value"]), _arr(t["error"]),
                           int(t.get("depth", 0)), None if t.get("vertices") is None else _arr(t["vertices"]))
                 for t in map_rec.get("top", []))
    depth_err = _arr(map_rec.get("depth_error", []))
    mp = map_rec["map"]
    d = len(mp["lower"])
    centres = _arr(mp["centres"]).reshape(-1, d)
    sizes = _arr(mp["sizes"]).reshape(-1, d)
    return tops, depth_err, centres, sizes, _arr(mp["lower"]), _arr(mp["upper"])


def with_map(snap: Snapshot, map_rec: dict) -> Snapshot:
    """``snap`` with the worst regions, error by depth and region map of ``map_rec``."""
    import dataclasses
    tops, depth_err, centres, sizes, lo, hi = _map_parts(map_rec)
    return dataclasses.replace(snap, top=tops, depth_error=depth_err, map_centres=centres, map_sizes=sizes,
                               map_lower=lo, map_upper=hi)


def record_to_snapshot(line: dict, history: np.ndarray | None = None, map_rec: dict | None = None,
                       previous: Snapshot | None = None) -> Snapshot:
    """Rebuild a :class:`Snapshot` from a trail line.

    Parameters
    ----------
    line : dict
        A trail line.
    history : ndarray, optional
        The history rows accumulated so far; the line's own rows are appended.
    map_rec : dict, optional
        The newest map record; without one the previous snapshot's map and
        worst regions are kept.
    previous : Snapshot, optional

    Raises
    ------
    KeyError, TypeError, ValueError
        A line that is not a trail line.
    """
    if not isinstance(line, dict):
        raise TypeError(f"a trail line is a JSON object, got {type(line).__name__}")
    value = _arr(line["value"]).reshape(-1)
    m = value.size
    new = _arr(line.get("rows") or [])
    new = new.reshape(-1, 2 + 2 * m) if new.size else np.zeros((0, 2 + 2 * m))
    if history is not None and len(history) and history.shape[1] == new.shape[1]:
        hist = np.concatenate([history, new])
    else:
        hist = new
    if map_rec is not None:
        tops, depth_err, centres, sizes, lo, hi = _map_parts(map_rec)
    elif previous is not None:
        tops, depth_err = previous.top, previous.depth_error
        centres, sizes, lo, hi = previous.map_centres, previous.map_sizes, previous.map_lower, previous.map_upper
    else:
        tops, depth_err = (), np.zeros(0)
        centres = sizes = np.zeros((0, 1))
        lo, hi = np.zeros(1), np.ones(1)
    return Snapshot(int(line["step"]), int(line["evaluations"]), value, _arr(line["error"]).reshape(-1),
                    _arr(line["goal"]).reshape(-1), int(line["regions"]), float(line["elapsed"]),
                    str(line["status"]), float(number_from_json(line.get("rate", 0.0))), tops, depth_err,
                    centres, sizes, lo, hi, hist, str(line.get("message", "")),
                    float(number_from_json(line.get("rel_tol", 0.0))),
                    float(number_from_json(line.get("abs_tol", 0.0))), int(line.get("budget", 0)))
