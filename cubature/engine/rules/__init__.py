"""Rule families and a cached registry.

Families
--------
``"genz-malik"``
    Degree-7/5 embedded pair on boxes, d >= 2 (Genz & Malik 1980).
``"gauss-kronrod"``
    Tensor K15/G7 Gauss–Kronrod pair on boxes, 1 <= d <= 5 (Kronrod 1965).
``"grundmann-moller"``
    Odd-degree embedded pairs on simplices, d >= 1 (Grundmann & Möller 1978).

Rules returned by :func:`box_rule` and :func:`simplex_rule` are cached and
shared, so their arrays are made read-only.
"""

from __future__ import annotations

from functools import cache

import numpy as np

from . import gauss_kronrod, genz_malik, grundmann_moller
from .base import BoxRule, SimplexRule, choose_axis
from .gauss_kronrod import MAX_DIM as GAUSS_KRONROD_MAX_DIM
from .gauss_kronrod import gauss_kronrod_rule
from .genz_malik import genz_malik_rule
from .grundmann_moller import bisect_simplices, grundmann_moller_rule, simplex_volumes

RULE_NAMES = ("genz-malik", "gauss-kronrod", "grundmann-moller")
BOX_RULES = ("genz-malik", "gauss-kronrod")
SIMPLEX_RULES = ("grundmann-moller",)

__all__ = [
    "RULE_NAMES", "BOX_RULES", "SIMPLEX_RULES", "BoxRule", "SimplexRule", "box_rule",
    "simplex_rule", "default_rule", "genz_malik_rule", "gauss_kronrod_rule",
    "grundmann_moller_rule", "bisect_simplices", "simplex_volumes", "choose_axis", "second_opinion",
    "GAUSS_KRONROD_MAX_DIM", "rule_limit_error",
]


def _freeze(rule):
    """Make every array of ``rule`` (including those in ``extra``) read-only."""
    for name in ("nodes", "bary", "weights", "weights_low", "weights_third"):
        arr = getattr(rule, name, None)
        if isinstance(arr, np.ndarray):
            arr.flags.writeable = False
    for value in rule.extra.values():
        if isinstance(value, np.ndarray):
            value.flags.writeable = False
    return rule


def _unknown(name) -> ValueError:
    return ValueError(f"unknown rule {name!r}; valid rules: {', '.join(RULE_NAMES)}")


def box_rule(name: str, dim: int) -> BoxRule:
    """Return the cached box rule of family ``name`` in dimension ``dim``.

    Parameters
    ----------
    name : str
        ``"genz-malik"`` (Genz & Malik 1980, d >= 2) or ``"gauss-kronrod"``
        (Kronrod 1965, tensor K15/G7, 1 <= d <= 5).
    dim : int
        Dimension.

    Returns
    -------
    BoxRule
        Immutable rule (read-only arrays), shared between callers.

    Raises
    ------
    ValueError
        For an unknown name, a simplex family, or an unsupported dimension.
    """
    return _box_rule(name, dim)


@cache
def _box_rule(name: str, dim: int) -> BoxRule:
    # cached on positional arguments so keyword and positional calls share entries
    if name == "genz-malik":
        return _freeze(genz_malik_rule(dim))
    if name == "gauss-kronrod":
        return _freeze(gauss_kronrod_rule(dim))
    if name in SIMPLEX_RULES:
        raise ValueError(f"rule {name!r} is for simplices, not boxes; box rules: {', '.join(BOX_RULES)}")
    raise _unknown(name)


def simplex_rule(name: str, dim: int, degree: int = 7) -> SimplexRule:
    """Return the cached simplex rule of family ``name``.

    Parameters
    ----------
    name : str
        ``"grundmann-moller"`` (Grundmann & Möller 1978).
    dim : int
        Dimension ``d >= 1``.
    degree : int
        Odd degree ``>= 3`` (default 7, with an embedded degree-5 partner).

    Returns
    -------
    SimplexRule
        Immutable rule (read-only arrays), shared between callers.

    Raises
    ------
    ValueError
        For an unknown name, a box family, or an invalid dimension/degree.
    """
    return _simplex_rule(name, dim, degree)


