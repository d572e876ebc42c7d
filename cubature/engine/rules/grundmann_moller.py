"""Grundmann–Möller simplex rules and longest-edge bisection of simplices.

References
----------
A. Grundmann and H. M. Möller, "Invariant integration formulas for the
n-simplex by combinatorial methods", *SIAM J. Numer. Anal.* 15 (1978)
282–290.

For ``s >= 0`` the Grundmann–Möller rule of degree ``2 s + 1`` on the
standard simplex (volume ``1/d!``) is::

    Q_s f = sum_{i=0..s} (-1)^i 2^(-2s) (d + 2s + 1 - 2i)^(2s+1)
                         / (i! (d + 2s + 1 - i)!)
            * sum_{|β| = s - i, β in N^(d+1)} f((2β_0 + 1)/m_i, ..., (2β_d + 1)/m_i)

with ``m_i = d + 2s + 1 - 2i`` and the arguments barycentric coordinates.  The
node set of ``Q_{s-1}`` is the subset of that of ``Q_s`` with ``m <= d + 2s - 1``,
so each rule carries the next lower member as an embedded partner on the same
nodes at no extra cost.  The weights alternate in sign between layers: the
rules are **not** positive, and for high degree the weights grow in magnitude,
so rounding in the integrand is amplified by ``sum |w|`` (recorded in
``extra["abs_weight_sum"]``).
"""

from __future__ import annotations

import math
from fractions import Fraction
from itertools import combinations

import numpy as np

from .base import SimplexRule


def _compositions(total: int, parts: int):
    """Yield every ``β`` in ``N^parts`` with ``|β| = total`` (stars and bars)."""
    for bars in combinations(range(total + parts - 1), parts - 1):
        prev = -1
        beta = []
        for b in bars:
            beta.append(b - prev - 1)
            prev = b
        beta.append(total + parts - 1 - prev - 1)
        yield beta


def _gm_layers(d: int, s: int):
    """Yield ``(weight, nodes)`` per layer of ``Q_s``: exact weights, node keys as Fractions."""
    for i in range(s + 1):
        m = d + 2 * s + 1 - 2 * i
        w = Fraction((-1) ** i * m ** (2 * s + 1), 2 ** (2 * s) * math.factorial(i) * math.factorial(m + i))
        nodes = [tuple(Fraction(2 * b + 1, m) for b in beta) for beta in _compositions(s - i, d + 1)]
        yield w, nodes


def _gm_weights(d: int, s: int) -> dict:
    """Mean-normalised weights of ``Q_s`` keyed by exact barycentric node (duplicates merged)."""
    out: dict = {}
    scale = math.factorial(d)  # Q_s integrates over a simplex of volume 1/d!
    for w, nodes in _gm_layers(d, s):
        for key in nodes:
            out[key] = out.get(key, Fraction(0)) + w * scale
    return out


#: Highest degree: the weights alternate in sign and their absolute sum, which
#: multiplies the rounding errors of the integrand values, roughly doubles with
#: each step of 2 in degree (251 at degree 15 in 3-D, 1,190 at degree 19), so
#: higher degrees lose more accuracy in double precision than they gain; the
#: exact-fraction construction also grows fast (degree 10001 ran for minutes,
#: issue 10 item 8).
MAX_DEGREE = 15
#: Highest dimension (nodes per region grow like ``d^s / s!``; 2,024 at
#: degree 7 in 20-D).
MAX_DIM = 20
#: Most nodes per region of a buildable rule (degree 9 in 20-D has 12,650).
MAX_NODES = 15_000


def node_bound(dim: int, degree: int) -> int:
    """Nodes of the degree-``degree`` rule before merging shared ones (an upper bound):
    ``sum_{i=0..s} C(s - i + d, d)``, ``s = (degree - 1) / 2``."""
    s = (int(degree) - 1) // 2
    return sum(math.comb(s - i + int(dim), int(dim)) for i in range(s + 1))


def limit_error(dim, degree) -> str | None:
    """Why the rule of this dimension and degree is not supported (one line), or None."""
    if int(dim) != dim or dim < 1 or dim > MAX_DIM:
        return (f"grundmann-moller supports 1 to {MAX_DIM} dimensions, got {dim}: its nodes per region grow "
                f"like d^s/s! and the absolute sum of its alternating weights, which multiplies rounding "
                f"errors, grows with d")
    if isinstance(degree, bool) or int(degree) != degree or degree < 3 or degree % 2 == 0:
        return f"grundmann-moller degree must be an odd whole number from 3 to {MAX_DEGREE}, got {degree}"
    if degree > MAX_DEGREE:
        return (f"grundmann-moller supports odd degrees 3 to {MAX_DEGREE}, got {degree}: its weights alternate "
                "in sign and their absolute sum, which multiplies rounding errors in the integrand values, "
                f"roughly doubles with each step of 2 in degree (about 250 at degree {MAX_DEGREE} in 3-D)")
    n = node_bound(dim, degree)
    if n > MAX_NODES:
        return (f"grundmann-moller of degree {degree} in {dim} dimensions has {n:,} nodes per region; at most "
                f"{MAX_NODES:,} are supported, so lower the degree")
    return None


