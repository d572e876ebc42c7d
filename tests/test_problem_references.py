"""Independent checks of the reference values shipped in problems/*.toml.

Each check recomputes the value without cubage's engine: with mpmath.quad,
scipy.integrate, or by evaluating the closed form the file cites through a
route of its own (e.g. a 1-D quadrature of the separated factors).  The source
of each check is named beside it.
"""

import math

import mpmath
import numpy as np
import pytest
from scipy import integrate, special

from cubage.problem.problem_file import bundled_problem_dir, list_problems, load_problem

mpmath.mp.dps = 30


def ref(name):
    p = load_problem(bundled_problem_dir() / f"{name}.toml")
    assert p.reference is not None
    return p


def test_every_shipped_problem_is_checked_here():
    shipped = {f.stem for f in list_problems([bundled_problem_dir()])}
    assert shipped == set(CHECKED)


def test_gaussian_overlap():
    p = ref("gaussian-overlap")
    c = p.integrand_spec["constants"]
    a, b = c["a"], c["b"]
    # the 3-D integrand separates into a product of 1-D integrals; each 1-D
    # factor is computed with mpmath.quad (30 digits), independent of the erf
    # closed form quoted in the file
    val = mpmath.mpf(1)
    for ci in (c["cx"], c["cy"], c["cz"]):
        val *= mpmath.quad(lambda t, ci=ci: mpmath.exp(-a * t**2 - b * (t - ci) ** 2), [-3, ci, 3])
    assert p.reference.value == pytest.approx(float(val), rel=1e-15)
    # and the integrand as compiled equals the product form at random points
    X = np.random.default_rng(0).uniform(-3, 3, (20, 3))
    want = np.exp(-a * (X**2).sum(1) - b * ((X - [c["cx"], c["cy"], c["cz"]]) ** 2).sum(1))
    np.testing.assert_allclose(p.integrand(X), want, rtol=1e-13)


def test_trap_mean_square_radius():
    p = ref("trap-mean-square-radius")
    c = p.integrand_spec["constants"]
    k = [c["a"], c["b"], c["c"]]
    # separate into 1-D moments m0 = int exp(-k t^2), m2 = int t^2 exp(-k t^2)
    # over the real line, each by mpmath.quad on (-inf, inf)
    m0 = [mpmath.quad(lambda t, kk=kk: mpmath.exp(-kk * t**2), [-mpmath.inf, mpmath.inf]) for kk in k]
    m2 = [mpmath.quad(lambda t, kk=kk: t**2 * mpmath.exp(-kk * t**2), [-mpmath.inf, mpmath.inf]) for kk in k]
    val = m2[0] * m0[1] * m0[2] + m0[0] * m2[1] * m0[2] + m0[0] * m0[1] * m2[2]
    assert p.reference.value == pytest.approx(float(val), rel=1e-14)


def test_graded_plate_moments():
    p = ref("graded-plate-moments")
    # scipy.integrate.dblquad of each component (outer x in [0, 2], inner y in [0, 1])
    comps = [
        lambda y, x: np.exp(-x) * (1 + y**2),
        lambda y, x: x * np.exp(-x) * (1 + y**2),
        lambda y, x: y * np.exp(-x) * (1 + y**2),
        lambda y, x: (x**2 + y**2) * np.exp(-x) * (1 + y**2),
    ]
    got = [integrate.dblquad(f, 0, 2, 0, 1, epsabs=0, epsrel=1e-13)[0] for f in comps]
    np.testing.assert_allclose(p.reference.value, got, rtol=1e-11)
    # the compiled vector integrand agrees with the same formulas
    X = np.random.default_rng(1).uniform(0, 1, (10, 2)) * [2, 1]
    want = np.stack([f(X[:, 1], X[:, 0]) for f in comps], axis=1)
    np.testing.assert_allclose(p.integrand(X), want, rtol=1e-14)


def test_cube_corner_potential():
    p = ref("cube-corner-potential")
    # inner integral in closed form: int_0^1 dz / sqrt(s + z^2) = asinh(1/sqrt(s)),
    # s = x^2 + y^2 (elementary antiderivative); the remaining 2-D integral by
    # mpmath.quad over the two triangles split along the diagonal
    f = lambda x, y: mpmath.asinh(1 / mpmath.sqrt(x * x + y * y))  # noqa: E731
    half = mpmath.quad(lambda x: mpmath.quad(lambda y: f(x, y), [0, x]), [0, 1])
    assert p.reference.value == pytest.approx(float(2 * half), rel=1e-13)


