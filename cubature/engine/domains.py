"""Integration domains: axis-aligned boxes (possibly unbounded) and simplices."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


class DomainError(ValueError):
    """A domain that cannot be integrated over (wrong shape, empty, degenerate)."""


@dataclass(frozen=True, eq=False)
class Box:
    """The box ``[lower_0, upper_0] x ... x [lower_{d-1}, upper_{d-1}]``.

    Any bound may be infinite (``-inf`` below, ``inf`` above); such axes are
    mapped to finite ones by :mod:`cubage.engine.transforms`.

    Parameters
    ----------
    lower, upper : array_like, shape (d,)
        Lower and upper bounds, ``lower < upper`` on every axis.
    scale : array_like, shape (d,), optional
        Length scale of the map of each *infinite* axis (ignored on finite
        ones; default 1): the map sends half of the engine's axis to within
        ``scale`` of the finite end (or of 0 for a doubly infinite axis), so
        a value near the integrand's width lets the rule resolve it with few
        regions.
    """

    lower: np.ndarray
    upper: np.ndarray
    scale: np.ndarray

    def __init__(self, lower, upper, scale=None):
        lo = np.atleast_1d(np.asarray(lower, dtype=float)).copy()
        hi = np.atleast_1d(np.asarray(upper, dtype=float)).copy()
        if lo.ndim != 1 or hi.ndim != 1 or lo.shape != hi.shape:
            raise DomainError(
                f"box bounds must be two equal-length lists, got shapes {lo.shape} and {hi.shape}")
        if lo.size == 0:
            raise DomainError("box needs at least one axis")
        if np.isnan(lo).any() or np.isnan(hi).any():
            raise DomainError("box bounds must not be NaN")
        bad = np.nonzero(~(lo < hi))[0]
        if bad.size:
            i = int(bad[0])
            raise DomainError(f"box axis {i}: lower bound {lo[i]:g} is not below upper bound {hi[i]:g}")
        if np.isposinf(lo).any() or np.isneginf(hi).any():
            raise DomainError("box: a lower bound of +inf or an upper bound of -inf is empty")
        sc = np.ones_like(lo) if scale is None else np.atleast_1d(np.asarray(scale, dtype=float)).copy()
        if sc.shape != lo.shape:
            raise DomainError(f"box scale must have one entry per axis ({lo.size}), got {sc.size}")
        if not (np.isfinite(sc).all() and (sc > 0).all()):
            raise DomainError("box scale entries must be positive finite numbers")
        _check_box_size(lo, hi)
        for a in (lo, hi, sc):
            a.flags.writeable = False
        object.__setattr__(self, "lower", lo)
        object.__setattr__(self, "upper", hi)
        object.__setattr__(self, "scale", sc)

    kind = "box"

    @property
    def dim(self) -> int:
        """Dimension ``d``."""
        return self.lower.size

    @property
    def bounded(self) -> bool:
        """True when every bound is finite."""
        return bool(np.isfinite(self.lower).all() and np.isfinite(self.upper).all())

    def volume(self) -> float:
        """Volume (``inf`` for an unbounded box)."""
        return float(np.prod(self.upper - self.lower))

    def describe(self) -> str:
        """A short human-readable description."""
        rows = ", ".join(f"[{a:g}, {b:g}]" for a, b in zip(self.lower, self.upper))
        if self._scaled():
            rows += "; scale of the infinite axes " + ", ".join(f"{c:g}" for c in self.scale)
        return f"box {rows}"

    def _scaled(self) -> bool:
        return bool((~np.isfinite(self.lower) | ~np.isfinite(self.upper)).any() and (self.scale != 1).any())

    def to_json(self) -> dict:
        """JSON-ready description (infinite bounds as strings; the scale only when it matters)."""
        out = {"box": [[_jnum(a), _jnum(b)] for a, b in zip(self.lower, self.upper)]}
        if self._scaled():
            out["scale"] = [float(c) for c in self.scale]
        return out


@dataclass(frozen=True, eq=False)
class Simplex:
    """The simplex spanned by ``d + 1`` vertices in ``d`` dimensions.

    Parameters
    ----------
    vertices : array_like, shape (d + 1, d)
        Vertex coordinates.  The simplex must be non-degenerate: one whose
        volume is below ``1e-12 * L**d / d!`` (``L`` the longest edge) is
        rejected as flat.
    """

    vertices: np.ndarray

    def __init__(self, vertices):
        v = np.asarray(vertices, dtype=float)
        if v.ndim != 2 or v.shape[0] != v.shape[1] + 1 or v.shape[1] < 1:
            raise DomainError(
                f"simplex needs d+1 vertices of d coordinates each, got an array of shape {v.shape}")
        if not np.isfinite(v).all():
            raise DomainError("simplex vertices must be finite numbers")
        v = v.copy()
        v.flags.writeable = False
        object.__setattr__(self, "vertices", v)
        with np.errstate(over="ignore", invalid="ignore"):
            # the longest edge, one vertex at a time (memory O(d^2), not O(d^3))
            edges = np.array([np.linalg.norm(v - row, axis=1).max() for row in v])
            log_vol = _log_volume(v)
        if not np.isfinite(edges).all() or log_vol > _LOG_MAX:
            raise DomainError(f"{_OVERFLOW}: its edges or volume exceed 1.8e308")
        if log_vol < _LOG_TINY:
            raise DomainError(f"simplex is degenerate or {_UNDERFLOW}")
        vol = self.volume()
        scale = max(float(np.max(edges)), 1e-300)
        # the flatness test in logarithms, so that no power or factorial overflows in high dimension
        d = self.dim
        if not log_vol > math.log(1e-12) + d * math.log(scale) - math.lgamma(d + 1):
            raise DomainError(
                f"simplex is degenerate (volume {vol:.3g}): its vertices lie in a lower-dimensional plane")

    kind = "simplex"

    @property
    def dim(self) -> int:
        """Dimension ``d``."""
        return self.vertices.shape[1]

    @property
    def bounded(self) -> bool:
        return True

    def volume(self) -> float:
        """Volume ``|det(v_1 - v_0, ..., v_d - v_0)| / d!``."""
        e = self.vertices[1:] - self.vertices[0]
        if self.dim > 170:   # d! beyond a double: divide in logarithms
            return float(math.exp(_log_volume(self.vertices)))
        return float(abs(np.linalg.det(e)) / math.factorial(self.dim))

    def describe(self) -> str:
        rows = ", ".join("(" + ", ".join(f"{c:g}" for c in row) + ")" for row in self.vertices)
        return f"simplex {rows}"

    def to_json(self) -> dict:
        return {"simplex": self.vertices.tolist()}


_OVERFLOW = "the domain's volume overflows double precision"
_UNDERFLOW = "the domain's volume underflows double precision (it rounds to zero)"
_LOG_MAX = math.log(np.finfo(np.float64).max)
_LOG_TINY = math.log(np.finfo(np.float64).tiny)


def _check_box_size(lo: np.ndarray, hi: np.ndarray) -> None:
    """Refuse finite axes whose width, or whose product of widths, is beyond double precision.

    Infinite axes are mapped to finite ones and do not count.  Without this a box
    such as ``[0, 1e308]^2`` ran into inf/NaN region volumes and stalled with
    numpy warnings (issue 10 item 14).
    """
    fin = np.isfinite(lo) & np.isfinite(hi)
    with np.errstate(over="ignore"):
        width = hi[fin] - lo[fin]
    if not np.isfinite(width).all():
        i = int(np.nonzero(fin)[0][np.nonzero(~np.isfinite(width))[0][0]])
        raise DomainError(f"{_OVERFLOW}: axis {i} is wider than 1.8e308")
    if width.size:
        log_vol = float(np.sum(np.log(width)))
        if log_vol > _LOG_MAX:
            raise DomainError(f"{_OVERFLOW}: the product of the widths exceeds 1.8e308")
        if log_vol < _LOG_TINY:
            raise DomainError(_UNDERFLOW)


def _log_volume(v: np.ndarray) -> float:
    """``log`` of the volume of the simplex with vertices ``v`` (``-inf`` when flat)."""
    sign, logdet = np.linalg.slogdet(v[1:] - v[0])
    if sign == 0 or not np.isfinite(logdet):
        return -math.inf if sign == 0 or logdet < 0 else math.inf
    return float(logdet - math.lgamma(v.shape[1] + 1))


def _jnum(x: float):
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return float(x)
