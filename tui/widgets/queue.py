"""The work queue: region count and total error over time, and the worst regions."""

from __future__ import annotations

import math

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.reactive import reactive
from textual.widgets import DataTable, Sparkline, Static

from cubage import Snapshot

from ..drawing import fmt_count
from ..problem_facts import ProblemFacts
from .guard import guarded


def _even(a: np.ndarray, n: int) -> np.ndarray:
    if a.size <= n:
        return a
    return a[np.unique(np.linspace(0, a.size - 1, n).astype(np.int64))]


class QueueTrend(Vertical):
    """Two sparklines: live region count and log10 of the total error estimate."""

    snap: reactive[Snapshot | None] = reactive(None, always_update=True, layout=False)

    def compose(self) -> ComposeResult:
        yield Static("regions", id="trend-regions-label", classes="trend-label")
        yield Sparkline([], id="trend-regions")
        yield Static("total error (log)", id="trend-error-label", classes="trend-label")
        yield Sparkline([], id="trend-error")

    @guarded("update")
    def watch_snap(self, snap: Snapshot | None) -> None:
        if snap is None or len(snap.history) == 0 or not self.is_mounted:
            return
        h = np.asarray(snap.history, dtype=float)
        m = snap.components
        width = max(8, self.size.width)
        reg = _even(h[:, 1], width)
        err = h[:, 2 + m:].max(axis=1)
        err = _even(np.log10(np.where(err > 0, err, np.nan)), width)
        err = np.nan_to_num(err, nan=float(np.nanmin(err)) if np.isfinite(err).any() else 0.0)
        self.query_one("#trend-regions", Sparkline).data = reg.tolist()
        self.query_one("#trend-error", Sparkline).data = (err - err.min()).tolist()
        last = float(h[-1, 2 + m:].max())
        self.query_one("#trend-regions-label", Static).update(f"regions {fmt_count(snap.regions)}")
        self.query_one("#trend-error-label", Static).update(f"error {last:.2e} (log)")


def bounds_text(lo, hi, names, width: int = 14) -> str:
    parts = []
    for v, a, b in zip(names, lo, hi):
        parts.append(f"{v}∈[{a:.4g},{b:.4g}]")
    return " ".join(parts)


class WorstRegions(DataTable):
    """The regions with the largest error estimates (bounds in the user's coordinates)."""

    snap: reactive[Snapshot | None] = reactive(None, always_update=True, layout=False)

    def __init__(self, meta: ProblemFacts, **kw):
        super().__init__(zebra_stripes=True, cursor_type="row", **kw)
        self.meta = meta

    def on_mount(self) -> None:
        self.add_column("error", key="error")
        self.add_column("value", key="value")
        self.add_column("depth", key="depth")
        lab = "bounding box" if self.meta.kind == "simplex" else "bounds"
        self.add_column(lab, key="bounds")

    @guarded("update")
    def watch_snap(self, snap: Snapshot | None) -> None:
        if snap is None or not self.is_mounted:
            return
        self.clear()
        names = self.meta.variables or [f"x{i}" for i in range(len(snap.map_lower))]
        for t in snap.top:
            e = float(np.max(t.error))
            v = float(t.value[0])
            vt = f"{v:.6g}" if math.isfinite(v) else "nan"
            self.add_row(Text(f"{e:.2e}", style="#e8c547"), Text(vt), Text(str(t.depth)),
                         Text(bounds_text(t.lower, t.upper, names)))