@cache
def _simplex_rule(name: str, dim: int, degree: int) -> SimplexRule:
    # cached on the full argument tuple, so that the default degree and an
    # explicit 7 share one entry
    if name == "grundmann-moller":
        return _freeze(grundmann_moller_rule(dim, degree))
    if name in BOX_RULES:
        raise ValueError(f"rule {name!r} is for boxes, not simplices; simplex rules: {', '.join(SIMPLEX_RULES)}")
    raise _unknown(name)


def rule_limit_error(name: str, dim: int, degree: int | None = None) -> str | None:
    """Why rule family ``name`` cannot serve dimension ``dim`` (and degree), without building it.

    Each family has a supported range and says why (issue 10 items 6 and 8):
    Genz-Malik 2..15 dimensions (``2^d`` nodes per region), tensor
    Gauss-Kronrod 1..5 (``15^d``), Grundmann-Möller 1..20 dimensions and odd
    degrees 3..15 with at most 15,000 nodes per region.

    Parameters
    ----------
    name : str
        Rule family (one of :data:`RULE_NAMES`).
    dim : int
        Dimension.
    degree : int, optional
        Degree of a simplex rule (default 7); ignored for box rules.

    Returns
    -------
    str or None
        A one-line reason, or None when the rule is supported.
    """
    if name == "genz-malik":
        return None if 2 <= dim <= genz_malik.MAX_DIM else genz_malik.dimension_error(dim)
    if name == "gauss-kronrod":
        return None if 1 <= dim <= gauss_kronrod.MAX_DIM else gauss_kronrod.dimension_error(dim)
    if name == "grundmann-moller":
        return grundmann_moller.limit_error(dim, 7 if degree is None else degree)
    return str(_unknown(name))


def default_rule(kind: str, dim: int) -> str:
    """Name of the default rule family for a domain kind and dimension.

    Boxes with ``d <= 2`` get ``"gauss-kronrod"`` (225 nodes at d = 2, very
    high degree per region); boxes with ``d >= 3`` get ``"genz-malik"``
    (``2^d + 2 d^2 + 2 d + 1`` nodes, Genz & Malik 1980); simplices get
    ``"grundmann-moller"`` (Grundmann & Möller 1978).  The thresholds are a
    starting point and may be tuned.

    Parameters
    ----------
    kind : str
        ``"box"`` or ``"simplex"``.
    dim : int
        Dimension ``d >= 1``.

    Returns
    -------
    str
        One of :data:`RULE_NAMES`.

    Raises
    ------
    ValueError
        For an unknown kind or a dimension below 1.
    """
    if int(dim) != dim or dim < 1:
        raise ValueError(f"dimension must be an integer >= 1, got {dim}")
    if kind == "box":
        return "gauss-kronrod" if dim <= 2 else "genz-malik"
    if kind == "simplex":
        return "grundmann-moller"
    raise ValueError(f"unknown domain kind {kind!r}; valid kinds: box, simplex")


def second_opinion(kind: str, dim: int, rule: str, split: str = "bisect") -> tuple[dict, str]:
    """Settings for an independent re-computation, and a description of them.

    The point is different nodes and different region boundaries, so that
    a feature one method cannot see (a kink clipping corners between the
    nodes, a jump) is unlikely to be hidden from the other in the same way:

    * boxes, d <= 3: the other box rule (Genz–Malik <-> Gauss–Kronrod);
    * boxes, d = 1: Gauss–Kronrod with the plain ``|Q - Q_low|`` estimate;
    * boxes, d >= 4: Genz–Malik with every axis split at once (when the main
      run bisected) or bisection (when it split every axis), plain estimate;
    * simplices: the Grundmann–Möller rule of degree 9 (degree 7 when the
      main run used 9 or more).
    """
    if kind == "simplex":
        return ({"rule": "grundmann-moller", "degree": 9}, "grundmann-moller degree 9")
    if dim == 1:
        return ({"rule": "gauss-kronrod", "estimate": "plain"}, "gauss-kronrod, plain |Q15 - Q7| estimate")
    if dim <= 3:
        other = "gauss-kronrod" if rule == "genz-malik" else "genz-malik"
        return ({"rule": other}, other)
    other_split = "all" if split == "bisect" else "bisect"
    words = "every axis split at once" if other_split == "all" else "bisection"
    return ({"rule": "genz-malik", "split": other_split, "estimate": "plain"},
            f"genz-malik, {words}, plain |Q7 - Q5| estimate")
