"""Small numerical helpers of the run view: time-to-goal forecast, density grids, thinning."""

from __future__ import annotations

import math

import numpy as np


def forecast_evaluations(history: np.ndarray, goal: np.ndarray, window: int = 24) -> float | None:
    """Evaluations at which the error estimate is expected to reach the goal.

    Fits a straight line to log(error) against log(evaluations) over the
    last ``window`` distinct history rows (per component) and extrapolates
    it to the goal.  This is a heuristic forecast: adaptive cubature usually
    converges like a power of the evaluation count, but not always.

    Parameters
    ----------
    history : ndarray, shape (n, 2 + 2m)
        Columns evaluations, regions, value_0..m-1, error_0..m-1.
    goal : ndarray, shape (m,)

    Returns
    -------
    float or None
        The forecast total evaluation count (the largest over components), or
        None when there are too few points or the error is not falling.
    """
    h = np.asarray(history, dtype=float)
    goal = np.atleast_1d(np.asarray(goal, dtype=float))
    if h.ndim != 2 or h.shape[0] < 4:
        return None
    m = (h.shape[1] - 2) // 2
    if m < 1 or goal.size < m:
        return None
    need = 0.0
    for j in range(m):
        n = h[:, 0]
        e = h[:, 2 + m + j]
        ok = (n > 0) & (e > 0) & np.isfinite(e)
        n, e = n[ok], e[ok]
        if n.size < 4:
            return None
        _, first = np.unique(n[::-1], return_index=True)  # keep the last row of each evaluation count
        keep = np.sort(n.size - 1 - first)
        n, e = n[keep][-window:], e[keep][-window:]
        if n.size < 4 or n[-1] <= n[0]:
            return None
        if e[-1] <= goal[j]:
            need = max(need, float(n[-1]))
            continue
        x, y = np.log(n), np.log(e)
        slope, icpt = np.polyfit(x, y, 1)
        if not slope < -1e-3 or not np.isfinite(slope):
            return None
        g = goal[j]
        if not g > 0:
            return None
        # through the newest point with the fitted slope
        target = math.log(n[-1]) + (math.log(g) - math.log(e[-1])) / slope
        if target > 700:
            return math.inf
        need = max(need, math.exp(target))
    return need


def forecast_seconds(history: np.ndarray, goal: np.ndarray, evaluations: int, rate: float) -> float | None:
    """Seconds to the goal at the current evaluation ``rate`` (see :func:`forecast_evaluations`)."""
    need = forecast_evaluations(history, goal)
    if need is None or not rate > 0:
        return None
    if not math.isfinite(need):
        return math.inf
    return max(0.0, (need - evaluations) / rate)


def density_grid(points: np.ndarray, lower, upper, cols: int, rows: int) -> np.ndarray:
    """Counts of ``points`` (k, 2) in a ``rows`` x ``cols`` grid over [lower, upper].

    Row 0 is the top of the picture (the largest second coordinate).
    """
    cols, rows = max(1, int(cols)), max(1, int(rows))
    pts = np.asarray(points, dtype=float).reshape(-1, 2)
    lo = np.asarray(lower, dtype=float)
    hi = np.asarray(upper, dtype=float)
    span = np.where(hi > lo, hi - lo, 1.0)
    if pts.shape[0] == 0:
        return np.zeros((rows, cols), dtype=np.int64)
    u = (pts - lo) / span
    ix = np.clip((u[:, 0] * cols).astype(np.int64), 0, cols - 1)
    iy = np.clip((u[:, 1] * rows).astype(np.int64), 0, rows - 1)
    grid = np.zeros((rows, cols), dtype=np.int64)
    np.add.at(grid, (rows - 1 - iy, ix), 1)
    return grid


def thin_log(x: np.ndarray, n: int = 160) -> np.ndarray:
    """Indices of at most ``n`` rows of increasing ``x`` spread evenly in log(x) (always the last)."""
    x = np.asarray(x, dtype=float)
    if x.size <= n:
        return np.arange(x.size)
    pos = x > 0
    if not pos.any():
        return np.unique(np.linspace(0, x.size - 1, n).astype(np.int64))
    lx = np.log(np.where(pos, x, x[pos].min()))
    targets = np.linspace(lx[0], lx[-1], n)
    idx = np.searchsorted(lx, targets, side="left")
    idx = np.clip(idx, 0, x.size - 1)
    return np.unique(np.concatenate([idx, [x.size - 1]]))


def fmt_seconds(s: float | None) -> str:
    """``12.3 s``, ``4 min 05 s``, ``2 h 10 min`` or ``?``."""
    if s is None:
        return "?"
    if not math.isfinite(s):
        return "never (at this slope)"
    if s < 60:
        return f"{s:.1f} s"
    if s < 3600:
        return f"{int(s // 60)} min {int(s % 60):02d} s"
    if s < 86400 * 3:
        return f"{int(s // 3600)} h {int(s % 3600 // 60):02d} min"
    return f"{s / 86400:.0f} days"


def fmt_count(n: float) -> str:
    """A count with an SI suffix: ``950``, ``12.3k``, ``4.56M``, ``1.2G``."""
    n = float(n)
    for unit, div in (("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if abs(n) >= div:
            return f"{n / div:.3g}{unit}"
    return f"{n:.0f}"
