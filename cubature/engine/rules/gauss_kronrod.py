"""Tensor products of the 15-point Kronrod extension of the 7-point Gauss rule.

References
----------
A. S. Kronrod, *Nodes and Weights of Quadrature Formulas*, Consultants
Bureau, New York (1965) — the Kronrod extension of Gauss–Legendre rules.
R. Piessens, E. de Doncker-Kapenga, C. W. Überhuber and D. K. Kahaner,
*QUADPACK: A Subroutine Package for Automatic Integration*, Springer (1983),
which tabulates the 15-point abscissae and weights to 33 digits.

In one dimension the 15-point Kronrod rule ``K15`` shares the seven nodes of
the Gauss rule ``G7`` and adds eight more; ``K15`` is exact to degree 22
(3 n + 1 with n = 7; being symmetric it is in fact also exact for degree 23)
and ``G7`` to degree 13.  In ``d`` dimensions the rule is the tensor product
``K15 x ... x K15`` on ``15^d`` nodes, and its embedded partner is
``G7 x ... x G7`` on the ``7^d`` Gauss sub-grid (weight 0 elsewhere).  The
node count grows as ``15^d`` (50625 at d = 4, 759375 at d = 5), so the family
suits low dimensions; it is refused above d = 5.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from functools import reduce

import numpy as np

from .base import BoxRule, choose_axis

#: Highest dimension of the tensor Gauss-Kronrod rule: it has ``15^d`` nodes per
#: region (759,375 at d = 5), fifteen times more with every dimension.
MAX_DIM = 5


def dimension_error(dim) -> str:
    """Why the tensor Gauss-Kronrod rule refuses dimension ``dim`` (one line)."""
    return (f"gauss-kronrod supports 1 to {MAX_DIM} dimensions, got {dim}: it is a tensor product with 15^d "
            f"nodes per region ({15 ** MAX_DIM:,} at d = {MAX_DIM}); use genz-malik from 3 dimensions up")

# Non-negative K15 abscissae, descending; odd positions (1, 3, 5, 7) are the
# G7 abscissae.  Values as published in QUADPACK (Piessens et al. 1983).
_XK = np.array([
    0.991455371120812639206854697526329,
    0.949107912342758524526189684047851,
    0.864864423359769072789712788640926,
    0.741531185599394439863864773280788,
    0.586087235467691130294144845693013,
    0.405845151377397166906606412076961,
    0.207784955007898467600689403773245,
    0.000000000000000000000000000000000,
])
_WK = np.array([
    0.022935322010529224963732008058970,
    0.063092092629978553290700663189204,
    0.104790010322250183839876322541518,
    0.140653259715525918745189590510238,
    0.169004726639267902826583426598550,
    0.190350578064785409913256402421014,
    0.204432940075298892414161999234649,
    0.209482141084727828012999174891714,
])
# G7 weights for the abscissae _XK[1], _XK[3], _XK[5], _XK[7].
_WG = np.array([
    0.129484966168869693270611432679082,
    0.279705391489276667901467771423780,
    0.381830050505118944950369775488975,
    0.417959183673469387755102040816327,
])


def kronrod15() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return the 1-D K15 nodes with K15 and G7 weights on ``[-1, 1]``.

    Returns
    -------
    nodes : ndarray, shape (15,)
        Ascending abscissae; the G7 abscissae are at the odd indices.
    wk : ndarray, shape (15,)
        K15 weights (summing to 2).
    wg : ndarray, shape (15,)
        G7 weights on the same nodes, zero at the Kronrod-only nodes
        (summing to 2).

    References
    ----------
    Kronrod (1965); values as tabulated in Piessens et al., QUADPACK (1983).
    """
    nodes = np.concatenate([-_XK[:-1], _XK[::-1]])
    wk = np.concatenate([_WK[:-1], _WK[::-1]])
    wg_half = np.zeros(8)
    wg_half[1::2] = _WG
    wg = np.concatenate([wg_half[:-1], wg_half[::-1]])
    return nodes, wk, wg


