"""What a headless run shows while it works and when it ends.

Three outputs, all our own layout:

* :class:`LivePanel` — a rich live display for a terminal, redrawn at most
  4 times a second: value ± error estimate per component, the goal,
  evaluations, regions, rate, elapsed time, an estimated time to the goal
  and, when the problem has a reference value, the true error;
* :class:`PlainTicker` — for logs (nohup, pipes): one compact line on
  stderr every few seconds and one at the end, e.g.::

      cubage| 12.0s  n=3.20e+06  regions=4,711  I=2.5734234e+00 ~4.1e-07  goal 2.6e-08  1.4e+05/s  eta 31s

* :func:`summary_lines` — the closing summary.

The error figures are the engine's heuristic estimates, not bounds; the
display says "estimate" and the summary spells the caution out.
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Sequence

import numpy as np

CAUTION = "the error is the engine's estimate, not a guaranteed bound"


# --------------------------------------------------------------------------
# numbers
# --------------------------------------------------------------------------

def fmt_duration(seconds: float | None) -> str:
    """Seconds as a short human duration (``"850 ms"``, ``"12.3 s"``, ``"4 min 05 s"``, ``"2 h 10 min"``)."""
    if seconds is None or not math.isfinite(seconds) or seconds < 0:
        return "—"
    if seconds < 1:
        return f"{seconds * 1000:.0f} ms"
    if seconds < 60:
        return f"{seconds:.1f} s"
    if seconds < 3600:
        m, s = divmod(int(round(seconds)), 60)
        return f"{m} min {s:02d} s"
    if seconds < 86400 * 3:
        h, rem = divmod(int(round(seconds)), 3600)
        return f"{h} h {rem // 60:02d} min"
    return f"{seconds / 86400:.1f} days"


def fmt_count(n: float) -> str:
    """An integer count with thousands separators, or a short form above 10^9."""
    n = float(n)
    if not math.isfinite(n):
        return "—"
    if abs(n) >= 1e9:
        return f"{n:.3e}"
    return f"{int(n):,}"


def fmt_rate(rate: float) -> str:
    """Evaluations per second in a short form."""
    if not math.isfinite(rate) or rate <= 0:
        return "—"
    for div, unit in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if rate >= div:
            return f"{rate / div:.2f} {unit}/s"
    return f"{rate:.0f} /s"


def fmt_value(v: float) -> str:
    return "nan" if not math.isfinite(v) else f"{v:.12e}"


def fmt_err(e: float) -> str:
    return "—" if not math.isfinite(e) else f"{e:.2e}"


def reference_array(reference, m: int) -> np.ndarray | None:
    """The problem's reference value as an (m,) array, or None."""
    if reference is None:
        return None
    v = np.atleast_1d(np.asarray(reference.value, dtype=float))
    return v if v.size == m else None


# --------------------------------------------------------------------------
# time to the goal
# --------------------------------------------------------------------------

