"""The convergence chart: error estimate (and true error) against evaluations, log-log."""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.reactive import reactive
from textual_plotext import PlotextPlot

from cubage import Snapshot

from ..drawing import thin_log
from ..problem_facts import ProblemFacts
from .guard import guarded


class ConvergenceChart(PlotextPlot):
    """Log-log chart of the run's history with the goal as a horizontal line.

    Built on textual-plotext's :class:`PlotextPlot`, so the drawing itself
    is plotext's; this widget only chooses the series.
    """

    snap: reactive[Snapshot | None] = reactive(None, always_update=True, layout=False)

    def __init__(self, meta: ProblemFacts, **kw):
        super().__init__(**kw)
        self.meta = meta
        self._empty = True

    @guarded("draw")
    def render(self):
        if self._empty:
            s = self.snap
            if s is not None and s.evaluations > 0:
                return Text("one step so far: nothing to chart yet", style="dim")
            return Text("waiting for the first steps", style="dim")
        try:
            return super().render()
        except Exception as exc:  # noqa: BLE001 - a plotting hiccup must not end the UI
            return Text(f"(chart unavailable: {type(exc).__name__})", style="dim")

    @guarded("update")
    def watch_snap(self, snap: Snapshot | None) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        self._empty = snap is None or len(snap.history) < 2
        if self._empty:
            self.refresh()
            return
        # plotext's own log axes label ticks as long decimals; plot log10 and label decades ourselves
        h = np.asarray(snap.history, dtype=float)
        m = snap.components
        keep = thin_log(h[:, 0], max(20, 2 * max(self.size.width, 40)))
        h = h[keep]
        n = h[:, 0]
        j = 0 if m == 1 else int(np.argmax(snap.error / np.maximum(snap.goal, 1e-300)))
        ys = []
        err = h[:, 2 + m + j]
        ok = (n > 0) & (err > 0) & np.isfinite(err)
        if ok.any():
            x, y = np.log10(n[ok]), np.log10(err[ok])
            ys.append(y)
            plt.plot(x.tolist(), y.tolist(), color=(232, 197, 71), marker="braille")
        ref = self.meta.reference
        if ref is not None and j < len(ref):
            true = np.abs(h[:, 2 + j] - ref[j])
            okt = (n > 0) & (true > 0) & np.isfinite(true)
            if okt.any():
                y = np.log10(true[okt])
                ys.append(y)
                plt.plot(np.log10(n[okt]).tolist(), y.tolist(), color=(108, 182, 217), marker="braille")
        g = float(snap.goal[j]) if snap.goal.size > j else float("nan")
        if g > 0 and np.isfinite(g) and ok.any():
            lo, hi = float(np.log10(n[ok].min())), float(np.log10(n[ok].max()))
            plt.plot([lo, max(hi, lo + 0.3)], [np.log10(g)] * 2, color=(95, 211, 138), marker="braille")
            ys.append(np.array([np.log10(g)]))
        if ys:
            yall = np.concatenate(ys)
            plt.yticks(*_decades(float(yall.min()), float(yall.max()), max(2, self.size.height // 3)))
        if ok.any():
            plt.xticks(*_decades(float(np.log10(n[ok].min())), float(np.log10(n[ok].max())),
                                 max(2, self.size.width // 10)))
        self.refresh()


def _decades(lo: float, hi: float, most: int) -> tuple[list[float], list[str]]:
    """Tick positions (log10) at whole decades between lo and hi, at most ``most`` of them."""
    a, b = int(np.floor(lo)), int(np.ceil(hi))
    if b == a:
        b = a + 1
    step = max(1, int(np.ceil((b - a + 1) / most)))
    ticks = list(range(a, b + 1, step))
    return [float(t) for t in ticks], [f"1e{t}" for t in ticks]
