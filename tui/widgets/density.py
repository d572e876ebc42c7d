"""The refinement map: where the regions are, as a character-cell density grid."""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.reactive import reactive
from textual.widgets import Static

from cubage import Snapshot

from ..drawing import density_grid
from ..problem_facts import ProblemFacts
from .guard import guarded

#: Cell glyphs from empty to densest, and their colours (our own ramp).
GLYPHS = " .:░▒▓█"
SHADES = ["#303846", "#4d6a8a", "#5f8fb3", "#6cb6d9", "#9bd3a8", "#e8c547", "#f08a5d"]


def axis_pairs(d: int) -> list[tuple[int, int]]:
    """All (i, j), i < j, in the order the map cycles through them; [(0, 0)] in 1-D."""
    if d < 2:
        return [(0, 0)]
    return [(i, j) for i in range(d) for j in range(i + 1, d)]


def glyph_levels(grid: np.ndarray, top_level: int) -> np.ndarray:
    """Ramp level 0..``top_level`` of each count on a log scale (0 only for an empty cell).

    ``ceil(top_level * log1p(n) / log1p(max))`` in exact arithmetic lies in
    [0, top_level], but numpy's vectorised ``log1p`` can differ by one ulp
    from its scalar value, so the ratio for the densest cell can come out as
    1 + 2^-52 and the ceiling one level too high (issue 10 item 2: an
    ``IndexError`` in the glyph lookup).  The levels are therefore bounded.
    """
    grid = np.asarray(grid)
    top = int(grid.max()) if grid.size else 0
    if top <= 0:
        return np.zeros(grid.shape, dtype=np.int64)
    lv = np.ceil(top_level * np.log1p(grid) / np.log1p(float(top))).astype(np.int64)
    return np.clip(lv, 0, top_level)


class RefinementMap(Static):
    """Density of region centres projected onto the axes ``pair``.

    Counts come from the snapshot's (down-sampled) region centres, so dense
    cells are where the engine has subdivided most.
    """

    snap: reactive[Snapshot | None] = reactive(None, always_update=True, layout=False)
    pair: reactive[int] = reactive(0)

    def __init__(self, meta: ProblemFacts, **kw):
        super().__init__(**kw)
        self.meta = meta

    @property
    def pairs(self) -> list[tuple[int, int]]:
        return axis_pairs(max(1, self.meta.dim))

    def axes(self) -> tuple[int, int]:
        p = self.pairs
        return p[self.pair % len(p)]

    def next_pair(self) -> tuple[int, int]:
        self.pair = (self.pair + 1) % len(self.pairs)
        return self.axes()

    def _axis_name(self, i: int) -> str:
        v = self.meta.variables
        return v[i] if i < len(v) else f"x{i}"

    @guarded("draw")
    def render(self) -> Text:
        s = self.snap
        i, j = self.axes()
        t = Text(no_wrap=True, overflow="crop")
        if s is None or s.map_centres.shape[0] == 0:
            t.append("no regions yet", "dim")
            return t
        notes = [n for n in {self.meta.axis_note(i), self.meta.axis_note(j)} if n]
        w = max(8, self.size.width - 9)
        h = max(2, self.size.height - 2 - len(notes))
        c = np.asarray(s.map_centres, dtype=float)
        lo, hi = np.asarray(s.map_lower, dtype=float), np.asarray(s.map_upper, dtype=float)
        if self.meta.dim < 2 or c.shape[1] < 2:
            pts = np.stack([c[:, 0], np.zeros(c.shape[0])], axis=1)
            grid = density_grid(pts, [lo[0], -1], [hi[0], 1], w, 1)
            lo2, hi2 = (lo[0], 0.0), (hi[0], 0.0)
            ylab = ""
        else:
            grid = density_grid(c[:, [i, j]], lo[[i, j]], hi[[i, j]], w, h)
            lo2, hi2 = (lo[i], lo[j]), (hi[i], hi[j])
            ylab = self._axis_name(j)
        level = glyph_levels(grid, len(GLYPHS) - 1)
        rows = grid.shape[0]
        for r in range(rows):
            if r == 0:
                lab = f"{hi2[1]:>8.3g}" if ylab else " " * 8
            elif r == rows - 1 and ylab:
                lab = f"{lo2[1]:>8.3g}"
            elif r == rows // 2 and ylab:
                lab = f"{ylab[:7]:>7} "
            else:
                lab = " " * 8
            t.append(lab + "│", "dim")
            for k in level[r]:
                t.append(GLYPHS[k], SHADES[k])
            t.append("\n")
        xl = f"{lo2[0]:.3g}"
        xh = f"{hi2[0]:.3g}"
        name = self._axis_name(i)
        mid = max(1, w - len(xl) - len(xh) - len(name))
        t.append(" " * 9 + xl + " " * (mid // 2) + name + " " * (mid - mid // 2) + xh, "dim")
        t.append(f"\n{s.map_centres.shape[0]} of {s.regions} regions sampled; ", "dim")
        t.append("dense = more refined", "dim")
        for n in notes:
            t.append("\n" + n, "italic #6cb6d9")
        return t
