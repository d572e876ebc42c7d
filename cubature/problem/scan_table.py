"""The ``[scan]`` table of a problem file: one integral over a grid of constant values.

Each key names a constant of ``[integrand] constants``; its value is the list of
values that constant takes::

    [scan]
    d = [0.0, 0.5, 1.0, 2.0]                  # a list of numbers
    a = { lin = [0.5, 3.0], count = 11 }      # 11 evenly spaced values, ends included
    k = { log = [0.01, 100], count = 9 }      # 9 values evenly spaced in log10, ends included

Several keys scan the Cartesian grid of their values (the last key varies
fastest).  The constant's own value in ``[integrand] constants`` is the value
used outside a scan (``cubage check``, the text UI's single run).  A grid is
limited to :data:`MAX_POINTS` points.

:func:`parse_scan_table` validates the table; :class:`ScanGrid` is the result,
pure data that the session layer's :mod:`cubage.session.scan` runs.
"""

from __future__ import annotations

import itertools
import math
import unicodedata
from dataclasses import dataclass

import numpy as np

from cubage.problem.toml_values import is_number as _is_number
from cubage.problem.toml_values import type_name as _tname

__all__ = ["MAX_POINTS", "ScanGrid", "ScanTableError", "parse_scan_table", "grid_from_mapping"]

#: Largest number of grid points a scan may have.
MAX_POINTS = 100_000
#: Largest ``count`` of one range (before the product is checked against MAX_POINTS).
_MAX_COUNT = MAX_POINTS


class ScanTableError(ValueError):
    """A bad ``[scan]`` entry; ``key`` names the constant (or None), ``str()`` is the message."""

    def __init__(self, message: str, key: str | None = None):
        super().__init__(message)
        self.key = key


@dataclass(frozen=True)
class ScanGrid:
    """The Cartesian grid of a scan.

    Attributes
    ----------
    names : tuple of str
        The scanned constants, in the order of the table.
    axes : tuple of ndarray
        The values of each constant (float64, in the given order).
    """

    names: tuple[str, ...]
    axes: tuple[np.ndarray, ...]

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(len(a) for a in self.axes)

    @property
    def size(self) -> int:
        return int(math.prod(self.shape))

    def point(self, k: int) -> dict[str, float]:
        """The constants of grid point ``k`` (C order: the last name varies fastest)."""
        idx = np.unravel_index(int(k), self.shape)
        return {n: float(a[i]) for n, a, i in zip(self.names, self.axes, idx)}

    def points(self) -> list[dict[str, float]]:
        """All grid points, in C order."""
        return [dict(zip(self.names, map(float, vals))) for vals in itertools.product(*self.axes)]

    def to_json(self) -> dict:
        return {"names": list(self.names), "axes": [[float(x) for x in a] for a in self.axes]}

    @classmethod
    def from_json(cls, obj: dict) -> ScanGrid:
        return cls(tuple(obj["names"]), tuple(np.array(a, dtype=np.float64) for a in obj["axes"]))

    def describe(self) -> str:
        """One line: ``a: 11 values 0.5 .. 3; k: 9 values 0.01 .. 100 (99 points)``.

        ``first .. last`` for a monotone axis (the order the values are scanned in); an unordered list shows its
        first values (``R: 4 values 2, 1.5, 0.5, ...``) so that it never reads as a range it is not.
        """
        parts = []
        for n, a in zip(self.names, self.axes):
            d = np.diff(np.asarray(a, dtype=float))
            monotone = bool((d > 0).all() or (d < 0).all())
            if len(a) == 1:
                shown = f"{a[0]:g}"
            elif monotone or len(a) <= 3:
                shown = f"{a[0]:g} .. {a[-1]:g}" if monotone else ", ".join(f"{x:g}" for x in a)
            else:
                shown = ", ".join(f"{x:g}" for x in a[:3]) + ", ..."
            parts.append(f"{n}: {len(a)} value{'s' if len(a) != 1 else ''} {shown}")
        return "; ".join(parts) + f" ({self.size:,} point{'s' if self.size != 1 else ''})"


def _finite(name: str, v, what: str) -> float:
    if not _is_number(v):
        raise ScanTableError(f"{what} must be a number, got {_tname(v)} {v!r}", name)
    try:
        x = float(v)
    except OverflowError:
        raise ScanTableError(f"{what} is too large for a floating-point number", name) from None
    if not math.isfinite(x):
        raise ScanTableError(f"{what} must be finite, got {v}", name)
    return x


