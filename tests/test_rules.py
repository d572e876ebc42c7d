"""Tests of the rule families against closed-form integrals.

Sources of the expected values, named beside each check:
- monomials over a box: the product formula
  prod_i (b_i^(k_i+1) - a_i^(k_i+1)) / (k_i + 1) (common practice);
- monomials over a simplex: Dirichlet's simplex integral
  int_T lambda^alpha = d! |T| alpha! / (d + |alpha|)!  (lambda barycentric;
  for the standard simplex this is prod a_i! / (d + sum a_i)!);
- 1-D Gauss nodes/weights: numpy.polynomial.legendre.leggauss (Golub–Welsch);
- node counts: Genz & Malik (1980), 2^d + 2d^2 + 2d + 1 (from memory); tensor
  product 15^d; Grundmann & Möller (1978), C(s+d+1, d+1) before merging
  (from memory).
"""

from __future__ import annotations

import math
from itertools import combinations_with_replacement

import mpmath
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cubage.engine.rules import (
    RULE_NAMES,
    bisect_simplices,
    box_rule,
    default_rule,
    gauss_kronrod_rule,
    genz_malik_rule,
    grundmann_moller_rule,
    simplex_rule,
    simplex_volumes,
)
from cubage.engine.rules.gauss_kronrod import kronrod15

LOWER = np.array([0.3, -0.5, 1.0, -2.0, 0.1, -0.2])
UPPER = np.array([1.7, 0.25, 1.5, -1.2, 0.9, 0.6])


# ---------------------------------------------------------------- helpers

def exponents(nvars: int, maxdeg: int, mindeg: int = 0) -> np.ndarray:
    """All exponent vectors in N^nvars with mindeg <= total degree <= maxdeg."""
    out = []
    for deg in range(mindeg, maxdeg + 1):
        for combo in combinations_with_replacement(range(nvars), deg):
            e = np.zeros(nvars, dtype=int)
            for k in combo:
                e[k] += 1
            out.append(e)
    return np.array(out, dtype=int).reshape(-1, nvars)


def monomials(x: np.ndarray, exps: np.ndarray) -> np.ndarray:
    """Matrix (p, M) of x**exps, built from per-axis power tables."""
    top = int(exps.max()) if exps.size else 0
    vals = np.ones((x.shape[0], exps.shape[0]))
    for j in range(x.shape[1]):
        powers = x[:, j:j + 1] ** np.arange(top + 1)
        vals *= powers[:, exps[:, j]]
    return vals


