"""Small drawing helpers of the run and scan views: density grids, thinning of long histories, short counts,
round tick values.

The time-to-goal forecast and the duration format are the session layer's
(:mod:`cubage.session.forecast`), shared with the command line."""

from __future__ import annotations

import math

import numpy as np


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


def fmt_count(n: float) -> str:
    """A count with an SI suffix: ``950``, ``12.3k``, ``4.56M``, ``1.2G``."""
    n = float(n)
    for unit, div in (("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if abs(n) >= div:
            return f"{n / div:.3g}{unit}"
    return f"{n:.0f}"


def round_ticks(lo: float, hi: float, most: int) -> tuple[list[float], list[str]]:
    """At most ``most`` tick positions at round values (1, 2 or 5 times a power of ten) within [lo, hi].

    Labels share one number of decimals, so a column of them reads evenly (scientific notation when the values
    are very large or very small).  A degenerate or non-finite range gives its one value.
    """
    most = max(2, int(most))
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return [], []
    if hi < lo:
        lo, hi = hi, lo
    if hi == lo:
        return [lo], [f"{lo:.4g}"]
    e = math.floor(math.log10((hi - lo) / (most - 1)))
    for step in (m * 10.0 ** k for k in (e - 1, e, e + 1) for m in (1, 2, 5)):
        first, last = math.ceil(lo / step - 1e-9), math.floor(hi / step + 1e-9)
        if last - first + 1 <= most:
            break
    ticks = [k * step for k in range(first, last + 1)]
    if not ticks:
        return [lo], [f"{lo:.4g}"]
    big = max(abs(ticks[0]), abs(ticks[-1]))
    if big >= 1e5 or big < 1e-3:
        digits = max(0, int(math.floor(math.log10(big))) - int(math.floor(math.log10(step))))
        labels = [f"{t:.{digits}e}" for t in ticks]
    else:
        digits = max(0, -int(math.floor(math.log10(step))))
        labels = [f"{t:.{digits}f}" for t in ticks]
    return ticks, ["0" if t == 0 else lab for t, lab in zip(ticks, labels)]
