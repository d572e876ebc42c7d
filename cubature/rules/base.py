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
    """

    name: str
    dim: int
    nodes: np.ndarray
    weights: np.ndarray
    weights_low: np.ndarray
    degree: int
    degree_low: int
    extra: dict = field(default_factory=dict)

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
    """

    name: str
    dim: int
    bary: np.ndarray
    weights: np.ndarray
    weights_low: np.ndarray
    degree: int
    degree_low: int
    extra: dict = field(default_factory=dict)

    @property
    def size(self) -> int:
        """Number of nodes per region."""
        return self.bary.shape[0]
