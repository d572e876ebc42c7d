"""Rules as data.

A rule is a set of nodes on a reference region with two weight vectors: the
rule proper (``weights``, exact to ``degree``) and an embedded rule of lower
degree on the same nodes (``weights_low``, exact to ``degree_low``).  Both
weight vectors are normalised to sum to one, so that ``weights @ f(nodes)`` is
the *mean* of ``f`` over the region and the integral is the region's volume
times that mean.

Box rules live on the reference cube ``[-1, 1]^d``; a region with centre ``c``
and half-widths ``h`` maps a node ``u`` to ``c + h * u``.

Simplex rules store barycentric coordinates (``(p, d + 1)``, rows summing to
one); a simplex with vertex matrix ``V`` (``(d + 1, d)``) maps them to
``bary @ V``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True, eq=False)
class BoxRule:
    """An embedded pair of cubature rules on ``[-1, 1]^d``.

    Attributes
    ----------
    name : str
        Rule family name as used on the command line (``"genz-malik"``, ...).
    dim : int
        Dimension ``d``.
    nodes : ndarray, shape (p, d)
        Nodes on the reference cube.
    weights, weights_low : ndarray, shape (p,)
        Weights of the rule and of its embedded lower-degree partner, each
        summing to one.
    degree, degree_low : int
        Polynomial degrees of exactness.
    weights_third : ndarray, shape (p,), or None
        Weights (summing to one) of a third, still lower-degree member of the
        family on the same nodes, for the sharp error estimate of
        :mod:`cubage.engine.estimate`; None where the family has none.
    """

    name: str
    dim: int
    nodes: np.ndarray
    weights: np.ndarray
    weights_low: np.ndarray
    degree: int
    degree_low: int
    extra: dict = field(default_factory=dict)
    weights_third: np.ndarray | None = None

    @property
    def size(self) -> int:
        """Number of nodes per region."""
        return self.nodes.shape[0]

    def split_axes(self, fvals: np.ndarray, halfwidths: np.ndarray) -> np.ndarray:
        """Choose the axis to bisect for each region.

        Parameters
        ----------
        fvals : ndarray, shape (n, p)
            Integrand values at the nodes of ``n`` regions (for a vector
            integrand, a scalar summary such as the sum of absolute
            components, formed by the caller).
        halfwidths : ndarray, shape (n, d)
            Half-widths of the regions.

        Returns
        -------
        ndarray of int, shape (n,)
            Axis index per region.  The default (overridden by rule families
            that can do better) is the widest axis.
        """
        return np.argmax(halfwidths, axis=1)


@dataclass(frozen=True, eq=False)
class SimplexRule:
    """An embedded pair of cubature rules on a simplex, in barycentric form.

    Attributes
    ----------
    name : str
        Rule family name (``"grundmann-moller"``).
    dim : int
        Dimension ``d``.
    bary : ndarray, shape (p, d + 1)
        Barycentric coordinates of the nodes (rows sum to one).
    weights, weights_low : ndarray, shape (p,)
        Weights of the rule and its embedded partner, each summing to one.
    degree, degree_low : int
        Polynomial degrees of exactness.
    weights_third : ndarray, shape (p,), or None
        Weights of the member of degree ``degree_low - 2`` on the same nodes
        (a subset of them), or None when ``degree_low < 3``.
    """

    name: str
    dim: int
    bary: np.ndarray
    weights: np.ndarray
    weights_low: np.ndarray
    degree: int
    degree_low: int
    extra: dict = field(default_factory=dict)
    weights_third: np.ndarray | None = None

    @property
    def size(self) -> int:
        """Number of nodes per region."""
        return self.bary.shape[0]


def choose_axis(scores: np.ndarray, halfwidths: np.ndarray, scale: np.ndarray | None = None,
                rtol: float = 1e-12) -> np.ndarray:
    """Pick the axis with the largest score, resolving ties by width.

    Shared tie-breaking for the ``split_axes`` methods of the rule families.
    An axis is *tied* with the best one when its score is within
    ``rtol * max_score + 64 * eps * scale`` of the maximum; among the tied
    axes the widest wins (the lowest index on equal widths).  The absolute
    term makes scores that are pure rounding noise (for instance every score
    of a constant integrand) count as ties, so such a region is bisected
    along its widest axis, deterministically.

    Parameters
    ----------
    scores : ndarray, shape (n, d)
        Non-negative per-axis variation measures of ``n`` regions.
    halfwidths : ndarray, shape (n, d)
        Half-widths of the regions.
    scale : ndarray, shape (n,), optional
        Magnitude of the integrand values of each region (for instance
        ``max |f|`` over the nodes); rounding noise is measured against it.
    rtol : float
        Relative tie tolerance.

    Returns
    -------
    ndarray of int, shape (n,)
        Chosen axis per region.
    """
    scores = np.asarray(scores, dtype=float)
    halfwidths = np.broadcast_to(np.asarray(halfwidths, dtype=float), scores.shape)
    best = scores.max(axis=1, keepdims=True)
    tol = rtol * best
    if scale is not None:
        tol = tol + 64.0 * np.finfo(float).eps * np.asarray(scale, dtype=float).reshape(-1, 1)
    tied = scores >= best - tol
    return np.argmax(np.where(tied, halfwidths, -np.inf), axis=1)
