"""The one time-to-goal forecast, shared by the terminal display and the text UI.

Adaptive cubature usually converges like a power of the evaluation count,
``error ~ C n^b`` with ``b < 0``; the forecast fits ``log(error / goal)``
against ``log(n)`` by least squares over the recent history (the worst
component relative to its goal), extrapolates to ``error = goal`` and
divides the remaining evaluations by the current rate.  It is a heuristic:
where the power law does not hold (a plateau, a new feature being found) the
forecast is wrong, and it says nothing when the fit is poor.

Nothing here may end a run (issue 10 item 1): every function returns
``None`` instead of raising, for any input (overflowing fits, NaN, empty or
ragged histories).  Front ends print ``None`` as ``"-"``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Forecast", "forecast", "forecast_evaluations", "time_to_goal", "duration_text", "WINDOW", "MIN_POINTS"]

#: Recent distinct history rows used in the fit.
WINDOW = 32
#: Fewest rows that make a fit.
MIN_POINTS = 6
#: Forecasts beyond this many evaluations (30 years at 10^9 per second) are reported as unreachable (math.inf).
HORIZON = 1e18


@dataclass(frozen=True)
class Forecast:
    """Where the error estimate is heading.

    Attributes
    ----------
    evaluations : float or None
        Total evaluation count at which the goal is expected (``math.inf``:
        not within reach at the fitted slope); None when unknown.
    seconds : float or None
        Seconds from now at the current rate (0 when the goal is met).
    beyond_budget : bool
        The goal is expected beyond the evaluation budget (raise it to get there).
    """

    evaluations: float | None = None
    seconds: float | None = None
    beyond_budget: bool = False


def _fit(history, goal, window: int, min_points: int) -> tuple[float | None, float]:
    """(evaluations at the goal or None, evaluations now)."""
    h = np.asarray(history, dtype=float)
    goal = np.atleast_1d(np.asarray(goal, dtype=float))
    if h.ndim != 2 or h.shape[0] < 1 or h.shape[1] < 4:
        return None, math.nan
    m = (h.shape[1] - 2) // 2
    if m < 1 or goal.size != m or not np.all(np.isfinite(goal)) or np.any(goal <= 0):
        return None, math.nan
    n_all = h[:, 0]
    n_now = float(n_all[-1])
    with np.errstate(all="ignore"):
        ratio = (h[:, 2 + m: 2 + 2 * m] / goal).max(axis=1)
    if ratio[-1] <= 1:
        return n_now, n_now
    # one row per evaluation count (the newest), the last `window` of them
    _, first = np.unique(n_all[::-1], return_index=True)
    keep = np.sort(n_all.size - 1 - first)[-window:]
    n, r = n_all[keep], ratio[keep]
    ok = (n > 0) & (r > 0) & np.isfinite(r) & np.isfinite(n)
    if ok.sum() < min_points:
        return None, n_now
    x, y = np.log(n[ok]), np.log(r[ok])
    if not np.ptp(x) > 0:
        return None, n_now
    with np.errstate(all="ignore"):
        b, a = np.polyfit(x, y, 1)
    if not (math.isfinite(b) and math.isfinite(a)) or not b < -1e-3:
        return None, n_now
    log_goal = -a / b                      # where a + b log n = log 1
    if not math.isfinite(log_goal):
        return None, n_now
    if log_goal > math.log(HORIZON):
        return math.inf, n_now
    return math.exp(log_goal), n_now


def forecast(history, goal, rate: float, *, budget: float | None = None,
             window: int = WINDOW, min_points: int = MIN_POINTS) -> Forecast:
    """The forecast for a run's history.

    Parameters
    ----------
    history : array, shape (n, 2 + 2m)
        Rows (evaluations, regions, value_0.., error_0..) as in a Snapshot.
    goal : array, shape (m,)
        The current goal per component.
    rate : float
        Evaluations per second.
    budget : float, optional
        The evaluation budget, to say whether the goal lies beyond it.
    window, min_points : int
        Rows fitted, and the fewest that make a fit.

    Returns
    -------
    Forecast
        Never raises: any failure gives ``Forecast()`` (all unknown).
    """
    try:
        need, now = _fit(history, goal, window, min_points)
        if need is None:
            return Forecast()
        beyond = bool(budget) and need > float(budget)
        if not math.isfinite(need):
            return Forecast(math.inf, math.inf, True)
        secs = max(0.0, (need - now) / rate) if (rate is not None and rate > 0 and math.isfinite(rate)) else None
        return Forecast(float(need), secs, beyond)
    except Exception:  # noqa: BLE001 - a forecast must never end a run (issue 10 item 1)
        return Forecast()


def forecast_evaluations(history, goal, window: int = WINDOW) -> float | None:
    """Total evaluations at which the goal is expected (``math.inf``: out of reach), or None."""
    return forecast(history, goal, 1.0, window=window).evaluations


def time_to_goal(history, goal, rate: float, *, window: int = WINDOW, min_points: int = MIN_POINTS) -> float | None:
    """Seconds until the error estimate meets the goal at ``rate``; 0 when met; None when unknown."""
    return forecast(history, goal, rate, window=window, min_points=min_points).seconds


def eta_text(fc: Forecast, status: str | None = None) -> str:
    """The time to the goal in words, for lines of text: ``31.0 s``; ``beyond the budget (~2.1e9 evaluations)``
    (a goal past the budget is a matter of evaluations, not of days at the current rate); ``out of reach``; ``-``
    when unknown or when ``status`` is final (the run will not go on by itself)."""
    from cubage.session.status import is_final
    if status is not None and is_final(status):
        return "-"
    if fc.evaluations is not None and not math.isfinite(fc.evaluations):
        return "out of reach"
    if fc.beyond_budget:
        return f"beyond the budget (~{fc.evaluations:.1e} evaluations)"
    return duration_text(fc.seconds)


def duration_text(seconds: float | None) -> str:
    """The one duration format of cubage: ``850 ms``, ``12.3 s``, ``4 min 05 s``, ``2 h 10 min``, ``3.5 days``.

    ``None``, NaN and negative values read ``-``; infinity reads ``never``.
    """
    try:
        if seconds is None:
            return "-"
        s = float(seconds)
        if math.isnan(s) or s < 0:
            return "-"
        if math.isinf(s):
            return "never"
        if s < 1:
            return f"{s * 1000:.0f} ms"
        if s < 59.95:
            return f"{s:.1f} s"
        if s < 3600:
            m, r = divmod(int(round(s)), 60)
            return f"{m} min {r:02d} s"
        if s < 86400 * 3:
            h, r = divmod(int(round(s)), 3600)
            return f"{h} h {r // 60:02d} min"
        if s < 86400 * 1e6:
            return f"{s / 86400:.1f} days"
        return "never"
    except Exception:  # noqa: BLE001 - display code must never raise
        return "-"