def time_to_goal(history: np.ndarray, goal: np.ndarray, rate: float, *, window: int = 40,
                 min_points: int = 6) -> float | None:
    """Estimated seconds until the error estimate meets the goal, or None.

    Fits ``log(error) = a + b log(evaluations)`` by least squares over the
    last ``window`` history rows (error of the worst component relative to
    its goal) and extrapolates to ``error = goal`` at the current rate of
    evaluations per second.

    Parameters
    ----------
    history : ndarray, shape (n, 2 + 2m)
        Rows (evaluations, regions, value_0.., error_0..) as in a Snapshot.
    goal : ndarray, shape (m,)
        Current goal per component.
    rate : float
        Evaluations per second.
    window, min_points : int
        How many recent rows to fit, and the fewest that make a fit.

    Returns
    -------
    float or None
        0 when the goal is met; None when there are too few points, the
        error does not decrease, or the rate is unknown.
    """
    h = np.asarray(history, dtype=float)
    goal = np.atleast_1d(np.asarray(goal, dtype=float))
    if h.ndim != 2 or h.shape[0] < 1 or not (rate > 0) or not np.all(np.isfinite(goal)) or np.any(goal <= 0):
        return None
    m = (h.shape[1] - 2) // 2
    if m < 1 or goal.size != m:
        return None
    err = h[:, 2 + m: 2 + 2 * m]
    ratio = (err / goal).max(axis=1)
    if ratio[-1] <= 1:
        return 0.0
    h, ratio = h[-window:], ratio[-window:]
    n = h[:, 0]
    ok = (n > 0) & (ratio > 0) & np.isfinite(ratio)
    if ok.sum() < min_points:
        return None
    x, y = np.log(n[ok]), np.log(ratio[ok])
    if np.ptp(x) <= 0:
        return None
    b, a = np.polyfit(x, y, 1)
    if not b < -1e-3:
        return None
    n_goal = math.exp(-a / b)          # where a + b log n = log 1
    n_now = float(h[-1, 0])
    if not math.isfinite(n_goal):
        return None
    return max(0.0, (n_goal - n_now) / rate)


# --------------------------------------------------------------------------
# the plain ticker
# --------------------------------------------------------------------------

class PlainTicker:
    """Compact progress lines on a stream (stderr by default), every ``every`` seconds and at the end."""

    def __init__(self, reference=None, every: float = 5.0, stream=None):
        self.reference = reference
        self.every = every
        self.stream = stream if stream is not None else sys.stderr
        self._last = time.monotonic()

    def line(self, snap) -> str:
        v, e, g = snap.value, snap.error, snap.goal
        parts = [f"cubage| {snap.elapsed:6.1f}s", f"n={snap.evaluations:.2e}", f"regions={snap.regions:,}"]
        for i in range(snap.components):
            tag = "I" if snap.components == 1 else f"I{i}"
            parts.append(f"{tag}={v[i]:.9e} ~{fmt_err(e[i])}")
        parts.append("goal " + ",".join(fmt_err(x) for x in np.atleast_1d(g)))
        parts.append(f"{snap.rate:.1e}/s" if snap.rate > 0 else "-/s")
        eta = time_to_goal(snap.history, g, snap.rate)
        parts.append("eta " + ("-" if eta is None else f"{eta:.0f}s"))
        ref = reference_array(self.reference, snap.components)
        if ref is not None:
            parts.append("true-err " + ",".join(fmt_err(abs(a - b)) for a, b in zip(v, ref)))
        if snap.status not in ("running",):
            parts.append(f"[{snap.status}]")
        return "  ".join(parts)

    def __call__(self, snap, final: bool = False) -> None:
        now = time.monotonic()
        if final or now - self._last >= self.every:
            self._last = now
            print(self.line(snap), file=self.stream, flush=True)


# --------------------------------------------------------------------------
# the live panel
# --------------------------------------------------------------------------

