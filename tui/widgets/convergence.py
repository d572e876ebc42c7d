"""The convergence chart: error estimate (and true error) against evaluations, log-log."""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.reactive import reactive
from textual_plotext import PlotextPlot

from cubature.engine import Snapshot

from ..forecast import thin_log
from ..meta import ProblemMeta


class ConvergenceChart(PlotextPlot):
    """Log-log chart of the run's history with the goal as a horizontal line.

    Built on textual-plotext's :class:`PlotextPlot`, so the drawing itself
    is plotext's; this widget only chooses the series.
    """

    snap: reactive[Snapshot | None] = reactive(None, always_update=True, layout=False)

    def __init__(self, meta: ProblemMeta, **kw):
        super().__init__(**kw)
        self.meta = meta
        self._empty = True

    def render(self):
        if self._empty:
            return Text("waiting for the first steps", style="dim")
        try:
            return super().render()
        except Exception as exc:  # noqa: BLE001 - a plotting hiccup must not end the UI
            return Text(f"(chart unavailable: {type(exc).__name__})", style="dim")

    def watch_snap(self, snap: Snapshot | None) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        self._empty = snap is None or len(snap.history) < 2
        if self._empty:
            self.refresh()
            return
        plt.xscale("log")
        plt.yscale("log")
        plt.xlabel("evaluations")
        h = np.asarray(snap.history, dtype=float)
        m = snap.components
        n = h[:, 0]
        keep = thin_log(n, max(20, 2 * max(self.size.width, 40)))
        h = h[keep]
        n = h[:, 0]
        j = 0 if m == 1 else int(np.argmax(snap.error / np.maximum(snap.goal, 1e-300)))
        err = h[:, 2 + m + j]
        ok = (n > 0) & (err > 0) & np.isfinite(err)
        if ok.any():
            plt.plot(n[ok].tolist(), err[ok].tolist(), label="estimate", color=(232, 197, 71), marker="braille")
        ref = self.meta.reference
        if ref is not None and j < len(ref):
            true = np.abs(h[:, 2 + j] - ref[j])
            okt = (n > 0) & (true > 0) & np.isfinite(true)
            if okt.any():
                plt.plot(n[okt].tolist(), true[okt].tolist(), label="true", color=(108, 182, 217),
                         marker="braille")
        g = float(snap.goal[j]) if snap.goal.size > j else float("nan")
        if g > 0 and np.isfinite(g) and ok.any():
            lo, hi = float(n[ok].min()), float(n[ok].max())
            if hi <= lo:
                hi = lo * 2
            plt.plot([lo, hi], [g, g], label="goal", color=(95, 211, 138), marker="braille")
        if m > 1:
            plt.title(f"component I{j} (furthest from its goal)")
        self.refresh()