@dataclass(frozen=True, eq=False)
class GaussKronrodRule(BoxRule):
    """Tensor Gauss–Kronrod rule with a per-axis embedded-difference split.

    ``extra`` holds the 1-D data: ``"nodes_1d"``, ``"wk_1d"``, ``"wg_1d"``
    (mean-normalised, each summing to one), and for the vertex probes
    ``"diagonal"`` (indices, shape (2^d, 6), of the nodes at the six
    outermost abscissae ``"diagonal_t"`` on the diagonal towards each
    vertex, vertices in ``itertools.product((1, -1), repeat=d)`` order).  Nodes are ordered as a C-order
    flattening of the ``15 x ... x 15`` grid, axis 0 slowest.
    """

    def split_axes(self, fvals: np.ndarray, halfwidths: np.ndarray) -> np.ndarray:
        """Choose the bisection axis by the Gauss/Kronrod difference along each axis.

        For axis ``i`` the score is ``|K x ... x K f - K x .. G_i .. x K f|``,
        the change in the mean when axis ``i`` alone drops from the Kronrod
        to the Gauss rule, i.e. the tensor contraction of ``f`` with
        ``K - G`` along axis ``i`` and ``K`` along the others.  It estimates
        the error contributed by axis ``i``.  The largest score wins; scores
        within a relative ``1e-12`` of the maximum (plus a rounding-noise
        allowance scaled by ``max |f|``) are ties, resolved in favour of the
        widest axis, so a constant integrand bisects the widest axis.

        Parameters
        ----------
        fvals : ndarray, shape (n, p)
            Integrand values (a scalar summary per node) of ``n`` regions.
        halfwidths : ndarray, shape (n, d)
            Half-widths of the regions.

        Returns
        -------
        ndarray of int, shape (n,)
            Axis to bisect per region.

        References
        ----------
        The per-axis use of the embedded Gauss rule follows the idea of
        choosing the coordinate with the largest error estimate in Genz &
        Malik (1980), *J. Comput. Appl. Math.* 6, 295–302.
        """
        fvals = np.atleast_2d(np.asarray(fvals, dtype=float))
        n, d = fvals.shape[0], self.dim
        wk = self.extra["wk_1d"]
        dw = wk - self.extra["wg_1d"]
        grid = fvals.reshape((n,) + (15,) * d)
        scores = np.empty((n, d))
        for i in range(d):
            t = grid
            for j in reversed(range(d)):  # contract the last remaining axis, i.e. axis j
                t = t @ (dw if j == i else wk)
            scores[:, i] = np.abs(t)
        scale = np.abs(fvals).max(axis=1)
        return choose_axis(scores, np.broadcast_to(halfwidths, (n, d)), scale)


def gauss_kronrod_rule(dim: int) -> GaussKronrodRule:
    """Build the ``d``-fold tensor product of the K15/G7 Gauss–Kronrod pair.

    Parameters
    ----------
    dim : int
        Dimension, ``1 <= d <= 5``.  The node count is ``15^d``, so memory
        and work grow quickly; ``d <= 4`` is the sensible range.

    Returns
    -------
    GaussKronrodRule
        Rule on ``[-1, 1]^d`` with ``15^d`` nodes; ``weights`` is
        ``K15^(x d)`` (degree 22 per axis) and ``weights_low`` is
        ``G7^(x d)`` on the Gauss sub-grid (degree 13 per axis), each summing
        to one.

    Raises
    ------
    ValueError
        If ``dim < 1`` or ``dim > 5``.

    References
    ----------
    Kronrod (1965); Piessens et al., QUADPACK (1983) for the tabulated values.

    Notes
    -----
    ``weights_third`` (for the sharp error estimate) is the tensor product of
    the interpolatory 1-D rule on the 8 Kronrod-only abscissae (degree 7,
    exact moments of ``[-1, 1]``).
    """
    d = int(dim)
    if d != dim or d < 1 or d > MAX_DIM:
        raise ValueError(dimension_error(dim))
    x, wk, wg = kronrod15()
    wk, wg = wk / 2.0, wg / 2.0
    grids = np.meshgrid(*([x] * d), indexing="ij")
    nodes = np.stack([g.ravel() for g in grids], axis=1)
    weights = reduce(np.multiply.outer, [wk] * d).ravel()
    weights_low = reduce(np.multiply.outer, [wg] * d).ravel()
    sub = np.nonzero(wg == 0)[0]                      # the Kronrod-only abscissae
    vander = np.vander(x[sub], len(sub), increasing=True).T
    moments = np.array([(1.0 if j % 2 == 0 else 0.0) / (j + 1) for j in range(len(sub))])  # mean of x^j
    w8 = np.zeros(len(x))
    w8[sub] = np.linalg.solve(vander, moments)
    weights_third = reduce(np.multiply.outer, [w8] * d).ravel()
    # the nodes on the diagonal towards each vertex (sign vectors in itertools.product((1, -1)) order), at the
    # six outermost abscissae: the vertex probes compare the vertex value with their extrapolation
    signs = np.array(list(itertools.product((1, -1), repeat=d)))
    outer = np.arange(6)                                       # _XK[0..5], descending
    one_d = np.where(signs[:, :, None] > 0, 14 - outer[None, None, :], outer[None, None, :])   # (v, d, 4)
    diagonal = (one_d * (15 ** np.arange(d - 1, -1, -1))[None, :, None]).sum(axis=1)
    return GaussKronrodRule(
        name="gauss-kronrod", dim=d, nodes=nodes, weights=np.asarray(weights, dtype=float),
        weights_low=np.asarray(weights_low, dtype=float), degree=22, degree_low=13,
        extra={"nodes_1d": x, "wk_1d": wk, "wg_1d": wg, "diagonal": diagonal,
               "diagonal_t": _XK[:6].copy()}, weights_third=np.asarray(weights_third, dtype=float),
    )