class LivePanel:
    """A rich live display of a running integration (use as a context manager).

    Parameters
    ----------
    title : str
        Problem title or name.
    reference : Reference or None
        The problem's reference value, to show the true error.
    console : rich.console.Console, optional
    """

    MAX_FPS = 4
    WIDTH = 84

    def __init__(self, title: str, reference=None, console=None, extra: str = ""):
        from rich.console import Console
        self.title = title
        self.reference = reference
        self.extra = extra
        self.console = console or Console()
        self._live = None
        self._last = -math.inf

    def __enter__(self):
        from rich.live import Live
        self._live = Live(console=self.console, auto_refresh=False, transient=True,
                          redirect_stdout=False, redirect_stderr=False)
        self._live.__enter__()
        return self

    def __exit__(self, *exc):
        if self._live is not None:
            self._live.__exit__(*exc)
            self._live = None
        return False

    def __call__(self, snap, final: bool = False) -> None:
        now = time.monotonic()
        if not final and now - self._last < 1.0 / self.MAX_FPS:
            return
        self._last = now
        if self._live is not None:
            self._live.update(self.render(snap), refresh=True)

    def render(self, snap):
        """The renderable for one snapshot."""
        from rich import box
        from rich.panel import Panel
        from rich.table import Table
        from rich.text import Text

        m = snap.components
        ref = reference_array(self.reference, m)
        t = Table.grid(padding=(0, 2))
        t.add_column(style="bold cyan", justify="right")
        t.add_column()
        for i in range(m):
            label = "integral" if m == 1 else f"component {i}"
            row = Text(fmt_value(snap.value[i]), style="bold")
            row.append(f"  ± {fmt_err(snap.error[i])}", style="yellow")
            row.append("  (estimate)", style="dim")
            t.add_row(label, row)
            if ref is not None:
                diff = abs(snap.value[i] - ref[i])
                t.add_row("", Text(f"reference {ref[i]:.12e}   true error {fmt_err(diff)}", style="green"))
        goal = np.atleast_1d(snap.goal)
        ratio = float(np.max(snap.error / goal)) if np.all(goal > 0) and np.all(np.isfinite(goal)) else math.nan
        gtxt = Text(f"error ≤ {', '.join(fmt_err(g) for g in goal)}"
                    f"   (rel {snap.rel_tol:g}, abs {snap.abs_tol:g})")
        if math.isfinite(ratio):
            gtxt.append(f"   now {ratio:.3g}× the goal" if ratio > 1 else "   met", style="magenta")
        t.add_row("goal", gtxt)
        budget = f" of {fmt_count(snap.budget)}" if snap.budget else ""
        t.add_row("evaluations", f"{fmt_count(snap.evaluations)}{budget}   at {fmt_rate(snap.rate)}")
        t.add_row("regions", fmt_count(snap.regions))
        eta = time_to_goal(snap.history, snap.goal, snap.rate)
        t.add_row("elapsed", f"{fmt_duration(snap.elapsed)}   to goal ≈ {fmt_duration(eta)}")
        if self.extra:
            t.add_row("method", self.extra)
        return Panel(t, title=f"[bold]{self.title}[/]", subtitle=f"{snap.status} · Ctrl-C stops and keeps the estimate",
                     box=box.ROUNDED, width=min(self.WIDTH, self.console.width), border_style="blue")


# --------------------------------------------------------------------------
# the summary
# --------------------------------------------------------------------------

def summary_lines(result, statuses: dict, reference=None, extra: Sequence[str] = ()) -> list[str]:
    """Plain text lines summarising a finished (or stopped) run."""
    vals = np.atleast_1d(result.values) if len(np.atleast_1d(result.values)) else np.atleast_1d(result.value)
    errs = np.atleast_1d(result.errors) if len(np.atleast_1d(result.errors)) else np.atleast_1d(result.error)
    m = vals.size
    ref = reference_array(reference, m)
    lines = []
    for i in range(m):
        label = "value" if m == 1 else f"value[{i}]"
        line = f"{label:<11} {fmt_value(vals[i])} ± {fmt_err(errs[i])}"
        if ref is not None:
            line += f"   (reference {ref[i]:.12e}, true error {fmt_err(abs(vals[i] - ref[i]))})"
        lines.append(line)
    lines.append(f"{'status':<11} {result.status}: {statuses.get(result.status, '')}")
    lines.append(f"{'work':<11} {fmt_count(result.evaluations)} evaluations, {fmt_count(result.regions)} "
                 f"region{'' if result.regions == 1 else 's'}, "
                 f"{fmt_duration(result.seconds)} (rule {result.rule})")
    if reference is not None:
        lines.append(f"{'reference':<11} {reference.source}")
    lines.extend(extra)
    lines.append(f"{'note':<11} {CAUTION}")
    if not any(str(x).startswith("second ") for x in extra):
        lines.append(f"{'':<11} (cross-check with other nodes: cubage run FILE --second-opinion)")
    return lines
