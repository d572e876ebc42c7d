"""The Genz–Malik degree-7 / degree-5 embedded pair on ``[-1, 1]^d``.

Reference
---------
A. C. Genz and A. A. Malik, "An adaptive algorithm for numerical integration
over an n-dimensional rectangular region", *J. Comput. Appl. Math.* 6 (1980)
295–302.

The rule is fully symmetric and uses ``2^d + 2 d^2 + 2 d + 1`` nodes in five
groups (with ``e_i`` the unit vectors)::

    group     nodes                              count
    centre    0                                  1
    axis2     ±λ2 e_i                            2 d
    axis3     ±λ3 e_i                            2 d
    pair4     ±λ4 e_i ± λ4 e_j   (i < j)         2 d (d - 1)
    corner5   (±λ5, ..., ±λ5)                    2^d

with ``λ2 = sqrt(9/70)``, ``λ3 = λ4 = sqrt(9/10)``, ``λ5 = sqrt(9/19)``.  The
degree-5 partner uses the same nodes except the corners (weight 0 there).
Several weights are negative for larger ``d`` (the centre weight of the
degree-7 rule changes sign twice as ``d`` grows); this is inherent to the
construction.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations, product

import numpy as np

from .base import BoxRule, choose_axis

LAMBDA2 = np.sqrt(9.0 / 70.0)
LAMBDA3 = np.sqrt(9.0 / 10.0)
LAMBDA4 = np.sqrt(9.0 / 10.0)
LAMBDA5 = np.sqrt(9.0 / 19.0)


@dataclass(frozen=True, eq=False)
class GenzMalikRule(BoxRule):
    """Genz–Malik rule with the fourth-difference choice of the split axis.

    The node groups are recorded in ``extra["groups"]`` as
    ``name -> (start, stop)`` index ranges into ``nodes``; within the axis
    groups the order is ``+e_0, -e_0, +e_1, -e_1, ...``.
    """

    def split_axes(self, fvals: np.ndarray, halfwidths: np.ndarray) -> np.ndarray:
        """Choose the bisection axis by Genz and Malik's fourth divided difference.

        For each axis ``i`` the rule forms (Genz & Malik 1980, section 3)::

            D_i = | f(λ2 e_i) + f(-λ2 e_i) - 2 f(0)
                    - (λ2/λ3)^2 (f(λ3 e_i) + f(-λ3 e_i) - 2 f(0)) |

        which cancels the second-derivative term and so measures the
        fourth derivative of ``f`` along axis ``i``.  The axis with the
        largest ``D_i`` is bisected.  Axes whose ``D_i`` is within a relative
        ``1e-12`` of the maximum (plus a rounding-noise allowance scaled by
        ``max |f|`` over the nodes) count as tied, and the widest tied axis
        wins; so a constant or purely quadratic integrand bisects the widest
        axis, deterministically.

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
        """
        fvals = np.atleast_2d(np.asarray(fvals, dtype=float))
        n, d = fvals.shape[0], self.dim
        g = self.extra["groups"]
        used = fvals[:, : g["axis3"][1]]            # centre, ±λ2 e_i, ±λ3 e_i
        # all D_i at once: the differences are linear in the node values (one small GEMM)
        diff = np.abs(used @ self.extra["fourth_difference"])
        # magnitude of the values the differences are made of (rounding-noise scale)
        scale = np.abs(used).max(axis=1)
        return choose_axis(diff, np.broadcast_to(halfwidths, (n, d)), scale)


#: Highest dimension of the Genz-Malik rule: it has ``2^d + 2 d^2 + 2 d + 1``
#: nodes per region (33,247 at d = 15, 1,049,521 at d = 20), so the time and
#: memory of one region double with every dimension; a 50-D run once grew to
#: 24 GB before the kernel ended it (issue 10 item 6).
MAX_DIM = 15


def node_count(dim: int) -> int:
    """Nodes of the Genz-Malik rule in ``dim`` dimensions, ``2^d + 2 d^2 + 2 d + 1``."""
    return 2 ** dim + 2 * dim * dim + 2 * dim + 1


def dimension_error(dim) -> str:
    """Why the Genz-Malik rule refuses dimension ``dim`` (one line)."""
    if dim < 2:
        return f"genz-malik needs at least 2 dimensions, got {dim} (in 1-D use gauss-kronrod)"
    return (f"genz-malik supports 2 to {MAX_DIM} dimensions, got {dim}: it has 2^d + 2d^2 + 2d + 1 nodes per "
            f"region ({node_count(MAX_DIM):,} at d = {MAX_DIM}, {node_count(min(int(dim), 64)):,} at d = "
            f"{min(int(dim), 64)}), so the time and memory of each region double with every dimension")


def genz_malik_rule(dim: int) -> GenzMalikRule:
    """Build the Genz–Malik degree-7 rule with its embedded degree-5 rule.

    Parameters
    ----------
    dim : int
        Dimension ``d >= 2``.

    Returns
    -------
    GenzMalikRule
        Rule on ``[-1, 1]^d`` with ``2^d + 2 d^2 + 2 d + 1`` nodes; ``weights``
        (degree 7) and ``weights_low`` (degree 5) each sum to one.

    Raises
    ------
    ValueError
        If ``dim < 2`` or ``dim > MAX_DIM``.

    Notes
    -----
    Weights from Genz & Malik (1980), divided by the cube volume ``2^d`` so
    that they give the mean value.  Degree 7::

        w1 = (12824 - 9120 d + 400 d^2) / 19683     centre
        w2 = 980 / 6561                             ±λ2 e_i
        w3 = (1820 - 400 d) / 19683                 ±λ3 e_i
        w4 = 200 / 19683                            ±λ4 e_i ± λ4 e_j
        w5 = 6859 / 19683 / 2^d                     corners

    Degree 5: ``w1' = (729 - 950 d + 50 d^2) / 729``, ``w2' = 245 / 486``,
    ``w3' = (265 - 100 d) / 1458``, ``w4' = 25 / 729``, ``w5' = 0``.

    Degree 3 (``weights_third``, for the sharp error estimate): the centre
    and the ``±λ3 e_i`` nodes with ``w_axis = 1 / (6 λ3^2)`` and
    ``w_centre = 1 - 2 d w_axis``; it integrates ``1`` and ``x_i^2`` exactly
    (mean of ``x_i^2`` over ``[-1, 1]`` is 1/3) and every odd or mixed
    monomial of degree <= 3 by symmetry.

    References
    ----------
    A. C. Genz and A. A. Malik, *J. Comput. Appl. Math.* 6 (1980) 295–302.
    """
    d = int(dim)
    if d != dim or d < 2 or d > MAX_DIM:
        raise ValueError(dimension_error(dim))

    eye = np.eye(d)
    centre = np.zeros((1, d))
    axis = np.empty((2 * d, d))
    axis[0::2] = eye
    axis[1::2] = -eye
    pairs = []
    for i, j in combinations(range(d), 2):
        for si, sj in product((1.0, -1.0), repeat=2):
            v = np.zeros(d)
            v[i], v[j] = si, sj
            pairs.append(v)
    pairs = np.array(pairs).reshape(-1, d)
    corners = np.array(list(product((1.0, -1.0), repeat=d)))

    nodes = np.vstack([centre, LAMBDA2 * axis, LAMBDA3 * axis, LAMBDA4 * pairs, LAMBDA5 * corners])
    counts = [1, 2 * d, 2 * d, pairs.shape[0], corners.shape[0]]
    names = ["centre", "axis2", "axis3", "pair4", "corner5"]
    bounds = np.concatenate([[0], np.cumsum(counts)])
    groups = {nm: (int(bounds[k]), int(bounds[k + 1])) for k, nm in enumerate(names)}

    w7 = [(12824 - 9120 * d + 400 * d * d) / 19683, 980 / 6561, (1820 - 400 * d) / 19683,
          200 / 19683, 6859 / 19683 / 2.0 ** d]
    w5 = [(729 - 950 * d + 50 * d * d) / 729, 245 / 486, (265 - 100 * d) / 1458, 25 / 729, 0.0]
    weights = np.repeat(w7, counts)
    weights_low = np.repeat(w5, counts)
    weights_third = np.zeros(len(weights))
    w_axis = 1.0 / (6.0 * LAMBDA3 * LAMBDA3)
    weights_third[groups["axis3"][0]:groups["axis3"][1]] = w_axis
    weights_third[0] = 1.0 - 2 * d * w_axis

    # D_i = f(λ2 e_i) + f(-λ2 e_i) - 2 f0 - r (f(λ3 e_i) + f(-λ3 e_i) - 2 f0), r = (λ2/λ3)^2, as a matrix
    # over the centre and the two axis groups (their +e_i, -e_i order as built above)
    r = (LAMBDA2 / LAMBDA3) ** 2
    fourth = np.zeros((groups["axis3"][1], d))
    fourth[0, :] = -2.0 + 2.0 * r
    for i in range(d):
        fourth[groups["axis2"][0] + 2 * i: groups["axis2"][0] + 2 * i + 2, i] = 1.0
        fourth[groups["axis3"][0] + 2 * i: groups["axis3"][0] + 2 * i + 2, i] = -r

    return GenzMalikRule(
        name="genz-malik", dim=d, nodes=nodes, weights=weights, weights_low=weights_low,
        degree=7, degree_low=5, extra={"groups": groups, "fourth_difference": fourth},
        weights_third=weights_third,
    )