def grundmann_moller_rule(dim: int, degree: int = 7) -> SimplexRule:
    """Build the Grundmann–Möller rule of odd degree with its embedded partner.

    Parameters
    ----------
    dim : int
        Dimension ``d >= 1``.
    degree : int
        Odd degree ``2 s + 1 >= 3``.

    Returns
    -------
    SimplexRule
        Barycentric nodes (all coordinates strictly positive) with
        ``weights`` of the degree ``2 s + 1`` rule and ``weights_low`` of the
        degree ``2 s - 1`` member on the subset of its nodes (zero on the
        others), each summing to one.  Nodes that two layers share (for
        instance the centroid when ``s >= d + 1``) are merged and their
        weights added.  Weights may be negative.

    Raises
    ------
    ValueError
        If ``degree`` is not an odd integer in ``3..MAX_DEGREE``, ``dim`` is
        not in ``1..MAX_DIM`` or the rule would have more than ``MAX_NODES``
        nodes (see :func:`limit_error`).

    Notes
    -----
    Weights are formed in exact rational arithmetic and rounded once.

    References
    ----------
    A. Grundmann and H. M. Möller, *SIAM J. Numer. Anal.* 15 (1978) 282–290,
    Theorem 4.
    """
    d = int(dim)
    problem = limit_error(dim, degree)
    if problem:
        raise ValueError(problem)
    s = (int(degree) - 1) // 2
    high = _gm_weights(d, s)
    low = _gm_weights(d, s - 1)
    missing = set(low) - set(high)
    if missing:  # cannot happen by construction; guard the subset property
        raise AssertionError("embedded Grundmann-Moller nodes are not a subset")
    keys = sorted(high, key=lambda k: tuple(-x for x in k))
    bary = np.array([[float(x) for x in k] for k in keys])
    weights = np.array([float(high[k]) for k in keys])
    weights_low = np.array([float(low.get(k, 0)) for k in keys])
    weights_third = None
    if s >= 2:  # the member of degree 2s - 3, on a subset of the same nodes
        third = _gm_weights(d, s - 2)
        weights_third = np.array([float(third.get(k, 0)) for k in keys])
    return SimplexRule(
        name="grundmann-moller", dim=d, bary=bary, weights=weights, weights_low=weights_low,
        degree=2 * s + 1, degree_low=2 * s - 1,
        extra={"s": s, "abs_weight_sum": float(np.abs(weights).sum())}, weights_third=weights_third,
    )


def simplex_volumes(vertices: np.ndarray) -> np.ndarray:
    """Volumes of simplices given by their vertices.

    Parameters
    ----------
    vertices : ndarray, shape (n, d + 1, d)

    Returns
    -------
    ndarray, shape (n,)
        ``|det(V_1 - V_0, ..., V_d - V_0)| / d!``.
    """
    v = np.asarray(vertices, dtype=float)
    d = v.shape[-1]
    edges = v[:, 1:, :] - v[:, :1, :]
    return np.abs(np.linalg.det(edges)) / math.factorial(d)


def bisect_simplices(vertices: np.ndarray, rtol: float = 1e-12):
    """Bisect each simplex across its longest edge.

    The longest edge ``(a, b)`` of each simplex is cut at its midpoint ``m``;
    the two children are the parent with vertex ``b`` replaced by ``m`` and
    the parent with vertex ``a`` replaced by ``m``.  Each child has exactly
    half the parent's volume.  Edges whose squared length is within a
    relative ``rtol`` of the longest count as tied, and the tie goes to the
    lowest vertex-index pair in lexicographic order ``(0,1), (0,2), ...,
    (1,2), ...``, so the choice is deterministic.

    Repeated longest-edge bisection keeps the children's shapes from
    degenerating (their smallest angles stay bounded away from zero in 2-D),
    which keeps simplex rules accurate on the pieces; see M.-C. Rivara,
    "Algorithms for refining triangular grids suitable for adaptive and
    multigrid techniques", *Int. J. Numer. Meth. Eng.* 20 (1984) 745–756
    (from memory), and R. B. Kearfott, "A proof of convergence and an error
    bound for the method of bisection in R^n", *Math. Comp.* 32 (1978)
    1147–1153 (from memory), for the diameter reduction in any dimension.

    Parameters
    ----------
    vertices : ndarray, shape (n, d + 1, d)
        Vertex matrices of ``n`` simplices.
    rtol : float
        Relative tolerance for ties between edge lengths.

    Returns
    -------
    children : ndarray, shape (2 n, d + 1, d)
        ``children[2 k]`` and ``children[2 k + 1]`` are the halves of
        simplex ``k``.
    edges : ndarray of int, shape (n, 2)
        The vertex-index pair ``(a, b)``, ``a < b``, of the edge cut.
    """
    v = np.asarray(vertices, dtype=float)
    if v.ndim != 3 or v.shape[1] != v.shape[2] + 1:
        raise ValueError(f"vertices must have shape (n, d+1, d), got {v.shape}")
    n, k = v.shape[0], v.shape[1]
    ia, ib = np.triu_indices(k, 1)  # lexicographic pair order
    diff = v[:, ib, :] - v[:, ia, :]
    len2 = np.einsum("npd,npd->np", diff, diff)
    best = len2.max(axis=1, keepdims=True)
    pick = np.argmax(len2 >= best * (1.0 - rtol), axis=1)
    a, b = ia[pick], ib[pick]
    rows = np.arange(n)
    mid = 0.5 * (v[rows, a, :] + v[rows, b, :])
    first = v.copy()
    first[rows, b, :] = mid
    second = v.copy()
    second[rows, a, :] = mid
    children = np.empty((2 * n,) + v.shape[1:])
    children[0::2] = first
    children[1::2] = second
    return children, np.stack([a, b], axis=1)
