"""A third, lower-degree member on each rule's nodes, for the sharp error estimate.

:mod:`cubage.engine.estimate` compares the differences ``|q7 - q5|`` and
``|q5 - q3|``; this module supplies the weights of ``q3`` on the nodes a rule
already has, so the comparison costs no extra integrand evaluation.

* Genz–Malik: the degree-3 rule on the centre and the ``±λ3 e_i`` nodes,
  ``w_axis = 1 / (6 λ3^2)`` and ``w_centre = 1 - 2 d w_axis`` (it integrates
  ``1`` and ``x_i^2`` exactly — mean of ``x_i^2`` over ``[-1, 1]`` is 1/3 —
  and every odd or mixed monomial of degree <= 3 by symmetry).
* Gauss–Kronrod tensor: the tensor product of the interpolatory 1-D rule on
  the 8 Kronrod-only abscissae (degree 7, exact moments of ``[-1, 1]``).
* Grundmann–Möller of degree ``2s+1``: the member of degree ``2s-3`` (its
  nodes are a subset, Grundmann & Möller 1978); for degree 3 none exists.
"""

from __future__ import annotations

import numpy as np

from .grundmann_moller import _gm_weights


def _genz_malik(rule) -> np.ndarray:
    g = rule.extra["groups"]
    lam3 = float(np.abs(rule.nodes[g["axis3"][0]]).max())
    w = np.zeros(rule.size)
    wa = 1.0 / (6.0 * lam3 * lam3)
    w[g["axis3"][0]:g["axis3"][1]] = wa
    w[0] = 1.0 - 2 * rule.dim * wa
    return w


def _gauss_kronrod(rule) -> np.ndarray:
    x = np.asarray(rule.extra["nodes_1d"], dtype=float)
    wg = np.asarray(rule.extra["wg_1d"], dtype=float)
    sub = np.nonzero(wg == 0)[0]                      # the Kronrod-only abscissae
    xs = x[sub]
    q = len(xs)
    v = np.vander(xs, q, increasing=True).T           # v[j, i] = xs_i^j
    moments = np.array([(1.0 if j % 2 == 0 else 0.0) / (j + 1) for j in range(q)])  # mean of x^j on [-1, 1]
    w_sub = np.linalg.solve(v, moments)
    w1 = np.zeros(len(x))
    w1[sub] = w_sub
    w = w1
    for _ in range(rule.dim - 1):
        w = np.multiply.outer(w, w1).ravel()
    return w


def _grundmann_moller(rule) -> np.ndarray | None:
    s = rule.extra["s"]
    if s < 2:
        return None
    low = _gm_weights(rule.dim, s - 2)
    w = np.zeros(rule.size)
    index = {tuple(np.round(row, 14)): i for i, row in enumerate(rule.bary)}
    for key, wt in low.items():
        w[index[tuple(np.round([float(c) for c in key], 14))]] += float(wt)
    return w


def third_weights(rule) -> np.ndarray | None:
    """Weights (summing to one) of the third member on ``rule``'s nodes, or None."""
    return {"genz-malik": _genz_malik, "gauss-kronrod": _gauss_kronrod,
            "grundmann-moller": _grundmann_moller}[rule.name](rule)
