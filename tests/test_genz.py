"""Closed forms of Genz's test families checked against independent quadrature.

Sources: scipy.integrate.nquad (adaptive QUADPACK, d = 2) and tensor
Gauss-Legendre product grids from numpy.polynomial.legendre.leggauss, with
the grid broken at the kinks/jumps of the non-smooth families (d = 3 and a
6-D corner peak).  The integrands are Genz (1984)'s definitions.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate

from cubage.bench import genz_families as genz


def _tensor_gauss(f, d, breaks, n=24):
    """Tensor Gauss-Legendre over [0, 1]^d with each axis split at ``breaks[i]``."""
    x, w = np.polynomial.legendre.leggauss(n)
    nodes, weights = [], []
    for i in range(d):
        pts = [0.0] + sorted(b for b in breaks[i] if 0.0 < b < 1.0) + [1.0]
        xs = np.concatenate([(lo + hi) / 2 + (hi - lo) / 2 * x for lo, hi in zip(pts[:-1], pts[1:])])
        ws = np.concatenate([(hi - lo) / 2 * w for lo, hi in zip(pts[:-1], pts[1:])])
        nodes.append(xs)
        weights.append(ws)
    grids = np.meshgrid(*nodes, indexing="ij")
    X = np.stack([g.ravel() for g in grids], axis=1)
    W = weights[0]
    for ws in weights[1:]:
        W = np.multiply.outer(W, ws).ravel()
    return float(W @ f(X))


def _breaks(case):
    u = case.params["u"]
    if case.family in ("c0", "discontinuous", "product-peak", "gaussian"):
        return [[float(v)] for v in u]
    return [[] for _ in u]


@pytest.mark.parametrize("family", genz.FAMILIES)
def test_closed_form_matches_nquad_in_2d(family):
    rng = np.random.default_rng(20240611)
    for _ in range(2):
        case = genz.draw(family, 2, rng)
        u = case.params["u"]

        def g(y, x, case=case):
            return float(case.f(np.array([[x, y]]))[0])
        # source: scipy.integrate.nquad (QUADPACK), with the kink/jump points as break points
        val, err = integrate.nquad(lambda x, y: g(y, x), [[0, 1], [0, 1]],
                                   opts=[{"points": [u[0]], "epsabs": 1e-13, "epsrel": 1e-12},
                                         {"points": [u[1]], "epsabs": 1e-13, "epsrel": 1e-12}])
        assert case.exact == pytest.approx(val, rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("family", genz.FAMILIES)
def test_closed_form_matches_tensor_gauss_in_3d(family):
    rng = np.random.default_rng(7)
    for _ in range(3):
        case = genz.draw(family, 3, rng)
        # source: tensor Gauss-Legendre (24 points per piece), broken at u on every axis
        ref = _tensor_gauss(case.f, 3, _breaks(case), n=24)
        assert case.exact == pytest.approx(ref, rel=1e-10, abs=1e-13)


def test_corner_peak_small_parameters_6d_is_not_cancelled():
    # small a: the inclusion-exclusion sum cancels to ~1e-10 of its terms in floats;
    # the exact rational sum must still agree with a tensor Gauss-Legendre grid (10^6 points)
    a = np.full(6, 0.01)
    u = np.zeros(6)
    f = genz.integrand("corner-peak", a, u)
    ref = _tensor_gauss(f, 6, [[] for _ in range(6)], n=10)
    assert genz.exact("corner-peak", a, u) == pytest.approx(ref, rel=1e-12)


def test_one_dimensional_factors_by_hand():
    # closed forms done by hand from elementary antiderivatives (d = 1):
    # product peak: a [atan(a(1-u)) + atan(a u)]; C0: (2 - e^{-au} - e^{-a(1-u)})/a;
    # oscillatory: (sin(2 pi u + a) - sin(2 pi u))/a; corner peak: 1/(1+a)
    a, u = np.array([3.0]), np.array([0.3])
    assert genz.exact("product-peak", a, u) == pytest.approx(3 * (np.arctan(2.1) + np.arctan(0.9)), rel=1e-14)
    assert genz.exact("c0", a, u) == pytest.approx((2 - np.exp(-0.9) - np.exp(-2.1)) / 3, rel=1e-14)
    assert genz.exact("oscillatory", a, u) == pytest.approx(
        (np.sin(2 * np.pi * 0.3 + 3) - np.sin(2 * np.pi * 0.3)) / 3, rel=1e-13)
    assert genz.exact("corner-peak", a, u) == pytest.approx(1 / 4, rel=1e-15)


def test_draw_is_seeded_and_normalised():
    c1 = genz.draw("gaussian", 4, np.random.default_rng(3))
    c2 = genz.draw("gaussian", 4, np.random.default_rng(3))
    assert np.array_equal(c1.params["a"], c2.params["a"]) and c1.exact == c2.exact
    # normalisation (our documented choice): sum a = difficulty * B, B = 7.03 for the Gaussian
    assert c1.params["a"].sum() == pytest.approx(7.03)
    c3 = genz.draw("gaussian", 4, np.random.default_rng(3), difficulty=2.0)
    assert c3.params["a"].sum() == pytest.approx(14.06)


def test_bad_family_and_dimension():
    rng = np.random.default_rng(0)
    with pytest.raises(ValueError, match="unknown Genz family"):
        genz.draw("spiky", 2, rng)
    with pytest.raises(ValueError, match="dimension"):
        genz.draw("gaussian", 0, rng)