def test_hyperball_octant():
    p = ref("hyperball-octant")
    # volume of the unit 4-ball pi^2/2 via the Gamma function (DLMF 5.19.4),
    # computed here with scipy.special.gamma, / 16 orthants
    vol4 = math.pi**2 / special.gamma(3.0)
    assert p.reference.value == pytest.approx(vol4 / 16, rel=1e-15)
    # and independently: the octant volume as a 1-D integral over the radius of
    # the surface fraction 2 pi^2 r^3 / 16, by scipy.integrate.quad
    got = integrate.quad(lambda r: 2 * math.pi**2 * r**3 / 16, 0, 1)[0]
    assert p.reference.value == pytest.approx(got, rel=1e-13)


def test_feynman_simplex():
    p = ref("feynman-simplex")
    c = p.integrand_spec["constants"]
    A, B, C, D = (c[k] for k in "ABCD")
    m = C - D
    # innermost z integral in closed form: int_0^w dz / (L + m z)^4
    # = (1/L^3 - 1/(L + m w)^3) / (3 m)  (elementary antiderivative), with
    # L = A x + B y + D (1 - x - y), w = 1 - x - y; the remaining triangle by
    # scipy.integrate.dblquad
    def inner(y, x):
        L = A * x + B * y + D * (1 - x - y)
        w = 1 - x - y
        return (1 / L**3 - 1 / (L + m * w) ** 3) / (3 * m)
    got = integrate.dblquad(inner, 0, 1, 0, lambda x: 1 - x, epsabs=0, epsrel=1e-13)[0]
    assert p.reference.value == pytest.approx(got, rel=1e-11)


def test_parallel_plates_view_factor():
    p = ref("parallel-plates-view-factor")
    h = p.integrand_spec["constants"]["h"]
    # the 4-D integrand depends on (xa - xb) and (ya - yb) only; with the
    # one-dimensional convolution weights (2 - |u|) on [-2, 2] and (1 - |v|) on
    # [-1, 1] it becomes a 2-D integral, done with scipy.integrate.dblquad
    def g(v, u):
        return (2 - abs(u)) * (1 - abs(v)) * h**2 / (math.pi * (u * u + v * v + h * h) ** 2) / 2
    got = 4 * integrate.dblquad(g, 0, 2, 0, 1, epsabs=0, epsrel=1e-13)[0]
    assert p.reference.value == pytest.approx(got, rel=1e-10)


def test_oscillator_phase_6d():
    p = ref("oscillator-phase-6d")
    c = p.integrand_spec["constants"]
    a = [c[f"a{i}"] for i in range(1, 7)]
    # product of the complex 1-D means int_0^1 exp(i a u) du, each by mpmath.quad;
    # the real part of the product is the mean of cos(sum a_i u_i)
    prod = mpmath.mpc(1)
    for ai in a:
        prod *= mpmath.quad(lambda u, ai=ai: mpmath.exp(1j * ai * u), [0, 1])
    assert p.reference.value == pytest.approx(float(prod.real), rel=1e-14)


def test_bessel_beam_pupil():
    p = ref("bessel-beam-pupil")
    k = p.integrand_spec["constants"]["k"]
    # 2-D integral by scipy.integrate.dblquad straight from the integrand
    got = integrate.dblquad(lambda phi, r: special.j0(k * r) * (1 + 0.3 * math.cos(phi)) * r,
                            0, 1, 0, 2 * math.pi, epsabs=0, epsrel=1e-12)[0]
    assert p.reference.value == pytest.approx(got, rel=1e-10)
    # and the closed form 2 pi J1(k)/k with mpmath's Bessel function (A&S 11.3.20)
    assert p.reference.value == pytest.approx(float(2 * mpmath.pi * mpmath.besselj(1, k) / k), rel=1e-15)


def test_orbital_overlap_scan():
    p = ref("orbital-overlap-scan")
    c = p.integrand_spec["constants"]
    a, b, R, u = c["a"], c["b"], c["R"], c["u"]
    # the integrand separates into three 1-D factors, each by mpmath.quad over the real line,
    # independent of the Gaussian-product closed form quoted in the file
    val = mpmath.mpf(1)
    for _ in range(3):
        val *= mpmath.quad(lambda t: mpmath.exp(-a * t**2 - b * (t - R * u) ** 2), [-mpmath.inf, R * u, mpmath.inf])
    assert p.reference.value == pytest.approx(float(val), rel=1e-14)
    assert u == pytest.approx(1 / math.sqrt(3), rel=1e-16)


CHECKED = {
    "gaussian-overlap": test_gaussian_overlap,
    "trap-mean-square-radius": test_trap_mean_square_radius,
    "graded-plate-moments": test_graded_plate_moments,
    "cube-corner-potential": test_cube_corner_potential,
    "hyperball-octant": test_hyperball_octant,
    "feynman-simplex": test_feynman_simplex,
    "parallel-plates-view-factor": test_parallel_plates_view_factor,
    "oscillator-phase-6d": test_oscillator_phase_6d,
    "bessel-beam-pupil": test_bessel_beam_pupil,
    "orbital-overlap-scan": test_orbital_overlap_scan,
}
