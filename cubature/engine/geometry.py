"""Region geometry: how a region's nodes, volume and children are computed.

Two kinds share one interface so that the engine loop is the same for both:

* :class:`BoxGeometry` — axis-aligned boxes stored as centre and half-widths,
  in the engine's finite coordinates (see :mod:`cubage.engine.transforms`);
  bisected along one axis (chosen by the rule) or split along every axis.
* :class:`SimplexGeometry` — simplices stored as vertex arrays and volumes,
  split by longest-edge bisection into two halves of equal volume.
"""

from __future__ import annotations

import itertools

import numpy as np

from cubage.engine.domains import Box, Simplex
from cubage.engine.rules import bisect_simplices
from cubage.engine.rules.base import BoxRule, SimplexRule
from cubage.engine.transforms import AxisMap

_EPS = np.finfo(float).eps


def has_probes(rule) -> bool:
    """Whether vertex probes can be compared with the nodes of ``rule`` (nodes along each diagonal:
    Genz–Malik's corner group, the tensor Gauss–Kronrod grid)."""
    return "groups" in rule.extra or "diagonal" in rule.extra



def vertex_signs(d: int) -> np.ndarray:
    """Sign vectors of a box's ``2^d`` vertices in ``itertools.product((1, -1), repeat=d)`` order: the order
    of the vertex probes, of Genz–Malik's corner nodes and of the Gauss–Kronrod ``"diagonal"``."""
    return np.array(list(itertools.product((1.0, -1.0), repeat=d)))

class BoxGeometry:
    """Boxes as (centre, half-width) rows; nodes ``c + h * u`` for rule nodes ``u``."""

    kind = "box"

    def __init__(self, domain: Box, rule: BoxRule, split: str = "bisect"):
        if split not in ("bisect", "all"):
            raise ValueError(f"split policy must be 'bisect' or 'all', got {split!r}")
        self.domain = domain
        self.rule = rule
        self.split_policy = split
        self.dim = d = domain.dim
        self.map = AxisMap(domain)
        self.columns = {"centre": ((d,), np.float64), "halfw": ((d,), np.float64), "axis": ((), np.int8)}
        self.children_per_split = 2 if split == "bisect" else 2**d
        self._nodes_aug = np.empty((d, 2, rule.size))   # per axis: [u_j; 1]
        self._nodes_aug[:, 0, :] = rule.nodes.T
        self._nodes_aug[:, 1, :] = 1.0
        if split == "all":
            self._signs = np.array(list(itertools.product((-1.0, 1.0), repeat=d)))

    def root(self) -> dict:
        lo, hi = self.map.lower, self.map.upper
        return {"centre": ((lo + hi) / 2)[None], "halfw": ((hi - lo) / 2)[None], "axis": np.zeros(1, np.int8)}

    def points(self, g: dict) -> np.ndarray:
        """Engine-coordinate nodes of the regions ``g``: shape (k * p, d).

        Built for all axes at once as one batched matrix product
        ``[h_j, c_j] @ [u_j; 1]`` into a Fortran-ordered array, so every
        column ``X[:, j]`` is contiguous — the layout vectorised integrands
        read fastest.
        """
        c, h = g["centre"], g["halfw"]
        k, p, d = len(c), self.rule.size, self.dim
        a = np.empty((d, k, 2))
        a[:, :, 0] = h.T
        a[:, :, 1] = c.T
        xt = np.matmul(a, self._nodes_aug)
        return xt.reshape(d, k * p).T

    def volume(self, g: dict) -> np.ndarray:
        return np.prod(2.0 * g["halfw"], axis=1)

    def probe_points(self, g: dict, position: float) -> np.ndarray | None:
        """Points near the vertices of the boxes ``g``: ``c + position * h * s`` for every sign
        vector ``s`` in ``itertools.product((1, -1), repeat=d)`` order (the order of the
        Genz–Malik corner nodes and of the Gauss–Kronrod ``"diagonal"``); shape (k * 2^d, d).
        None when the rule has no nodes along the diagonals to compare them with."""
        if not has_probes(self.rule):
            return None
        signs = vertex_signs(self.dim)
        pts = g["centre"][:, None, :] + position * g["halfw"][:, None, :] * signs[None]
        return pts.reshape(-1, self.dim)

    def splittable(self, g: dict) -> np.ndarray:
        """Regions whose split would still produce distinct floating-point children."""
        c, h = g["centre"], g["halfw"]
        if self.split_policy == "bisect":
            ax = g["axis"].astype(np.intp)
            rows = np.arange(len(ax))
            hc, cc = h[rows, ax], c[rows, ax]
        else:
            hc, cc = h.min(axis=1), np.abs(c).max(axis=1)
        return hc > 8 * _EPS * np.maximum(np.abs(cc), 1.0)

    def split(self, g: dict) -> dict:
        """Children of the regions ``g``: the children of parent ``i`` are rows
        ``i, k + i, 2k + i, ...`` (child ``j`` of all parents forms block ``j``)."""
        c, h = g["centre"], g["halfw"]
        k = len(c)
        if self.split_policy == "bisect":
            ax = g["axis"].astype(np.intp)
            rows = np.arange(k)
            h2 = h.copy()
            h2[rows, ax] *= 0.5
            lo, hi = c.copy(), c.copy()
            lo[rows, ax] -= h2[rows, ax]
            hi[rows, ax] += h2[rows, ax]
            return {"centre": np.concatenate([lo, hi]), "halfw": np.concatenate([h2, h2]),
                    "axis": np.zeros(2 * k, np.int8)}
        h2 = 0.5 * h
        cs = [c + s[None, :] * h2 for s in self._signs]
        return {"centre": np.concatenate(cs), "halfw": np.tile(h2, (len(self._signs), 1)),
                "axis": np.zeros(k * len(self._signs), np.int8)}

    def set_split_axes(self, g: dict, fvals: np.ndarray) -> None:
        """Record the axis each region will be bisected along, from its node values."""
        if self.split_policy == "bisect":
            g["axis"] = self.rule.split_axes(fvals, g["halfw"]).astype(np.int8)

    # -- observation -------------------------------------------------------
    def engine_bounds(self, g: dict) -> tuple[np.ndarray, np.ndarray]:
        return g["centre"] - g["halfw"], g["centre"] + g["halfw"]

    def user_bounds(self, g: dict) -> tuple[np.ndarray, np.ndarray]:
        lo, hi = self.engine_bounds(g)
        return self.map.bounds_to_user(lo, hi)

    def map_coords(self, g: dict) -> tuple[np.ndarray, np.ndarray]:
        """Centres and sizes (full widths) in engine coordinates, for refinement maps."""
        return g["centre"], 2.0 * g["halfw"]

    def map_extent(self) -> tuple[np.ndarray, np.ndarray]:
        return self.map.lower.copy(), self.map.upper.copy()


