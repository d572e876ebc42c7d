"""Feature-aligned boundaries (issue 13): break values, cut planes, singular maps, against closed forms."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy.spatial import ConvexHull
from scipy.special import gamma

from cubage import Box, Run, Simplex, integrate
from cubage.engine import partition, singular_maps
from cubage.engine.run import IntegrandError

SIMPLEX3 = Simplex([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]])


# ---------------------------------------------------------------- Irwin-Hall closed forms

def irwin_hall_cdf(s: float, k: int) -> float:
    # P(U_1 + ... + U_k <= s) = 1/k! sum_{j <= s} (-1)^j C(k, j) (s - j)^k  (Irwin 1927, Hall 1927)
    return sum((-1) ** j * math.comb(k, j) * (s - j) ** k for j in range(int(math.floor(s)) + 1)) / math.factorial(k)


def irwin_hall_abs_mean(s: float, k: int) -> float:
    # E|S - s| = (k/2 - s) + 2 int_0^s F(t) dt, with int_0^s F = 1/(k+1)! sum (-1)^j C(k,j) (s-j)_+^(k+1)
    # (integrating the Irwin-Hall CDF term by term)
    integral = sum((-1) ** j * math.comb(k, j) * (s - j) ** (k + 1)
                   for j in range(int(math.floor(s)) + 1)) / math.factorial(k + 1)
    return k / 2 - s + 2 * integral


def test_irwin_hall_formulas_cross_check():
    # the closed forms against a direct one-dimensional quadrature of the k = 2 triangle density (mpmath)
    import mpmath
    pdf = lambda t: t if t <= 1 else 2 - t  # noqa: E731 - Irwin-Hall density for k = 2
    assert float(mpmath.quad(pdf, [0, 1, 1.3])) == pytest.approx(irwin_hall_cdf(1.3, 2), rel=1e-14)
    assert float(mpmath.quad(lambda t: abs(t - 1.3) * pdf(t), [0, 1, 1.3, 2])) == \
        pytest.approx(irwin_hall_abs_mean(1.3, 2), rel=1e-14)


@pytest.mark.parametrize("d,s", [(2, 0.7), (3, 1.4), (4, 2.3)])
def test_kink_along_generic_plane_with_cut(d, s):
    f = lambda X: np.abs(X.sum(axis=1) - s)  # noqa: E731
    res = integrate(f, Box([0] * d, [1] * d), rel_tol=1e-10, cuts=[[[1.0] * d, s]])
    exact = irwin_hall_abs_mean(s, d)        # Irwin-Hall, see above
    assert res.status == "converged"
    assert abs(res.value - exact) <= max(res.error, 1e-12)
    assert abs(res.value - exact) <= 1e-10 * exact


@pytest.mark.parametrize("d,s", [(2, 0.7), (3, 1.4)])
def test_indicator_cdf_with_cut(d, s):
    f = lambda X: (X.sum(axis=1) < s).astype(float)  # noqa: E731
    res = integrate(f, Box([0] * d, [1] * d), rel_tol=1e-10, cuts=[[[1.0] * d, s]])
    exact = irwin_hall_cdf(s, d)             # Irwin-Hall CDF
    assert res.status == "converged"
    assert abs(res.value - exact) <= max(res.error, 1e-13)


def test_one_d_products_of_abs_and_indicators():
    # int_0^1 |x - 0.3| |x - 0.55| (x < 0.8) dx, piecewise cubic: exact by the antiderivative on each piece
    f = lambda X: np.abs(X[:, 0] - 0.3) * np.abs(X[:, 0] - 0.55) * (X[:, 0] < 0.8)  # noqa: E731
    P = np.polynomial.Polynomial
    q = P([0.3 * 0.55, -(0.3 + 0.55), 1.0])   # (x - 0.3)(x - 0.55)
    exact = 0.0
    for a, b, sign in ((0, 0.3, 1), (0.3, 0.55, -1), (0.55, 0.8, 1)):
        Q = q.integ()
        exact += sign * (Q(b) - Q(a))
    res = integrate(f, Box([0.0], [1.0]), rel_tol=1e-12, rule="gauss-kronrod", breaks=[[0.3, 0.55, 0.8]])
    assert res.status == "converged"
    assert res.value == pytest.approx(exact, rel=1e-12)


def test_break_values_axis_aligned_4d():
    # (x < 0.37) exp(y): product form (0.37 (e - 1)) on the unit 4-cube  (closed form)
    f = lambda X: (X[:, 0] < 0.37) * np.exp(X[:, 1])  # noqa: E731
    res = integrate(f, Box([0] * 4, [1] * 4), rel_tol=1e-10, breaks={0: [0.37]})
    assert res.status == "converged"
    assert res.value == pytest.approx(0.37 * (math.e - 1), rel=1e-10)


# ---------------------------------------------------------------- singularities

def test_dirichlet_half_powers_on_every_face():
    # (x y z (1 - x - y - z))^(-1/2) over the standard simplex = Gamma(1/2)^4 / Gamma(2) = pi^2  (Dirichlet's formula)
    f = lambda X: (X[:, 0] * X[:, 1] * X[:, 2] * (1 - X.sum(axis=1))) ** -0.5  # noqa: E731
    faces = [{"normal": n, "offset": b, "power": -0.5}
             for n, b in (([1, 0, 0], 0), ([0, 1, 0], 0), ([0, 0, 1], 0), ([1, 1, 1], 1))]
    res = integrate(f, SIMPLEX3, rel_tol=1e-7, singular=faces)
    assert res.status == "converged"
    assert abs(res.value - math.pi ** 2) <= max(res.error, 1e-9 * math.pi ** 2)


def test_dirichlet_fractional_powers():
    # int x^(-0.9) y^(-1/3) over the standard 2-simplex = Gamma(0.1) Gamma(2/3) Gamma(1) / Gamma(0.1 + 2/3 + 1)
    # (Dirichlet's formula)
    f = lambda X: X[:, 0] ** -0.9 * X[:, 1] ** (-1 / 3)  # noqa: E731
    tri = Simplex([[0, 0], [1, 0], [0, 1]])
    res = integrate(f, tri, rel_tol=1e-8, singular=[{"normal": [1, 0], "offset": 0, "power": -0.9},
                                                    {"normal": [0, 1], "offset": 0, "power": -1 / 3}])
    exact = gamma(0.1) * gamma(2 / 3) / gamma(0.1 + 2 / 3 + 1)
    assert res.status == "converged"
    assert abs(res.value - exact) <= max(2 * res.error, 1e-9 * exact)


def box_integral_b3_minus1() -> float:
    # int_{[0,1]^3} 1/|r| dr = -pi/4 + (3/2) ln(2 + sqrt 3)  (Bailey, Borwein & Crandall 2006, "Box integrals",
    # value B_3(-1); the Newtonian potential of a cube at a corner)
    return -math.pi / 4 + 1.5 * math.log(2 + math.sqrt(3))


def test_box_integral_closed_form_cross_checked_with_mpmath():
    # inner integral int_0^1 dx / sqrt(x^2 + a^2) = asinh(1/a); the remaining 2-D integral by mpmath
    import mpmath
    two_d = mpmath.quad(lambda y, z: mpmath.asinh(1 / mpmath.sqrt(y * y + z * z)), [0, 1], [0, 1])
    assert float(two_d) == pytest.approx(box_integral_b3_minus1(), rel=1e-12)


def test_newtonian_potential_of_cube_at_its_centre():
    # int over [-1/2,1/2]^3 of 1/|r| = 8 (1/2)^2 B_3(-1) = 2 B_3(-1)  (Waldvogel 1976, "The Newtonian potential of
    # homogeneous cuboids", ZAMP 27; here from the box integral by scaling the 8 octants, cross-checked above)
    f = lambda X: 1.0 / np.sqrt((X * X).sum(axis=1))  # noqa: E731
    res = integrate(f, Box([-0.5] * 3, [0.5] * 3), rel_tol=1e-8, singular=[{"point": [0, 0, 0], "power": -1}])
    exact = 2 * box_integral_b3_minus1()
    assert res.status == "converged"
    assert abs(res.value - exact) <= max(res.error, 1e-10)


def test_point_singularity_inside_is_not_hit_and_converges():
    """issue 13: a point singularity inside the domain on a would-be node converges instead of failing."""
    c = np.array([0.5, 0.5, 0.5])
    f = lambda X: 1.0 / np.sqrt(((X - c) ** 2).sum(axis=1))  # noqa: E731
    with pytest.raises(IntegrandError), np.errstate(divide="ignore"):
        integrate(f, Box([0] * 3, [1] * 3), rel_tol=1e-6)           # the centre is a node: fails without
    res = integrate(f, Box([0] * 3, [1] * 3), rel_tol=1e-8, singular=[{"point": c.tolist(), "power": -1}])
    assert res.status == "converged"
    assert abs(res.value - 2 * box_integral_b3_minus1()) <= max(res.error, 1e-10)


def test_singular_point_on_simplex_pieces_with_cut():
    # 1/|r| over the unit cube with a cut plane (simplex pieces) and the corner declared: B_3(-1)
    f = lambda X: 1.0 / np.sqrt((X * X).sum(axis=1))  # noqa: E731
    res = integrate(f, Box([0] * 3, [1] * 3), rel_tol=1e-7, cuts=[[[1, 1, 0], 0.9]],
                    singular=[{"point": [0, 0, 0], "power": -1}])
    assert res.status == "converged"
    assert abs(res.value - box_integral_b3_minus1()) <= max(res.error, 1e-9)


def test_removable_singularity_message_names_point():
    """issue 13 item 3: a Python integrand failing at a node says where and how to fix it."""
    f = lambda X: np.sin(X[:, 0]) / X[:, 0]  # noqa: E731
    with pytest.raises(IntegrandError) as exc, np.errstate(invalid="ignore"):
        integrate(f, Box([-1.0], [1.0]), rule="gauss-kronrod")
    msg = str(exc.value)
    assert "x = (0)" in msg and "removable" in msg and "sin_over_x" in msg


# ---------------------------------------------------------------- decomposition exactness

def test_polytope_decomposition_volumes_match_convex_hulls():
    rng = np.random.default_rng(20260213)
    for d in (2, 3, 4):
        lo, hi = np.zeros(d), np.array([1.0, 2.0, 0.5, 1.5][:d])
        for _ in range(3):
            a = rng.normal(size=d)
            b = float(a @ (lo + rng.uniform(0.2, 0.8, d) * (hi - lo)))
            simp = partition.cut_simplices(list(partition.kuhn_simplices(lo, hi)), a, b)
            vols = partition._volumes(np.array(simp))
            assert vols.sum() == pytest.approx(np.prod(hi - lo), rel=1e-12)
            side = np.array([np.sign(v.mean(axis=0) @ a - b) for v in simp])
            # the part of the box below the plane: corners below plus the plane's crossings of the box edges
            corners = np.array(list(itertools.product(*zip(lo, hi))))
            s = corners @ a - b
            pts = [c for c, v in zip(corners, s) if v <= 0]
            for i, j in itertools.combinations(range(len(corners)), 2):
                if np.count_nonzero(corners[i] != corners[j]) == 1 and s[i] * s[j] < 0:
                    pts.append(corners[i] + s[i] / (s[i] - s[j]) * (corners[j] - corners[i]))
            hull = ConvexHull(np.array(pts)).volume          # scipy.spatial (Qhull)
            assert vols[side < 0].sum() == pytest.approx(hull, rel=1e-10)


def test_star_split_keeps_volume():
    tet = [SIMPLEX3.vertices.copy()]
    for p in ([0.2, 0.2, 0.2], [0.5, 0.5, 0.0], [0.3, 0.0, 0.0]):   # inside, on a face, on an edge
        out = partition.star_split(tet, p)
        assert partition._volumes(np.array(out)).sum() == pytest.approx(1 / 6, rel=1e-13)
        assert all((np.abs(v - p).max(axis=1) < 1e-15).any() for v in out)


# ---------------------------------------------------------------- Jacobians against finite differences

def _fd_jacobian(fun, x, h=1e-5):
    # fourth-order central differences (common practice)
    d = x.size
    J = np.empty((d, d))
    for k in range(d):
        e = np.zeros(d)
        e[k] = h
        J[:, k] = (8 * (fun(x + e) - fun(x - e)) - (fun(x + 2 * e) - fun(x - 2 * e))) / (12 * h)
    return abs(np.linalg.det(J))


def test_endpoint_map_jacobian():
    t = np.linspace(0.05, 0.95, 7)
    for left in (True, False):
        for p in (2.0, 3.0, 10.0):
            x, dx = singular_maps.endpoint_map(t, 0.0, 1.0, p, left)
            xp, _ = singular_maps.endpoint_map(t + 1e-7, 0.0, 1.0, p, left)
            xm, _ = singular_maps.endpoint_map(t - 1e-7, 0.0, 1.0, p, left)
            assert np.allclose((xp - xm) / 2e-7, dx, rtol=1e-6)


@pytest.mark.parametrize("d", [2, 3, 4])
def test_radial_and_faces_map_jacobians(d):
    rng = np.random.default_rng(7 + d)
    V = rng.normal(size=(d + 1, d))
    for _ in range(4):
        lam = 0.1 + (1 - 0.1 * (d + 1)) * rng.dirichlet(np.ones(d + 1))   # away from the floored offsets
        x = lam @ V
        vertex = int(rng.integers(d + 1))
        p = float(rng.choice([2.0, 3.0, 5.5]))
        radial = lambda z, v=vertex, p=p: singular_maps.radial_map(z[None], V[None], np.array([v]), np.array([p]))[0][0]  # noqa: E731
        jr = singular_maps.radial_map(x[None], V[None], np.array([vertex]), np.array([p]))[1][0]
        assert jr == pytest.approx(_fd_jacobian(radial, x), rel=1e-5)
        powers = rng.choice([1.0, 2.0, 3.0, 5.5], size=d + 1)
        faces = lambda z, q=powers: singular_maps.faces_map(z[None], V[None], q[None])[0][0]  # noqa: E731
        jf = singular_maps.faces_map(x[None], V[None], powers[None])[1][0]
        assert jf == pytest.approx(_fd_jacobian(faces, x), rel=1e-5)


def test_maps_send_pieces_onto_themselves():
    # endpoints of the graded interval are fixed; vertices of the simplex are fixed by both simplex maps
    V = SIMPLEX3.vertices
    for j in range(4):
        y, _ = singular_maps.faces_map(V[j][None], V[None], np.array([[2.0, 3.0, 1.0, 4.0]]))
        assert np.allclose(y[0], V[j], atol=1e-12)


# ---------------------------------------------------------------- everything else keeps working

@pytest.mark.parametrize("kw", [dict(breaks=[[0.37], [], []]), dict(cuts=[[[1, 1, 1], 1.4]]),
                                dict(singular=[{"point": [0.5, 0.5, 0.5], "power": -1}])])
def test_resume_with_features_is_bit_identical(tmp_path, kw):
    f = lambda X: np.abs(X.sum(axis=1) - 1.4) + 1.0 / np.sqrt(((X - 0.5) ** 2).sum(axis=1))  # noqa: E731
    domain = Box([0] * 3, [1] * 3)
    full = integrate(f, domain, rel_tol=1e-6, **kw)
    run = Run(f, domain, rel_tol=1e-6, **kw)
    for _ in range(5):
        run.step()
    assert not run.done
    path = tmp_path / "state.npz"
    run.save_checkpoint(path)
    again = Run.from_checkpoint(path, f, domain)
    res = again.run()
    assert res.value == full.value and res.error == full.error and res.evaluations == full.evaluations


def test_features_change_the_fingerprint(tmp_path):
    f = lambda X: np.abs(X[:, 0] - 0.3)  # noqa: E731
    a = Run(f, Box([0, 0], [1, 1]), breaks=[[0.3], []])
    b = Run(f, Box([0, 0], [1, 1]))
    assert a.fingerprint() != b.fingerprint()


def test_vector_integrand_with_cut():
    # components |x + y - 0.7| and (x + y < 0.7) on the unit square: Irwin-Hall with k = 2
    f = lambda X: np.stack([np.abs(X.sum(axis=1) - 0.7), (X.sum(axis=1) < 0.7) * 1.0], axis=1)  # noqa: E731
    res = integrate(f, Box([0, 0], [1, 1]), rel_tol=1e-10, cuts=[[[1, 1], 0.7]])
    assert res.status == "converged"
    assert res.values == pytest.approx([irwin_hall_abs_mean(0.7, 2), irwin_hall_cdf(0.7, 2)], rel=1e-10)


def test_bad_features_refused():
    from cubage.engine.partition import FeatureError
    with pytest.raises(FeatureError):
        Run(lambda X: X[:, 0], Box([0, 0], [1, 1]), cuts=[[[0, 0], 1]])
    with pytest.raises(FeatureError):
        Run(lambda X: X[:, 0], Box([0, 0], [1, 1]), singular=[{"point": [0, 0], "power": -2.5}])
    with pytest.raises(FeatureError):
        Run(lambda X: X[:, 0], Box([0, 0], [1, np.inf]), cuts=[[[1, 1], 1]])


# ---------------------------------------------------------------- expressions: automatic detection

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from cubage.problem.expr import compile_expression  # noqa: E402
from cubage.problem.features import analyse, parse_plane, to_engine  # noqa: E402


def _detect(src, variables, domain):
    return to_engine(analyse(src, variables), domain)[0]


def test_detects_switching_functions():
    v = ["x", "y", "z"]
    cube = Box([0] * 3, [1] * 3)
    assert _detect("abs(x - 0.3) * exp(y)", v, cube) == {"breaks": [[0.3], [], []]}
    assert _detect("(x + y + z < 1.4) * 2", v, cube) == {"cuts": [[[1.0, 1.0, 1.0], 1.4]]}
    assert _detect("where(y > 0.25, x, 0)", v, cube) == {"breaks": [[], [0.25], []]}
    assert _detect("maximum(x, 0.5) + sign(z - 0.75)", v, cube) == {"breaks": [[0.5], [], [0.75]]}
    assert _detect("floor(2*x)", v, cube) == {"breaks": [[0.5], [], []]}
    assert _detect("x % 0.25", v, cube) == {"breaks": [[0.25, 0.5, 0.75], [], []]}
    found = analyse("where(x**2 + y**2 < 1, 1, 0)", v)
    assert found.nonsmooth and not found.planes          # a curved boundary: reported, not cut
    assert _detect("abs(x - 3)", v, cube) == {}           # misses the domain


def test_detects_singular_factors():
    v = ["x", "y", "z"]
    tet = SIMPLEX3
    kw = _detect("(x*y*z*(1 - x - y - z))**-0.5", v, tet)
    planes = sorted((tuple(s["normal"]), s["offset"], s["power"]) for s in kw["singular"])
    assert planes == [((0.0, 0.0, 1.0), 0.0, -0.5), ((0.0, 1.0, 0.0), 0.0, -0.5), ((1.0, 0.0, 0.0), 0.0, -0.5),
                      ((1.0, 1.0, 1.0), 1.0, -0.5)]
    kw = _detect("1/sqrt((x - 0.5)**2 + (y - 0.5)**2 + (z - 0.5)**2)", v, Box([0] * 3, [1] * 3))
    assert kw == {"singular": [{"point": [0.5, 0.5, 0.5], "power": -1.0}]}
    kw = _detect("hypot(x - 0.2, y)**-1.5", ["x", "y"], Box([0, 0], [1, 1]))
    assert kw == {"singular": [{"point": [0.2, 0.0], "power": -1.5}]}
    kw = _detect("log(x) * exp(y)", ["x", "y"], Box([0, 0], [1, 1]))
    assert kw == {"singular": [{"normal": [1.0, 0.0], "offset": 0.0, "power": None}]}


def test_removable_singularity_in_an_expression():
    """issue 13 item 3: sin(x)/x gets a break at 0 (no node there); sin_over_x is defined at 0."""
    from scipy.special import sici
    exact = 2 * sici(1.0)[0]                                  # int_{-1}^{1} sin(x)/x dx = 2 Si(1)  (scipy.special)
    f = compile_expression("sin(x)/x", ["x"])
    kw = _detect("sin(x)/x", ["x"], Box([-1.0], [1.0]))
    assert kw == {"breaks": [[0.0]]}
    res = integrate(f, Box([-1.0], [1.0]), rule="gauss-kronrod", rel_tol=1e-12, **kw)
    assert res.value == pytest.approx(exact, rel=1e-12)
    g = compile_expression("sin_over_x(x)", ["x"])
    assert g(np.array([[0.0], [1e-3], [2.0]])) == pytest.approx([1.0, math.sin(1e-3) / 1e-3, math.sin(2) / 2],
                                                              rel=1e-15)
    res = integrate(g, Box([-1.0], [1.0]), rule="gauss-kronrod", rel_tol=1e-12)
    assert res.value == pytest.approx(exact, rel=1e-12)


def test_parse_plane():
    assert parse_plane("x + 2*y = 1.5", ["x", "y"]) == ([1.0, 2.0], 1.5)
    assert parse_plane("x = y", ["x", "y"]) == ([1.0, -1.0], 0.0)
    for bad in ("x*y = 1", "x + y", "x = 1 = y", "2 = 3"):
        with pytest.raises(ValueError):
            parse_plane(bad, ["x", "y"])


def _pos_part_integral(a, b):
    # int_{[0,1]^d} (a.x - b)_+ dx by iterated integration: 1/((d+1)! prod a_i) sum_S (-1)^(d-|S|) (a_S - b)_+^(d+1)
    # (each step int_0^1 (a_i t + c)_+^m dt = ((a_i + c)_+^(m+1) - c_+^(m+1)) / ((m+1) a_i)); evaluated with mpmath
    import mpmath
    mpmath.mp.dps = 40
    d = len(a)
    a = [mpmath.mpf(x) for x in a]
    b = mpmath.mpf(b)
    total = mpmath.mpf(0)
    for S in itertools.product((0, 1), repeat=d):
        t = sum(ai for ai, s in zip(a, S) if s) - b
        total += (-1) ** (d - sum(S)) * (max(t, 0) ** (d + 1))
    return total / (math.factorial(d + 1) * mpmath.fprod(a))


def _abs_integral(a, b):
    # |y| = 2 y_+ - y, and int (a.x - b) dx = sum(a)/2 - b
    import mpmath
    return float(2 * _pos_part_integral(a, b) - (mpmath.fsum(mpmath.mpf(x) for x in a) / 2 - mpmath.mpf(b)))


_coef = st.floats(0.15, 1.0).map(lambda v: round(v, 3)) | st.floats(-1.0, -0.15).map(lambda v: round(v, 3))


@settings(max_examples=12, deadline=None, derandomize=True)
@given(st.integers(2, 4).flatmap(lambda d: st.tuples(
    st.lists(st.tuples(st.lists(_coef, min_size=d, max_size=d), st.floats(0.2, 0.8).map(lambda v: round(v, 3)),
                       st.floats(0.5, 2.0).map(lambda v: round(v, 2))), min_size=1, max_size=2),
    st.just(d))))
def test_random_affine_kinks_detected_and_integrated(case):
    """issue 13: random affine kinks, found in the expression, integrate to the exact piecewise-polynomial value."""
    kinks, d = case
    names = ["x", "y", "z", "w"][:d]
    terms, exact = [], 0.0
    for a, frac, c in kinks:
        # the plane a.x = b passes through the cube: b between the smallest and largest value of a.x on it
        lo, hi = sum(min(ai, 0) for ai in a), sum(max(ai, 0) for ai in a)
        b = round(lo + frac * (hi - lo), 3)
        terms.append(f"{c!r} * abs({' + '.join(f'({ai!r})*{n}' for ai, n in zip(a, names))} - {b!r})")
        exact += c * _abs_integral(a, b)
    src = " + ".join(terms)
    f = compile_expression(src, names)
    domain = Box([0] * d, [1] * d)
    kw = _detect(src, names, domain)
    assert kw, "the kinks must be found"
    res = integrate(f, domain, rel_tol=1e-9, budget=3_000_000, **kw)
    assert res.status == "converged"
    assert abs(res.value - exact) <= max(2 * res.error, 1e-12 * abs(exact))


# ---------------------------------------------------------------- problem files and the check command

KINKED = """
[domain]
variables = ["x", "y", "z"]
box = [[0, 1], [0, 1], [0, 1]]
[integrand]
expr = "abs(x + y + z - 1.4) + abs(x - 0.3) + 1/sqrt((x - c)**2 + (y - c)**2 + (z - c)**2)"
constants = { c = 0.5 }
[goal]
rel_tol = 1e-7
"""


def test_problem_file_features_found_and_used(write_problem, cli):
    # E|S - 1.4| (Irwin-Hall, k = 3) + E|U - 0.3| (= 0.29) + 2 B_3(-1) (cube potential at its centre, see above)
    path = write_problem("kinked.toml", KINKED + '[features]\nbreaks = { y = [0.25] }\n')
    code, out, err = cli("check", str(path))
    assert code == 0, err
    assert "break at y = 0.25  (declared)" in out
    assert "break at x = 0.3" in out and "cut along x + y + z = 1.4" in out
    assert "singular point (0.5, 0.5, 0.5), power -1:" in out and "simplices" in out
    code, out, err = cli("run", str(path), "--json")
    assert code == 0, err
    import json
    res = json.loads(out)
    exact = irwin_hall_abs_mean(1.4, 3) + 0.29 + 2 * box_integral_b3_minus1()
    assert res["status"] == "converged"
    assert abs(res["value"] - exact) <= max(res["error"], 1e-9)


def test_alignment_off_and_declared_only(write_problem):
    from cubage.problem.problem_file import load_problem
    p = load_problem(write_problem("off.toml", KINKED + '[method]\nalign = "off"\n'))
    assert p.features == {}
    p = load_problem(write_problem("decl.toml", KINKED + '[method]\nalign = "declared"\n'
                                   '[features]\ncuts = ["x + y + z = 1.4"]\n'))
    assert p.features == {"cuts": [[[1.0, 1.0, 1.0], 1.4]]}


@pytest.mark.parametrize("table,needle", [
    ('[features]\nbreaks = { q = [0.5] }', "[features] breaks: 'q' is not a variable"),
    ('[features]\ncuts = ["x*y = 1"]', "[features] cuts: 'x*y' in 'x*y = 1' is not affine"),
    ('[features]\nsingular = [{ point = [0, 0] }]', "[features] singular: point must be a list of 3 numbers"),
    ('[features]\nsingular = [{ point = [0, 0, 0], power = -3 }]', "not integrable"),
    ('[features]\nholes = 1', "[features] holes: unknown key"),
    ('[method]\nalign = "maybe"', "[method] align: must be one of auto, declared, off"),
])
def test_bad_feature_tables_are_one_line_errors(write_problem, cli, table, needle):
    path = write_problem("bad.toml", KINKED + table + "\n")
    code, out, err = cli("check", str(path))
    assert code == 2
    assert needle in err and len(err.strip().splitlines()) == 1


def test_plane_touching_one_vertex_is_a_point_singularity():
    # int over the standard 3-simplex of (x + y + z)^-2.5 = 1 / ((d-1)! (a + d)) = 1  (Dirichlet-Liouville formula)
    src, names = "(x + y + z)**-2.5", ["x", "y", "z"]
    kw = _detect(src, names, SIMPLEX3)
    assert kw == {"singular": [{"point": [0.0, 0.0, 0.0], "power": -2.5}]}
    res = integrate(compile_expression(src, names), SIMPLEX3, rel_tol=1e-10, **kw)
    assert res.status == "converged"
    assert abs(res.value - 1.0) <= max(res.error, 1e-12)


def test_features_results_independent_of_workers():
    """issue 13 item 5: with cut planes and a singular map, 1 or 2 thread workers give the same bits."""
    from cubage.engine.parallel import make_evaluator
    f = lambda X: np.abs(X.sum(axis=1) - 1.4) / np.sqrt((X * X).sum(axis=1))  # noqa: E731
    kw = dict(rel_tol=1e-7, cuts=[[[1, 1, 1], 1.4]], singular=[{"point": [0, 0, 0], "power": -1}])
    serial = integrate(f, Box([0] * 3, [1] * 3), **kw)
    with make_evaluator(2, "threads", chunk_points=1000) as ev:
        threaded = integrate(f, Box([0] * 3, [1] * 3), evaluator=ev, **kw)
    assert serial.value == threaded.value and serial.error == threaded.error
    assert serial.evaluations == threaded.evaluations


def test_point_singularity_on_an_infinite_axis():
    # int over R of |x|^(-1/2) exp(-x^2) dx = Gamma(1/4)  (Euler's integral after t = x^2)
    f = lambda X: np.abs(X[:, 0]) ** -0.5 * np.exp(-X[:, 0] ** 2)  # noqa: E731
    res = integrate(f, Box([-np.inf], [np.inf]), rel_tol=1e-10, rule="gauss-kronrod",
                    singular=[{"point": [0.0], "power": -0.5}])
    assert res.status == "converged"
    assert abs(res.value - gamma(0.25)) <= max(res.error, 1e-12)