def box_exact(exps: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    # exact monomial integral: product formula (common practice)
    k = exps + 1
    return np.prod((hi ** k - lo ** k) / k, axis=1)


def box_apply(rule, weights, lo, hi, exps):
    c, h = (lo + hi) / 2, (hi - lo) / 2
    x = c + h * rule.nodes
    return np.prod(hi - lo) * (weights @ monomials(x, exps))


def dirichlet(exps: np.ndarray, d: int, volume: float = None) -> np.ndarray:
    """Dirichlet's simplex integral of barycentric (or standard-simplex) monomials."""
    fact = np.array([math.factorial(k) for k in range(int(exps.max(initial=0)) + 1)], dtype=float)
    num = np.prod(fact[exps], axis=1)
    den = np.array([math.factorial(d + int(s)) for s in exps.sum(axis=1)], dtype=float)
    if volume is None:  # standard simplex: prod a_i! / (d + sum a_i)!
        return num / den
    return math.factorial(d) * volume * num / den


def assert_exact(approx, exact, rtol=1e-12, atol=1e-14):
    err = np.abs(approx - exact)
    bad = err > np.maximum(rtol * np.abs(exact), atol)
    assert not bad.any(), f"max error {err.max():.3g} at {np.nonzero(bad)[0][:5]}"


def max_rel_err(approx, exact):
    return np.max(np.abs(approx - exact) / np.maximum(np.abs(exact), 1e-300))


def first_inexact_degree(degree: int) -> int:
    # A centrally symmetric box rule integrates every odd-degree term about the
    # centre exactly, so a rule exact to even degree 2k is also exact to 2k + 1
    # (symmetry argument, common practice); the first failure is then 2k + 2.
    return degree + 1 if (degree + 1) % 2 == 0 else degree + 2


# ---------------------------------------------------------------- Genz–Malik

@pytest.mark.parametrize("d", [2, 3, 4, 5, 6])
def test_genz_malik_exact_to_degree(d):
    rule = genz_malik_rule(d)
    lo, hi = LOWER[:d], UPPER[:d]
    for weights, degree in ((rule.weights, 7), (rule.weights_low, 5)):
        e = exponents(d, degree)
        # exact monomial integral: product formula (common practice)
        assert_exact(box_apply(rule, weights, lo, hi, e), box_exact(e, lo, hi))


@pytest.mark.parametrize("d", [2, 3, 4, 5, 6])
def test_genz_malik_not_exact_above_degree(d):
    rule = genz_malik_rule(d)
    lo, hi = LOWER[:d], UPPER[:d]
    for weights, degree in ((rule.weights, 7), (rule.weights_low, 5)):
        e = exponents(d, degree + 1, degree + 1)
        # exact monomial integral: product formula (common practice)
        assert max_rel_err(box_apply(rule, weights, lo, hi, e), box_exact(e, lo, hi)) > 1e-10


@pytest.mark.parametrize("d", [2, 3, 4, 5, 6, 7])
def test_genz_malik_structure(d):
    rule = genz_malik_rule(d)
    # node count from Genz & Malik (1980): 2^d + 2d^2 + 2d + 1 (from memory)
    assert rule.size == 2 ** d + 2 * d * d + 2 * d + 1
    assert rule.nodes.shape == (rule.size, d)
    # mean-value normalisation: the integral of 1 over [-1,1]^d is 2^d
    assert rule.weights.sum() == pytest.approx(1.0, abs=1e-14)
    assert rule.weights_low.sum() == pytest.approx(1.0, abs=1e-14)
    assert (rule.degree, rule.degree_low) == (7, 5)
    # nodes strictly inside the open cube (unbounded-axis transforms are singular on its boundary)
    assert np.abs(rule.nodes).max() < 1.0
    # generators from Genz & Malik (1980): lambda5 = sqrt(9/19) at the corners (from memory)
    start, stop = rule.extra["groups"]["corner5"]
    assert np.allclose(np.abs(rule.nodes[start:stop]), math.sqrt(9 / 19), rtol=0, atol=1e-15)
    assert np.unique(rule.nodes, axis=0).shape[0] == rule.size


def test_genz_malik_weights_against_paper():
    # weights from Genz & Malik (1980), degree-7 centre weight
    # 2^d (12824 - 9120 d + 400 d^2)/19683 on [-1,1]^d; from memory
    for d in (2, 3, 5):
        rule = genz_malik_rule(d)
        assert rule.weights[0] == pytest.approx((12824 - 9120 * d + 400 * d * d) / 19683, rel=1e-14)
        assert rule.weights_low[-1] == 0.0


def test_genz_malik_rejects_low_dimension():
    with pytest.raises(ValueError):
        genz_malik_rule(1)


# ---------------------------------------------------------------- Gauss–Kronrod

def test_g7_matches_golub_welsch():
    x, wk, wg = kronrod15()
    # G7 from numpy.polynomial.legendre.leggauss (Golub–Welsch eigenvalue method)
    gx, gw = np.polynomial.legendre.leggauss(7)
    assert np.allclose(x[1::2], np.sort(gx), rtol=0, atol=2e-16)
    assert np.allclose(wg[1::2], gw[np.argsort(gx)], rtol=0, atol=5e-16)
    assert np.all(wg[0::2] == 0.0)


def test_k15_exact_in_high_precision():
    x, wk, wg = kronrod15()
    mpmath.mp.dps = 40
    try:
        for k in range(24):
            # exact monomial integral over [-1, 1]: 2/(k+1) for even k, 0 for odd k (common practice)
            exact = mpmath.mpf(2) / (k + 1) if k % 2 == 0 else mpmath.mpf(0)
            got = mpmath.fsum(mpmath.mpf(w) * mpmath.mpf(t) ** k for w, t in zip(wk, x))
            # the stored doubles are correct to full double precision
            assert abs(got - exact) < 1e-15, k
            if k <= 13:
                got_g = mpmath.fsum(mpmath.mpf(w) * mpmath.mpf(t) ** k for w, t in zip(wg, x))
                assert abs(got_g - exact) < 1e-15, k
    finally:
        mpmath.mp.dps = 15
    # degree 24 is not integrated exactly: exact 2/25 (common practice)
    assert abs(wk @ x ** 24 - 2 / 25) > 1e-10
    # G7 is exact to 2*7 - 1 = 13 and no further (Gauss's theorem): exact 2/15
    assert abs(wg @ x ** 14 - 2 / 15) > 1e-6


@pytest.mark.parametrize("d", [1, 2, 3])
def test_gauss_kronrod_exact_to_degree(d):
    rule = gauss_kronrod_rule(d)
    lo, hi = LOWER[:d], UPPER[:d]
    for weights, degree in ((rule.weights, 22), (rule.weights_low, 13)):
        e = exponents(d, degree)
        if d == 3 and degree == 22:
            # representative subset in 3-D to keep the test fast
            rng = np.random.default_rng(1)
            e = e[rng.choice(e.shape[0], 300, replace=False)]
        # tensor rules are exact per axis: also every exponent up to the degree on each axis at once
        e = np.vstack([e, np.full((1, d), degree)])
        # exact monomial integral: product formula (common practice)
        assert_exact(box_apply(rule, weights, lo, hi, e), box_exact(e, lo, hi))


@pytest.mark.parametrize("d", [1, 2, 3])
def test_gauss_kronrod_not_exact_above_degree(d):
    rule = gauss_kronrod_rule(d)
    # a box whose half-width is close to its largest |x|, so that the
    # degree-24 error (relative 7e-8 on [-1, 1]) is not hidden by lower terms
    lo, hi = np.full(d, -1.0), np.full(d, 1.2)
    for weights, degree in ((rule.weights, 22), (rule.weights_low, 13)):
        bad = first_inexact_degree(degree)
        e = np.zeros((1, d), dtype=int)
        e[0, -1] = bad
        # exact monomial integral: product formula (common practice)
        assert max_rel_err(box_apply(rule, weights, lo, hi, e), box_exact(e, lo, hi)) > 1e-10


@pytest.mark.parametrize("d", [1, 2, 3, 4])
def test_gauss_kronrod_structure(d):
    rule = gauss_kronrod_rule(d)
    assert rule.size == 15 ** d  # tensor product of 15 points
    assert np.count_nonzero(rule.weights_low) == 7 ** d  # Gauss sub-grid
    assert rule.weights.sum() == pytest.approx(1.0, abs=1e-14)
    assert rule.weights_low.sum() == pytest.approx(1.0, abs=1e-14)
    assert np.abs(rule.nodes).max() < 1.0
    assert np.all(rule.weights > 0)  # Kronrod weights are positive (Kronrod 1965; from memory)


def test_gauss_kronrod_dimension_limits():
    with pytest.raises(ValueError):
        gauss_kronrod_rule(0)
    with pytest.raises(ValueError):
        gauss_kronrod_rule(6)


# ---------------------------------------------------------------- split axes

def _region_values(rule, f, centre, half):
    x = centre + half * rule.nodes
    return f(x)


# Integrands that vary along one known axis, with the expected choice.  The
# Genz-Malik criterion is a fourth difference, so a quartic suffices; the
# Gauss-Kronrod criterion is the G7/K15 discrepancy, which vanishes (up to
# rounding) for polynomials of degree <= 13 along an axis, so its cases use
# a high power and fast oscillation instead.
HALF = np.array([0.5, 0.5, 0.5])
SPLIT_CASES = {
    "genz-malik": [
        (lambda x: x[:, 2] ** 4, HALF, 2),
        (lambda x: np.cos(5 * x[:, 0]), HALF, 0),
        (lambda x: np.exp(2 * x[:, 1]) + 0.1 * x[:, 0] ** 4, HALF, 1),
    ],
    "gauss-kronrod": [
        (lambda x: x[:, 2] ** 20, HALF, 2),
        (lambda x: np.cos(25 * x[:, 0]), HALF, 0),
        (lambda x: 1 / (0.01 + (x[:, 1] - 0.1) ** 2) + x[:, 0] ** 4, HALF, 1),
    ],
}
CONSTANT_CASES = [
    (lambda x: 3.0 + 0 * x[:, 0], np.array([0.3, 0.9, 0.5]), 1),   # constant: widest axis
    (lambda x: 3.0 + 0 * x[:, 0], np.array([0.7, 0.7, 0.2]), 0),   # equal widths: lowest index
]


@pytest.mark.parametrize("name", ["genz-malik", "gauss-kronrod"])
def test_split_axes_follows_variation(name):
    rule = box_rule(name, 3)
    centre = np.array([0.2, -0.1, 0.5])
    cases = SPLIT_CASES[name] + CONSTANT_CASES
    fvals = np.stack([_region_values(rule, f, centre, h) for f, h, _ in cases])
    halves = np.stack([h for _, h, _ in cases])
    expected = np.array([axis for _, _, axis in cases])
    # the axis along which the function varies, by construction of each integrand
    assert np.array_equal(rule.split_axes(fvals, halves), expected)


def test_genz_malik_split_ignores_quadratics():
    # the fourth difference cancels second-order terms (Genz & Malik 1980, section 3; from memory)
    rule = genz_malik_rule(2)
    centre, half = np.array([0.4, -0.3]), np.array([0.2, 0.6])
    fvals = _region_values(rule, lambda x: 5 * x[:, 0] ** 2 + x[:, 1], centre, half)
    assert rule.split_axes(fvals[None, :], half[None, :])[0] == 1  # widest


def test_gauss_kronrod_split_one_dimension():
    rule = gauss_kronrod_rule(1)
    fvals = _region_values(rule, lambda x: np.sin(3 * x[:, 0]), np.array([0.0]), np.array([1.0]))
    assert rule.split_axes(fvals[None, :], np.array([[1.0]]))[0] == 0  # only one axis


# ---------------------------------------------------------------- Grundmann–Möller

def standard_simplex(d):
    return np.vstack([np.zeros(d), np.eye(d)])


def random_simplex(d, seed):
    rng = np.random.default_rng(seed)
    return rng.normal(size=(d + 1, d)) + 2.0 * standard_simplex(d)


@pytest.mark.parametrize("d", [2, 3, 4, 5, 6])
@pytest.mark.parametrize("degree", [3, 5, 7, 9])
def test_grundmann_moller_standard_simplex(d, degree):
    rule = grundmann_moller_rule(d, degree)
    x = rule.bary @ standard_simplex(d)
    vol = 1 / math.factorial(d)
    for weights, deg in ((rule.weights, degree), (rule.weights_low, degree - 2)):
        e = exponents(d, deg)
        # Dirichlet's simplex integral: prod a_i! / (d + sum a_i)!
        assert_exact(vol * (weights @ monomials(x, e)), dirichlet(e, d))
    e = exponents(d, degree + 1, degree + 1)
    # Dirichlet's simplex integral: not exact one degree higher
    assert max_rel_err(vol * (rule.weights @ monomials(x, e)), dirichlet(e, d)) > 1e-10


@pytest.mark.parametrize("d", [2, 3, 4, 5, 6])
@pytest.mark.parametrize("degree", [3, 5, 7, 9])
def test_grundmann_moller_affine_simplex(d, degree):
    rule = grundmann_moller_rule(d, degree)
    verts = random_simplex(d, seed=10 * d + degree)
    vol = abs(np.linalg.det(verts[1:] - verts[0])) / math.factorial(d)
    x = rule.bary @ verts
    # recover the barycentric coordinates of the mapped nodes from the geometry
    system = np.vstack([verts.T, np.ones(d + 1)])
    lam = np.linalg.solve(system, np.vstack([x.T, np.ones(x.shape[0])])).T
    e = exponents(d + 1, degree)
    # Dirichlet's simplex integral: d! |T| alpha! / (d + |alpha|)! for barycentric monomials
    assert_exact(vol * (rule.weights @ monomials(lam, e)), dirichlet(e, d, vol), rtol=1e-11)
    e = exponents(d + 1, degree + 1, degree + 1)
    assert max_rel_err(vol * (rule.weights @ monomials(lam, e)), dirichlet(e, d, vol)) > 1e-10


@pytest.mark.parametrize("d", [1, 2, 3, 4, 5, 6])
@pytest.mark.parametrize("degree", [3, 5, 7, 9])
def test_grundmann_moller_structure(d, degree):
    rule = grundmann_moller_rule(d, degree)
    s = (degree - 1) // 2
    assert rule.bary.shape == (rule.size, d + 1)
    # node count C(s+d+1, d+1) before merging duplicates (Grundmann & Möller 1978; from memory)
    assert rule.size <= math.comb(s + d + 1, d + 1)
    assert np.unique(np.round(rule.bary, 14), axis=0).shape[0] == rule.size
    assert np.allclose(rule.bary.sum(axis=1), 1.0, rtol=0, atol=1e-15)
    assert rule.bary.min() > 0.0  # strictly inside
    assert rule.weights.sum() == pytest.approx(1.0, abs=1e-13)
    assert rule.weights_low.sum() == pytest.approx(1.0, abs=1e-13)
    assert (rule.degree, rule.degree_low) == (degree, degree - 2)


def test_grundmann_moller_merges_centroid():
    # For s >= d + 1 the layer with m = 3(d+1), beta = (1,...,1) lands on the
    # centroid, as does the last layer (m = d + 1): d = 2, degree 7 has 20 - 1 nodes.
    rule = grundmann_moller_rule(2, 7)
    assert rule.size == math.comb(3 + 2 + 1, 3) - 1
    centroid = np.isclose(rule.bary, 1 / 3, rtol=0, atol=1e-15).all(axis=1)
    assert centroid.sum() == 1


def test_grundmann_moller_has_negative_weights():
    # GM rules are not positive (Grundmann & Möller 1978; from memory)
    assert grundmann_moller_rule(3, 7).weights.min() < 0


@pytest.mark.parametrize("degree", [1, 2, 4, 8, 7.5])
def test_grundmann_moller_bad_degree(degree):
    with pytest.raises(ValueError):
        grundmann_moller_rule(3, degree)


# ---------------------------------------------------------------- simplex bisection

def test_simplex_volume_of_standard_simplex():
    # the standard simplex has volume 1/d! (common practice)
    for d in range(1, 6):
        assert simplex_volumes(standard_simplex(d)[None])[0] == pytest.approx(1 / math.factorial(d))


@pytest.mark.parametrize("d", [2, 3, 4, 5])
def test_bisect_halves_volume_and_cuts_longest_edge(d):
    parents = np.stack([random_simplex(d, seed) for seed in range(7)])
    children, edges = bisect_simplices(parents)
    assert children.shape == (2 * parents.shape[0], d + 1, d)
    pv = simplex_volumes(parents)
    cv = simplex_volumes(children).reshape(-1, 2)
    # cutting through an edge midpoint halves the volume (base x height / d, common practice)
    assert np.allclose(cv, pv[:, None] / 2, rtol=1e-12, atol=0)
    for k, (a, b) in enumerate(edges):
        lengths = [np.linalg.norm(parents[k, i] - parents[k, j])
                   for i in range(d + 1) for j in range(i + 1, d + 1)]
        assert np.linalg.norm(parents[k, a] - parents[k, b]) == pytest.approx(max(lengths), rel=1e-14)
        mid = (parents[k, a] + parents[k, b]) / 2
        assert np.allclose(children[2 * k, b], mid) and np.allclose(children[2 * k + 1, a], mid)


def test_bisect_known_triangle_and_ties():
    tri = standard_simplex(2)[None]  # hypotenuse joins vertices 1 and 2
    children, edges = bisect_simplices(tri)
    assert edges.tolist() == [[1, 2]]
    assert np.allclose(simplex_volumes(children), [0.25, 0.25])
    # regular tetrahedron: all edges tie -> lowest pair (0, 1)
    tet = np.array([[[1, 1, 1], [1, -1, -1], [-1, 1, -1], [-1, -1, 1]]], dtype=float)
    assert bisect_simplices(tet)[1].tolist() == [[0, 1]]
    # equilateral triangle: all edges tie -> (0, 1)
    eq = np.array([[[0, 0], [1, 0], [0.5, math.sqrt(3) / 2]]])
    assert bisect_simplices(eq)[1].tolist() == [[0, 1]]


@pytest.mark.parametrize("d", [2, 3, 4])
def test_bisected_children_integrate_like_parent(d):
    rule = grundmann_moller_rule(d, 7)
    pieces = standard_simplex(d)[None]
    for _ in range(3):
        pieces, _ = bisect_simplices(pieces)
    e = exponents(d, 7)
    total = np.zeros(e.shape[0])
    for verts in pieces:
        vol = abs(np.linalg.det(verts[1:] - verts[0])) / math.factorial(d)
        total += vol * (rule.weights @ monomials(rule.bary @ verts, e))
    # Dirichlet's simplex integral over the parent (standard simplex)
    assert_exact(total, dirichlet(e, d), rtol=1e-11)


# ---------------------------------------------------------------- registry

def test_registry_names_and_caching():
    assert RULE_NAMES == ("genz-malik", "gauss-kronrod", "grundmann-moller")  # specification
    r = box_rule("genz-malik", 3)
    assert box_rule("genz-malik", 3) is r
    with pytest.raises(ValueError):
        r.weights[0] = 1.0  # read-only: cached rules are shared
    s = simplex_rule("grundmann-moller", 3)
    assert s.degree == 7 and simplex_rule("grundmann-moller", 3, 7) is s
    with pytest.raises(ValueError):
        s.bary[0, 0] = 0.0
    assert box_rule("gauss-kronrod", 2).size == 225


@pytest.mark.parametrize("call", [
    lambda: box_rule("nope", 2),
    lambda: box_rule("grundmann-moller", 2),
    lambda: box_rule("genz-malik", 1),
    lambda: simplex_rule("genz-malik", 2),
    lambda: simplex_rule("nope", 2),
    lambda: simplex_rule("grundmann-moller", 2, 6),
    lambda: default_rule("sphere", 2),
])
def test_registry_errors(call):
    with pytest.raises(ValueError) as info:
        call()
    assert "\n" not in str(info.value)


def test_unknown_name_lists_valid_names():
    with pytest.raises(ValueError, match="genz-malik, gauss-kronrod, grundmann-moller"):
        box_rule("cubic", 2)


def test_default_rule():
    # specification of the defaults
    assert default_rule("box", 1) == "gauss-kronrod"
    assert default_rule("box", 2) == "gauss-kronrod"
    assert default_rule("box", 3) == "genz-malik"
    assert default_rule("box", 9) == "genz-malik"
    assert default_rule("simplex", 4) == "grundmann-moller"


# ---------------------------------------------------------------- property tests

@st.composite
def box_polynomials(draw):
    d = draw(st.integers(2, 4))
    nterms = draw(st.integers(1, 6))
    exps = []
    for _ in range(nterms):
        left = 7
        e = []
        for _ in range(d):
            k = draw(st.integers(0, left))
            e.append(k)
            left -= k
        exps.append(e)
    coefs = draw(st.lists(st.floats(-10, 10), min_size=nterms, max_size=nterms))
    lo = np.array(draw(st.lists(st.floats(-3, 3), min_size=d, max_size=d)))
    width = np.array(draw(st.lists(st.floats(0.05, 3), min_size=d, max_size=d)))
    return np.array(exps, dtype=int), np.array(coefs), lo, lo + width


@settings(max_examples=40, deadline=None)
@given(box_polynomials())
def test_genz_malik_random_polynomial(poly):
    exps, coefs, lo, hi = poly
    rule = box_rule("genz-malik", exps.shape[1])
    got = coefs @ box_apply(rule, rule.weights, lo, hi, exps)
    # exact monomial integral: product formula (common practice)
    terms = coefs * box_exact(exps, lo, hi)
    scale = np.abs(coefs) @ box_exact(exps, np.zeros_like(lo), np.maximum(np.abs(lo), np.abs(hi)))
    assert abs(got - terms.sum()) <= 1e-12 * scale * 2 ** exps.shape[1] + 1e-13


@settings(max_examples=40, deadline=None)
@given(st.integers(2, 5), st.sampled_from([3, 5, 7, 9]), st.integers(0, 10 ** 6),
       st.lists(st.floats(-5, 5), min_size=1, max_size=6))
def test_grundmann_moller_random_polynomial(d, degree, seed, coefs):
    rng = np.random.default_rng(seed)
    coefs = np.array(coefs)
    # random barycentric monomials of total degree <= degree
    exps = np.array([rng.multinomial(rng.integers(0, degree + 1), np.full(d + 1, 1 / (d + 1)))
                     for _ in coefs])
    rule = simplex_rule("grundmann-moller", d, degree)
    verts = random_simplex(d, seed % 1000)
    vol = abs(np.linalg.det(verts[1:] - verts[0])) / math.factorial(d)
    got = vol * (rule.weights @ (monomials(rule.bary, exps) @ coefs))
    # Dirichlet's simplex integral
    exact = coefs @ dirichlet(exps, d, vol)
    assert abs(got - exact) <= 1e-12 * (np.abs(coefs) @ dirichlet(exps, d, vol)) + 1e-14 * vol


# ---------------------------------------------------------------- third embedded members (issue 11 item 5)

@pytest.mark.parametrize("d", [2, 3, 4, 5, 6])
def test_genz_malik_third_member_degree_3(d):
    """The degree-3 member lives in the Genz-Malik family (issue 11 item 5): exact to 3, not to 4."""
    rule = genz_malik_rule(d)
    lo, hi = LOWER[:d], UPPER[:d]
    assert rule.weights_third.sum() == pytest.approx(1.0, abs=1e-14)
    e = exponents(d, 3)
    # exact monomial integral: product formula (common practice)
    assert_exact(box_apply(rule, rule.weights_third, lo, hi, e), box_exact(e, lo, hi))
    e = exponents(d, 4, 4)
    assert max_rel_err(box_apply(rule, rule.weights_third, lo, hi, e), box_exact(e, lo, hi)) > 1e-10


@pytest.mark.parametrize("d", [1, 2, 3])
def test_gauss_kronrod_third_member_per_axis_degree_7(d):
    """The Kronrod-only interpolatory member (issue 11 item 5): exact for per-axis degree <= 7, not 8."""
    rule = gauss_kronrod_rule(d)
    lo, hi = LOWER[:d], UPPER[:d]
    e = np.array([k for k in np.ndindex(*(8,) * d)])
    # exact monomial integral: product formula (common practice)
    assert_exact(box_apply(rule, rule.weights_third, lo, hi, e), box_exact(e, lo, hi), rtol=1e-11)
    e8 = np.zeros((1, d), dtype=int)
    e8[0, 0] = 8
    assert max_rel_err(box_apply(rule, rule.weights_third, lo, hi, e8), box_exact(e8, lo, hi)) > 1e-10


@pytest.mark.parametrize("d", [2, 3, 4])
@pytest.mark.parametrize("degree", [3, 5, 7, 9])
def test_grundmann_moller_third_member(d, degree):
    """Grundmann-Moller of degree 2s+1 carries the degree 2s-3 member on its own nodes (issue 11 item 5)."""
    rule = grundmann_moller_rule(d, degree)
    if degree == 3:
        assert rule.weights_third is None
        return
    x = rule.bary @ standard_simplex(d)
    vol = 1 / math.factorial(d)
    e = exponents(d, degree - 4)
    # Dirichlet's simplex integral: prod a_i! / (d + sum a_i)!
    assert_exact(vol * (rule.weights_third @ monomials(x, e)), dirichlet(e, d))
    e = exponents(d, degree - 3, degree - 3)
    assert max_rel_err(vol * (rule.weights_third @ monomials(x, e)), dirichlet(e, d)) > 1e-10