class SimplexGeometry:
    """Simplices as vertex arrays; nodes ``bary @ V``; longest-edge bisection."""

    kind = "simplex"
    split_policy = "bisect"
    children_per_split = 2

    def __init__(self, domain: Simplex, rule: SimplexRule, split: str = "bisect"):
        if split != "bisect":
            raise ValueError(f"simplices are split by longest-edge bisection only (split='bisect'), got {split!r}")
        self.domain = domain
        self.rule = rule
        self.dim = d = domain.dim
        self.columns = {"verts": ((d + 1, d), np.float64), "vol": ((), np.float64)}
        self.map = None
        self._pairs = np.array([(i, j) for i in range(d + 1) for j in range(i + 1, d + 1)])

    def root(self) -> dict:
        return {"verts": self.domain.vertices[None].copy(), "vol": np.array([self.domain.volume()])}

    def points(self, g: dict) -> np.ndarray:
        x = np.einsum("pj,kjd->kpd", self.rule.bary, g["verts"])
        return x.reshape(-1, self.dim)

    def volume(self, g: dict) -> np.ndarray:
        return g["vol"]

    def probe_points(self, g: dict, position: float) -> None:
        """No vertex probes on simplices (their rules have no corner nodes to compare with)."""
        return None

    def splittable(self, g: dict) -> np.ndarray:
        v = g["verts"]
        e = v[:, self._pairs[:, 0], :] - v[:, self._pairs[:, 1], :]
        longest = np.sqrt(np.einsum("kpd,kpd->kp", e, e).max(axis=1))
        return longest > 16 * _EPS * np.maximum(np.abs(v).max(axis=(1, 2)), 1.0)

    def split(self, g: dict) -> dict:
        """Longest-edge bisection (:func:`cubage.engine.rules.bisect_simplices`),
        children laid out in blocks: child 0 of every parent, then child 1."""
        kids, _ = bisect_simplices(g["verts"])
        half = 0.5 * g["vol"]
        return {"verts": np.concatenate([kids[0::2], kids[1::2]]), "vol": np.concatenate([half, half])}

    def set_split_axes(self, g: dict, fvals: np.ndarray) -> None:
        return None

    def engine_bounds(self, g: dict) -> tuple[np.ndarray, np.ndarray]:
        return g["verts"].min(axis=1), g["verts"].max(axis=1)

    def user_bounds(self, g: dict) -> tuple[np.ndarray, np.ndarray]:
        return self.engine_bounds(g)

    def map_coords(self, g: dict) -> tuple[np.ndarray, np.ndarray]:
        v = g["verts"]
        return v.mean(axis=1), v.max(axis=1) - v.min(axis=1)

    def map_extent(self) -> tuple[np.ndarray, np.ndarray]:
        v = self.domain.vertices
        return v.min(axis=0), v.max(axis=0)