def _range(name: str, spec: dict) -> np.ndarray:
    kinds = [k for k in ("lin", "log") if k in spec]
    unknown = [k for k in spec if k not in ("lin", "log", "count")]
    if unknown:
        raise ScanTableError(f"unknown key '{unknown[0]}' in the range (a range is {{ lin = [from, to], "
                             f"count = N }} or {{ log = [from, to], count = N }})", name)
    if len(kinds) != 1:
        raise ScanTableError("a range needs exactly one of lin = [from, to] or log = [from, to], "
                             "and count = N", name)
    kind = kinds[0]
    ends = spec[kind]
    if not isinstance(ends, list) or len(ends) != 2:
        raise ScanTableError(f"{kind} must be [from, to], got {ends!r}", name)
    a = _finite(name, ends[0], f"{kind} start")
    b = _finite(name, ends[1], f"{kind} end")
    if "count" not in spec:
        raise ScanTableError("the range needs count = N (the number of values, ends included)", name)
    n = spec["count"]
    if not isinstance(n, int) or isinstance(n, bool):
        raise ScanTableError(f"count must be a whole number, got {_tname(n)} {n!r}", name)
    if n < 1:
        raise ScanTableError(f"count must be at least 1, got {n}", name)
    if n > _MAX_COUNT:
        raise ScanTableError(f"count {n:,} is over the limit of {MAX_POINTS:,} points per scan", name)
    if n > 1 and a == b:
        raise ScanTableError(f"{kind} = [{a:g}, {b:g}] has equal ends; give count = 1 or two different ends", name)
    if kind == "lin":
        return np.linspace(a, b, n)
    if not (a > 0 and b > 0):
        raise ScanTableError(f"log = [{a:g}, {b:g}]: both ends must be positive", name)
    vals = np.geomspace(a, b, n)
    vals[0], vals[-1] = a, b                # the ends exactly as written
    return vals


def _values(name: str, v) -> np.ndarray:
    if isinstance(v, list):
        if not v:
            raise ScanTableError("the list of values is empty", name)
        if len(v) > MAX_POINTS:
            raise ScanTableError(f"{len(v):,} values is over the limit of {MAX_POINTS:,} points per scan", name)
        return np.array([_finite(name, x, f"value {i + 1}") for i, x in enumerate(v)], dtype=np.float64)
    if isinstance(v, dict):
        return _range(name, v)
    if _is_number(v):
        return np.array([_finite(name, v, "the value")], dtype=np.float64)
    raise ScanTableError(f"must be a list of numbers or a range like {{ lin = [0, 1], count = 11 }}, "
                         f"got {_tname(v)} {v!r}", name)


def parse_scan_table(table, constants) -> ScanGrid:
    """Validate a ``[scan]`` table against the declared constants.

    Parameters
    ----------
    table : dict
        The parsed TOML table.
    constants : collection of str
        Names declared in ``[integrand] constants``.

    Returns
    -------
    ScanGrid

    Raises
    ------
    ScanTableError
        Unknown constant, empty list, non-numeric or non-finite value, bad
        range, or a grid over :data:`MAX_POINTS` points.
    """
    if not isinstance(table, dict):
        raise ScanTableError(f"must be a table ([scan]), got {_tname(table)}")
    if not table:
        raise ScanTableError("the table is empty; give at least one constant and its values")
    names, axes = [], []
    declared = list(constants)
    for name, v in table.items():
        name = unicodedata.normalize("NFKC", name)      # as Python (and the expression compiler) reads names
        if name not in declared:
            have = ", ".join(declared) if declared else "none"
            raise ScanTableError(f"'{name}' is not a constant of [integrand] constants (declared: {have})", name)
        names.append(name)
        axes.append(_values(name, v))
    size = math.prod(len(a) for a in axes)
    if size > MAX_POINTS:
        shape = " x ".join(str(len(a)) for a in axes)
        raise ScanTableError(f"the grid has {shape} = {size:,} points, over the limit of {MAX_POINTS:,}",
                             names[-1])
    return ScanGrid(tuple(names), tuple(axes))


def grid_from_mapping(grid) -> ScanGrid:
    """A :class:`ScanGrid` from ``{name: values}`` (API use); a ScanGrid is returned as it is."""
    if isinstance(grid, ScanGrid):
        return grid
    if not isinstance(grid, dict) or not grid:
        raise ScanTableError("the grid must be a non-empty dict {constant name: sequence of values}")
    names, axes = [], []
    for name, vals in grid.items():
        if not isinstance(name, str) or not name.isidentifier():
            raise ScanTableError(f"grid key {name!r} is not a valid constant name")
        a = np.atleast_1d(np.asarray(vals, dtype=np.float64))
        if a.ndim != 1 or a.size == 0:
            raise ScanTableError("needs a non-empty 1-D sequence of numbers", name)
        if not np.isfinite(a).all():
            raise ScanTableError("values must be finite", name)
        names.append(name)
        axes.append(a)
    size = math.prod(len(a) for a in axes)
    if size > MAX_POINTS:
        raise ScanTableError(f"the grid has {size:,} points, over the limit of {MAX_POINTS:,}")
    return ScanGrid(tuple(names), tuple(axes))
