"""Reliability of the default ("sharp") error estimate on Genz's test families.

True errors come from the closed forms in :mod:`cubage.bench.genz_families` (Genz 1984;
the forms themselves are checked in tests/test_genz.py).  The large study
that calibrated the constants is benchmarks/reliability.py; this is a smaller
sample with a seed the calibration never used.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

import cubage
from cubage.bench import genz_families as genz

DIMS = (2, 3, 4, 5, 6)
DRAWS = 6
BUDGET = 300_000


def _study(families, tol, seed=11):
    out = []
    for fam in families:
        for d in DIMS:
            rng = np.random.default_rng([seed, genz.FAMILIES.index(fam), d])
            box = cubage.Box([0.0] * d, [1.0] * d)
            for _ in range(DRAWS):
                c = genz.draw(fam, d, rng)
                r = cubage.integrate(c.f, box, rel_tol=tol, budget=BUDGET)
                out.append((fam, d, abs(r.value - c.exact), r.error, r.status, abs(c.exact), r))
    return out


@pytest.mark.parametrize("tol", [1e-4, 1e-6, 1e-8])
def test_smooth_families_error_estimate_holds(tol):
    runs = _study(genz.SMOOTH, tol)
    held = [t <= e for _, _, t, e, *_ in runs]
    share = float(np.mean(held))
    print(f"smooth families, tol {tol:.0e}: true <= reported on {100 * share:.1f} % of {len(runs)} runs")
    # issue requirement: >= 99 % of draws (120 runs per tolerance: at most one miss)
    assert share >= 0.99, [(f, d, t, e) for (f, d, t, e, *_), h in zip(runs, held) if not h]
    for _fam, _d, _t, e, status, _scale, r in runs:
        if status == "converged":
            # converged means the reported error met the goal max(abs_tol, rel_tol*|value|)
            assert e <= tol * abs(r.value) * (1 + 1e-12)


def test_lead_reported_case_gaussian_3d():
    # exp(-|x|^2) on [0,1]^3: closed form (sqrt(pi)/2 erf(1))^3 (Abramowitz & Stegun 7.1.1);
    # with the earlier constants genz-malik at 1e-8 reported 2.2e-9 for a true error of 5.2e-9
    exact = (math.sqrt(math.pi) / 2 * math.erf(1.0)) ** 3
    r = cubage.integrate(lambda X: np.exp(-(X ** 2).sum(axis=1)), cubage.Box([0] * 3, [1] * 3),
                           rel_tol=1e-8, rule="genz-malik")
    assert r.converged
    assert abs(r.value - exact) <= r.error


def test_sharp_needs_fewer_evaluations_than_plain():
    # the point of the sharp estimate: same goal, fewer evaluations (summed over a small sample)
    rng = np.random.default_rng(5)
    sharp = plain = 0
    for fam in genz.SMOOTH:
        for d in (3, 4):
            c = genz.draw(fam, d, rng)
            box = cubage.Box([0.0] * d, [1.0] * d)
            sharp += cubage.integrate(c.f, box, rel_tol=1e-7, budget=BUDGET).evaluations
            plain += cubage.integrate(c.f, box, rel_tol=1e-7, budget=BUDGET, estimate="plain").evaluations
    print(f"evaluations sharp/plain = {sharp / plain:.3f}")
    assert sharp < plain


# C0 and discontinuous integrands lie outside the estimate's assumptions (the rules' error
# expansions need smoothness).  No target is asserted for them; the shares measured by
# benchmarks/reliability.py are recorded in cubature/estimate.py's docstring.


# ---------------------------------------------------------------- issue 12: no silent wrong answers

def _honest(res, exact, tol):
    """The run either meets its goal with an honest estimate or does not claim convergence."""
    true = abs(res.value - exact)
    if res.converged:
        assert true <= res.error, (res.status, true, res.error)
        assert true <= 2 * tol * abs(exact), (true, tol * abs(exact))
    return true


def _c0_on_cube(a, u, tol, budget):
    """A draw of Genz's C0 family exp(-sum a_i |x_i - u_i|) on the unit cube, checked by :func:`_honest` against
    its closed form (a product of 1-D integrals, Genz 1984; cubage.bench.genz_families.exact, checked in
    tests/test_genz.py).  Returns the result and the exact value."""
    a, u = np.asarray(a, dtype=float), np.asarray(u, dtype=float)
    exact = genz.exact("c0", a, u)
    res = cubage.integrate(genz.integrand("c0", a, u), cubage.Box([0] * len(a), [1] * len(a)), rel_tol=tol,
                           budget=budget, raise_on_failure=False)
    _honest(res, exact, tol)
    return res, exact


@pytest.mark.parametrize("tol", [1e-4, 1e-6])
def test_threshold_times_smooth_factor_4d(tol):
    """Issue 12 (first failure): (x < c) exp(y) on [0,1]^4 was 'converged' with the true error 2e-3."""
    c = 0.7213
    # product formula: c (e - 1)
    exact = c * (math.e - 1)
    res = cubage.integrate(lambda X: (X[:, 0] < c) * np.exp(X[:, 1]), cubage.Box([0] * 4, [1] * 4), rel_tol=tol,
                           budget=200_000)
    assert abs(res.value - exact) <= res.error
    _honest(res, exact, tol)


def test_abs_along_an_axis_4d():
    """Issue 12 (second failure): |x - c| exp(y + z + w) was 'converged' at 1e-6 with 6x the reported error."""
    c = 0.3377
    # product formula: (c^2 + (1 - c)^2) / 2 * (e - 1)^3
    exact = (c * c + (1 - c) ** 2) / 2 * (math.e - 1) ** 3
    res = cubage.integrate(lambda X: np.abs(X[:, 0] - c) * np.exp(X[:, 1:].sum(axis=1)), cubage.Box([0] * 4, [1] * 4),
                           rel_tol=1e-6, budget=200_000)
    assert abs(res.value - exact) <= res.error
    _honest(res, exact, 1e-6)


@pytest.mark.parametrize("tol", [1e-4, 1e-6])
def test_kink_on_a_generic_plane_3d(tol):
    """Issue 12 (third failure): |x + y + z - 1.4| was 'converged' with 5x / 500x the reported error."""
    s = 1.4
    # Irwin-Hall: E|S - s| = (3/2 - s) + 2 E(s - S)^+, E(s - S)^+ = sum_j (-1)^j C(3,j) (s-j)_+^4 / 4!
    exact = (1.5 - s) + 2 * sum((-1) ** j * math.comb(3, j) * max(s - j, 0.0) ** 4 for j in range(4)) / 24
    res = cubage.integrate(lambda X: np.abs(X.sum(axis=1) - s), cubage.Box([0] * 3, [1] * 3), rel_tol=tol,
                           budget=150_000)
    _honest(res, exact, tol)


def test_distance_between_two_points_of_a_square():
    """Issue 12 (fourth failure): the mean distance of two random points of a square (4-D) at 1e-4."""
    # Bailey, Borwein & Crandall, "Box integrals" (2007): Delta_2(1) = (2 + sqrt 2 + 5 ln(1 + sqrt 2)) / 15
    exact = (2 + math.sqrt(2) + 5 * math.log(1 + math.sqrt(2))) / 15
    res = cubage.integrate(lambda X: np.hypot(X[:, 0] - X[:, 2], X[:, 1] - X[:, 3]), cubage.Box([0] * 4, [1] * 4),
                           rel_tol=1e-4, budget=200_000)
    assert abs(res.value - exact) <= res.error
    _honest(res, exact, 1e-4)


def test_inverse_square_root_on_every_face_of_a_simplex():
    """Issue 12 (fifth failure): (x y z (1-x-y-z))^(-1/2) over the simplex reported 4-5x below the true error."""
    # Dirichlet's formula: Gamma(1/2)^4 / Gamma(2) = pi^2
    exact = math.pi ** 2
    f = lambda X: 1.0 / np.sqrt(X.prod(axis=1) * np.maximum(1.0 - X.sum(axis=1), 0.0))
    res = cubage.integrate(f, cubage.Simplex(np.vstack([np.zeros(3), np.eye(3)])), rel_tol=1e-4, budget=200_000)
    assert not res.converged
    assert abs(res.value - exact) <= res.error
    assert res.trust["flagged_error_share"] > 0.5 and res.trust["worst"]
    assert "not smooth" in res.message


@pytest.mark.parametrize("d, every_face, budget", [(3, True, 2_000_000), (3, False, 1_000_000),
                                                   (4, False, 1_000_000)])
def test_inverse_square_root_faces_of_a_simplex_at_the_end_of_the_budget(d, every_face, budget):
    """Issue 12 item 5: a run that cannot reach its goal ends with its honest estimate.  Next to a singular face
    the split check sees a quarter of a simplex region's error or nothing, and the regions' estimates summed to
    0.14 against a true 0.64 (x^-1/2 on every face, d = 3, the published case: 0.54 reported through the
    convergence trend); x0^-1/2 alone reported 0.37x (d = 3) and 0.24x (d = 4) of its true error.  The regions'
    own estimates must hold, not only the trend's extrapolation."""
    if every_face:
        # Dirichlet's integral (Whittaker & Watson, A Course of Modern Analysis, 12.5): Gamma(1/2)^(d+1) /
        # Gamma((d+1)/2)
        exact = math.gamma(0.5) ** (d + 1) / math.gamma((d + 1) / 2)
        f = lambda X: 1.0 / np.sqrt(X.prod(axis=1) * np.maximum(1.0 - X.sum(axis=1), 0.0))
    else:
        # Dirichlet's integral (same): x0^(1/2 - 1) x1^0 ... (1 - sum)^0 -> Gamma(1/2) / Gamma(d + 1/2)
        exact = math.gamma(0.5) / math.gamma(d + 0.5)
        f = lambda X: 1.0 / np.sqrt(X[:, 0])
    run = cubage.Run(f, cubage.Simplex(np.vstack([np.zeros(d), np.eye(d)])), rel_tol=1e-6, budget=budget)
    res = run.run()
    true = _honest(res, exact, 1e-6)
    assert not res.converged
    assert true <= res.error
    assert true <= run.store["error"].sum()


def test_two_components_with_singular_faces_on_a_simplex_are_each_honest():
    """Issue 12 item 5, per component: x0^-1/2 (one singular face) beside x^-1/2 on every face, 3-D simplex.
    Component 0's lineages near the other faces are smooth; with the class's lineage ratio an unweighted mean
    over them it stayed below slow convergence and component 0 reported 0.37x of its true error."""
    # Dirichlet's integral (Whittaker & Watson, A Course of Modern Analysis, 12.5): Gamma(1/2) / Gamma(7/2) and
    # Gamma(1/2)^4 / Gamma(2) = pi^2
    exact = np.array([math.gamma(0.5) / math.gamma(3.5), math.pi ** 2])
    f = lambda X: np.stack([X[:, 0] ** -0.5, 1.0 / np.sqrt(X.prod(axis=1) * np.maximum(1 - X.sum(axis=1), 0.0))],
                           axis=1)
    res = cubage.integrate(f, cubage.Simplex(np.vstack([np.zeros(3), np.eye(3)])), rel_tol=1e-6, budget=200_000,
                           raise_on_failure=False)
    assert not res.converged
    assert np.all(np.abs(np.asarray(res.value) - exact) <= np.asarray(res.error))


@pytest.mark.parametrize("d, a, tol", [(2, -0.5, 3e-2), (3, -0.25, 3e-2)])
def test_audit_of_a_simplex_with_a_singular_face_splits_through_a_cycle(d, a, tol):
    """Issue 12 item 4: x0^a on the standard simplex at a loose goal.  Bisections along the singular face measure
    none of a region's error, and the audit's one bisection per region passed: x0^-1/2 in 2-D at 3e-2 converged
    after 475 evaluations with a true error 3x its goal (x0^-1/4 in 3-D: converged beyond its reported error)."""
    # Dirichlet's integral (Whittaker & Watson, A Course of Modern Analysis, 12.5): Gamma(a + 1) / Gamma(a + 1 + d)
    exact = math.gamma(a + 1) / math.gamma(a + 1 + d)
    res = cubage.integrate(lambda X: X[:, 0] ** a, cubage.Simplex(np.vstack([np.zeros(d), np.eye(d)])),
                           rel_tol=tol, budget=200_000)
    true = _honest(res, exact, tol)
    assert true <= res.error


def test_audit_finds_a_step_no_node_sees(monkeypatch):
    """Issue 12 item 4: 1 + 50 [x1 > 0.98] on [0,1]^3 looks constant to every node of the first region.

    The first region's true error is known: 50 * 0.02 = 1 (the rule says 0).  With the vertex probes switched
    off, only the audit can find it: its split (along the widest axis the rule did not choose) gives children
    whose nodes reach the step.  The run may then not claim the constant's value.
    """
    from cubage.engine import estimate
    monkeypatch.setattr(estimate, "PROBE_TOLERANCE", np.inf)
    exact = 1.0 + 50 * 0.02   # the step's volume times its height, plus the constant
    f = lambda X: 1.0 + 50.0 * (X[:, 1] > 0.98)
    run = cubage.Run(f, cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6, budget=300_000)
    run.step()
    assert run.result().value == pytest.approx(1.0) and run.result().error < 1e-12   # blind to the step
    res = run.run()
    assert res.trust["audits"] >= 1 and not res.trust["smooth"]
    _honest(res, exact, 1e-6)
    assert res.value == pytest.approx(exact, rel=1e-3) or not res.converged
    # the same run without the audit claims the constant's value: silently wrong by 1.0
    blind = cubage.integrate(f, cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6, audit=False)
    assert blind.converged and blind.value == pytest.approx(1.0) and blind.trust["audit"] == "not run"


def test_vertex_probe_sees_a_step_near_a_face():
    """Issue 12 item 3: the same step along x0 is seen by the first region's vertex probes (at the vertices)."""
    f = lambda X: 1.0 + 50.0 * (X[:, 0] > 0.98)
    run = cubage.Run(f, cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6, budget=300_000)
    run.step()
    first = run.result()
    assert first.value == pytest.approx(1.0)        # no node sees the step...
    assert first.error >= 1.0                       # ...but the estimate covers its true error 50 * 0.02 = 1
    assert "values near a vertex disagree" in " ".join(first.trust["worst"][0]["signatures"])
    _honest(run.run(), 2.0, 1e-6)


def test_trust_report_is_json_ready_and_smooth_runs_pass():
    """Issue 12 item 5: every result carries a JSON-ready trust report; a smooth run passes its audit."""
    import json
    res = cubage.integrate(lambda X: np.exp(-(X ** 2).sum(axis=1)), cubage.Box([0] * 3, [1] * 3), rel_tol=1e-8)
    assert res.converged and res.trust["audit"] == "passed" and res.trust["audit_evaluations"] > 0
    back = json.loads(json.dumps(res.to_json()))
    assert back["trust"]["audit"] == "passed"
    # closed form (sqrt(pi)/2 erf(1))^3 (Abramowitz & Stegun 7.1.1)
    assert abs(res.value - (math.sqrt(math.pi) / 2 * math.erf(1.0)) ** 3) <= res.error


@pytest.mark.parametrize("rule", ["gauss-kronrod", "genz-malik"])
def test_step_in_the_last_half_per_cent_of_a_box(rule):
    """Issue 12 item 3 (2-D misses of the calibration): 1 + 50 [x0 > 0.997] on [0,1]^2 is constant on every
    node of the first region (K15's outermost node is at 0.99573, Genz-Malik's at 0.974), and beyond a probe at
    0.99 of the way to a vertex; the vertices themselves see it.  True value 1 + 50 * 0.003 = 1.15 (the step's
    area times its height, by hand)."""
    f = lambda X: 1.0 + 50.0 * (X[:, 0] > 0.997)
    run = cubage.Run(f, cubage.Box([0] * 2, [1] * 2), rel_tol=1e-6, budget=400_000, rule=rule)
    run.step()
    first = run.result()
    assert first.value == pytest.approx(1.0)        # no node sees the step...
    assert first.error >= 0.15                      # ...but the estimate covers its true error 50 * 0.003
    res = run.run()
    assert not (res.converged and abs(res.value - 1.15) > 2e-6 * 1.15)      # never silently wrong
    if rule == "gauss-kronrod":
        _honest(res, 1.15, 1e-6)


def test_vertex_probes_skip_infinite_ends_and_singular_vertices():
    """Issue 12 item 3: no probe is evaluated at the end of an infinite axis, and a corner singularity (a
    huge value just inside the vertex) is clipped: the estimate stays finite and the run converges honestly.
    Closed forms: int_R2 exp(-x^2-y^2) = pi; B_3(-1) = 3/2 log(2 + sqrt 3) - pi/4 (Bailey-Borwein-Crandall
    2007)."""
    seen = []

    def gauss(X):
        seen.append(np.isfinite(X).all())
        return np.exp(-(X * X).sum(axis=1))
    res = cubage.integrate(gauss, cubage.Box([-np.inf] * 2, [np.inf] * 2), rel_tol=1e-8)
    assert all(seen) and res.converged and abs(res.value - math.pi) <= res.error
    run = cubage.Run(lambda X: 1.0 / np.sqrt((X * X).sum(axis=1)), cubage.Box([0] * 3, [1] * 3), rel_tol=1e-4)
    run.step()                                      # the root's vertex (0, 0, 0) is singular
    assert np.isfinite(run.result().error) and run.result().error < 1e4
    res = run.run()
    assert res.converged
    _honest(res, 1.5 * math.log(2 + math.sqrt(3)) - math.pi / 4, 1e-4)


def test_thin_layer_along_a_face_of_a_wide_box():
    """Issue 12 item 3 (regression): exp(-x y) on [0, L] x [0, 1] with L = 1e6 holds most of its value in a
    layer y < ~1/x along the face y = 0 that no node reaches; the probes just inside the vertices read ~1 where
    every node reads ~1e-14, and dropping such 'wild' values as singular made the run claim 'converged' at 9.54
    (true 14.39); L = 1e9 and 1e12 must not claim convergence either.  Closed form: int_0^L (1 - e^-x)/x dx =
    Ein(L) = gamma + ln L + E1(L) (Abramowitz & Stegun 5.1.39-5.1.40), evaluated with scipy.special.exp1."""
    from scipy.special import exp1
    L = 1e6
    exact = np.euler_gamma + math.log(L) + float(exp1(L))
    res = cubage.integrate(lambda X: np.exp(-X[:, 0] * X[:, 1]), cubage.Box([0, 0], [L, 1]), rel_tol=1e-6,
                           budget=200_000, raise_on_failure=False)
    _honest(res, exact, 1e-6)
    # and the probes steer the splits towards the face (estimate.probe_axis): the layer is resolved, not just
    # reported (without the steering the run spent 2e6 evaluations splitting along x)
    assert res.converged
    for L in (1e9, 1e12):
        exact = np.euler_gamma + math.log(L) + float(exp1(L))
        res = cubage.integrate(lambda X: np.exp(-X[:, 0] * X[:, 1]), cubage.Box([0, 0], [L, 1]), rel_tol=1e-6,
                               budget=50_000, raise_on_failure=False)
        _honest(res, exact, 1e-6)


def test_kink_near_the_faces_of_resolved_regions_3d():
    """Issue 12 item 3: exp(-sum a_i |x_i - u_i|) (Genz's C0 family) in 3-D at 1e-6 used to converge with 4x the
    reported error: its kink at x0 = 0.8431 sat at 98 % of the width of many resolved regions, between the last
    axis node and the vertex, where the probes' slope allowance hid it and no probed ancestor flagged the lineage.

    Closed form: product of the 1-D integrals (Genz 1984; cubage.bench.genz_families.exact, checked in
    tests/test_genz.py against direct quadrature).
    """
    a = np.array([4.07966757195459, 5.739562785044427, 10.58076964300098])
    u = np.array([0.843110021516097, 0.5422597924093286, 0.4752261386265063])
    f = genz.integrand("c0", a, u)
    exact = genz.exact("c0", a, u)
    res = cubage.integrate(f, cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6, budget=2_000_000)
    assert not (res.converged and abs(res.value - exact) > 2e-6 * exact)       # never silently wrong
    assert abs(res.value - exact) <= res.error


def test_audit_counts_what_the_parent_missed(monkeypatch):
    """Issue 12 item 4: exp(-sum a_i |x_i - u_i|) in 2-D at 1e-4: the first audit's split of a region with a
    kink across it measures 1.8e-5 against the parent's estimate 1.8e-8.  The children's own estimates then
    cover their share, but the regions the audit did not split have the same shortfall: the audit must fail
    (and its next sample grow) rather than pass because the split children look fine.  (The per-axis decay
    check of Gauss-Kronrod boxes now sees this kink before any audit; it is switched off here so that the
    audit is what is tested.)
    Closed form: Genz 1984 product (cubage.bench.genz_families.exact)."""
    from cubage.engine import estimate
    monkeypatch.setattr(estimate, "KINK_DECAY", math.inf)
    a = np.array([9.378927806706338, 11.021072193293662])
    u = np.array([0.7724929607883628, 0.04298977735649856])
    run = cubage.Run(genz.integrand("c0", a, u), cubage.Box([0] * 2, [1] * 2), rel_tol=1e-4, budget=200_000)
    res = run.run()
    assert run.checks["audit_failed"] >= 1 and run.checks["audits"] >= 2
    # it used to claim convergence 5x beyond the goal; the audit of 2-D boxes splits them along both axes (a
    # bisection parallel to the kink measures nothing) and samples the flagged regions with the most error
    exact = genz.exact("c0", a, u)
    assert not (res.converged and abs(res.value - exact) > 2e-4 * exact)


def test_one_region_audit_costs_one_split():
    """Issue 12 item 4: a smooth 6-D integrand met by the first region's estimate is audited by one split
    (2 x 149 Genz-Malik nodes, 2^6 + 2*6^2 + 2*6 + 1 = 149 by Genz & Malik 1980) and no second round of vertex
    probes: the first region's vertices were probed already.  Value: Re(e^i prod (e^(i c_k) - 1)/(i c_k)) for
    cos(1 + sum c_k x_k) (closed form, common practice)."""
    c = 1.0 / np.arange(1, 7)
    exact = float((np.exp(1j) * np.prod((np.exp(1j * c) - 1) / (1j * c))).real)
    res = cubage.integrate(lambda X: np.cos(1.0 + X @ c), cubage.Box([0] * 6, [1] * 6), rel_tol=1e-6)
    assert res.converged and res.trust["audit"] == "passed"
    assert res.trust["audit_evaluations"] == 2 * 149
    assert abs(res.value - exact) <= res.error


@pytest.mark.parametrize("d", [3, 4])
def test_audit_children_share_the_probes_of_their_common_face(d):
    """Issue 12 (smooth cost): the two children of the audit's split share the 2^(d-1) vertices of the face between
    them, so their vertex probes cost 2^(d+1) - 2^(d-1) evaluations, besides the children's 2 (2^d + 2 d^2 + 2 d
    + 1) Genz-Malik nodes (Genz & Malik 1980).  exp(-3 |x - 0.3|^2) on [0, 1]^d at rel_tol 1e-4, whose value region
    was never probed.  Closed form: (sqrt(pi/3)/2 (erf(0.7 sqrt 3) + erf(0.3 sqrt 3)))^d (product of 1-D Gaussian
    integrals, common practice)."""
    exact = (math.sqrt(math.pi / 3) / 2 * (math.erf(math.sqrt(3) * 0.7) + math.erf(math.sqrt(3) * 0.3))) ** d
    res = cubage.integrate(lambda X: np.exp(-3.0 * ((X - 0.3) ** 2).sum(axis=1)), cubage.Box([0] * d, [1] * d),
                           rel_tol=1e-4)
    assert res.converged and res.trust["audit"] == "passed" and res.trust["audit_regions"] == 1
    assert res.trust["audit_evaluations"] == 2 * (2 ** d + 2 * d * d + 2 * d + 1) + 2 ** (d + 1) - 2 ** (d - 1)
    _honest(res, exact, 1e-4)


@pytest.mark.parametrize("d", [2, 3])
def test_support_missed_by_every_node_of_the_first_region(d):
    """Issue 12 item 3: [x0 < 0.02][x1 < 0.03] exp(x0 + ... ) is 0 on every node of the first region, so its
    rule estimate and the audit's split were 0 and the run 'converged' at 0 after 107 evaluations (Genz's
    discontinuous family, 3-D, seed 4099).  The vertex probe at the origin sees the support; with no magnitude
    on the nodes it must count as data, not as a singularity.  Closed form: (e^0.02 - 1)(e^0.03 - 1)(e - 1)^(d-2)
    (product of 1-D integrals of exp)."""
    exact = math.expm1(0.02) * math.expm1(0.03) * math.expm1(1.0) ** (d - 2)
    f = lambda X: (X[:, 0] < 0.02) * (X[:, 1] < 0.03) * np.exp(X.sum(axis=1))
    res = cubage.integrate(f, cubage.Box([0] * d, [1] * d), rel_tol=1e-4, budget=400_000)
    assert res.value > 0.5 * exact
    _honest(res, exact, 1e-4)


@pytest.mark.parametrize("c", [0.2469387755102041, 0.4918367346938776])
def test_kink_near_a_face_of_a_genz_malik_child_3d(c):
    """Issue 12 item 3 (regression, found by a scan): |x - c| e^(y + z/2) on [0,1]^3 at 1e-6 (Python integrand, no
    alignment) claimed convergence after 189-263 evaluations, 200-1400x off: the split at 0.5 leaves the kink
    1.6 % of a region's width from its face, where the probes' long-gap allowance hid it.  Closed form (product of
    1-D integrals): (c^2 + (1 - c)^2)/2 (e - 1) 2 (e^(1/2) - 1)."""
    exact = (c * c + (1 - c) ** 2) / 2 * (math.e - 1) * 2 * (math.exp(0.5) - 1)
    f = lambda X: np.abs(X[:, 0] - c) * np.exp(X[:, 1] + 0.5 * X[:, 2])
    res = cubage.integrate(f, cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6, budget=2_000_000, raise_on_failure=False)
    _honest(res, exact, 1e-6)


@pytest.mark.parametrize("a, u", [
    ([0.57665252, 19.82334748], [0.72349488, 0.39517654]),       # kink in x at 45 % of [0.5, 1]
    ([14.47990915, 5.92009085], [0.96333926, 0.27008599]),       # kink in y at 16 % of [0.25, 0.375]
])
@pytest.mark.parametrize("tol", [1e-4, 1e-6])
def test_kink_across_the_middle_of_a_gauss_kronrod_box_2d(a, u, tol):
    """Issue 12 target "no silent wrong answer" (Genz's C0 family, 2-D, seed 6311 draws 9 and 0): an axis-aligned
    kink across the middle of tensor Gauss-Kronrod boxes biased their 15-, 7- and 8-point rules alike and no vertex
    probe saw it; the runs claimed convergence at 1e-6 with 88x and 3x the reported error.  The per-axis decay
    check (estimate.axis_kink_errors) sees it.  Closed form: product of the 1-D integrals of exp(-a|x - u|)
    (Genz 1984; cubage.bench.genz_families.exact, checked in tests/test_genz.py)."""
    _c0_on_cube(a, u, tol, 400_000)


def test_audit_splits_the_largest_error_region_along_its_rule_axis():
    """Issue 12 item 4 (found while removing false probe alarms): a 5-D Gaussian draw (Genz's family, seed 9)
    at 1e-4 converged with a true error 1.3x the reported one: its largest-error region, half the cube, was
    3.5x under-estimated by a rule not yet asymptotic there, and the audit split only the regions with the most
    value, along flat axes (children agree with their parent along a direction the function barely varies in).
    The audit now also splits the largest-error region, along the rule's own axis (where its estimate weighs:
    this one holds 0.37 of the total error, AUDIT_TOP_SHARE = 0.3; without its split the run reports 8.3e-5
    with the true error 1.05e-4, relative).  Closed form: product of
    1-D erf integrals (Genz 1984; cubage.bench.genz_families.exact)."""
    a = np.array([1.98596837, 0.15020726, 1.49670658, 1.15606833, 2.24104947])
    u = np.array([0.93455017, 0.79229854, 0.93139889, 0.23858564, 0.9088702])
    res = cubage.integrate(genz.integrand("gaussian", a, u), cubage.Box([0] * 5, [1] * 5), rel_tol=1e-4)
    exact = genz.exact("gaussian", a, u)
    assert res.converged and res.trust["audits"] >= 1
    assert abs(res.value - exact) <= res.error


def test_audit_cut_short_by_the_budget_cannot_pass_after_a_failure_3d():
    """Issue 12 target "no silent wrong answer" (Genz's C0 family, 3-D, seed 8329 draw 5, 1e-6): the kink in x sits
    2 % of a region's width from the face x = 0.125 of every region [0.125, 0.25] x ..., whose splits along y and z
    measure nothing of it.  Seven audits failed; the eighth, with the budget nearly spent, could afford one region,
    found nothing and passed: converged with 7.7e-8 true against 1.1e-8 reported.  Now an audit after a failure
    needs its full sample, and a run that ends without passing one reports what the last audit extrapolated.
    Closed form: product of the 1-D integrals of exp(-a|x - u|) (Genz 1984; cubage.bench.genz_families.exact)."""
    res, exact = _c0_on_cube([2.177409635709675, 9.609701671541098, 8.612888692749229],
                             [0.12753609169709523, 0.49205756061536665, 0.3994801755296057], 1e-6, 2_000_000)
    assert abs(res.value - exact) <= res.error
    if not res.converged:
        assert res.message                                  # says why it stopped short


def test_non_asymptotic_signature_must_show_in_log_f_too():
    """Issue 12 (smooth cost): a coarse Genz-Malik region of a narrow peak or a Gaussian fails the ratio test in f
    (|q7 - q5| > RATIO_LIMIT |q5 - q3|), and every such region had its resolved children probed, twice per vertex;
    its logarithm is smooth (a Gaussian's is a quadratic, integrated exactly by all three rules, Genz & Malik
    1980), so the region is not flagged.  A kink of a positive function crossing the region is one of log f: still
    flagged; so is a sign-changing function (no logarithm), judged on f alone."""
    box = cubage.Box([0] * 3, [1] * 3)

    def flagged(f, lo=(0, 0, 0), hi=(1, 1, 1)):
        run = cubage.Run(f, box)
        run.m = 1
        g = run.geometry.root()
        g["centre"][:] = (np.array(lo) + np.array(hi)) / 2
        g["halfw"][:] = (np.array(hi) - np.array(lo)) / 2
        q, absq, fr = run._evaluate(g)
        return bool(run._non_asymptotic(q, absq)[0]), bool(run._non_asymptotic(q, absq, g, fr)[0])

    gauss = lambda X: np.exp(-25 * ((X - 0.3) ** 2).sum(axis=1))
    assert flagged(gauss) == (True, False)                          # f alone flags it; log f clears it
    peak = lambda X: np.prod(1.0 / (0.01 + (X - 0.4) ** 2), axis=1)   # Genz's product peak
    assert flagged(peak) == (True, False)
    kink = lambda X: np.exp(-8 * np.abs(X[:, 0] - 0.37) - X[:, 1])     # Genz's C0 family: a kink at x = 0.37
    assert flagged(kink) == (True, True)
    assert flagged(lambda X: gauss(X) - 0.5) == (True, True)


def test_kink_near_a_face_behind_a_steep_factor_3d():
    """Issue 12 item 3 (Genz's C0 family, 3-D, seed 8 draw 9, 1e-8): the kink in z at 0.30072 lies 1.6 % of the
    width from the face z = 0.30078 of every slab region [.., ..] x [0.29688, 0.30078], beyond the rule's outermost
    axis node; the diagonal probes of the slab's first region passed (the steep factor along x widened their
    allowance) and cleared the lineage, and no split along x or y measures a kink in z: converged with 3.8e-9 true
    against 2.4e-10 reported.  The probes just inside each face's centre see it.  Closed form: product of the 1-D
    integrals of exp(-a|x - u|) (Genz 1984; cubage.bench.genz_families.exact)."""
    res, exact = _c0_on_cube([7.798241075965559, 3.397383079304331, 9.204375844730109],
                             [0.4781503700747285, 0.33272390728084056, 0.3007174853870306], 1e-8, 2_000_000)
    assert abs(res.value - exact) <= res.error


def test_face_probes_where_the_diagonals_are_less_sharp():
    """Issue 12 (smooth cost): a probed Genz-Malik child gets a face's centre probe only where the diagonal checks
    of that face's vertices are less sharp than the face check (relative to the values there): a kink parallel to
    the face in its last few per cent offsets the vertex probes as much as the face probe.  Behind a steep factor
    along x (exp(12 x) (1 + z)) the y and z faces are probed, the case the face probes exist for; on the 4-D
    diagonal kink |x0 + x1 - 1| e^(-(x2 + x3)/2) the children the kink only touches at a corner need none, and
    the run stays honest.  Closed form: E|U1 + U2 - 1| = 1/3 (Irwin-Hall, common practice) times
    (2 (1 - e^(-1/2)))^2."""
    box = {"centre": np.array([[0.25, 0.5, 0.75]]), "halfw": np.array([[0.25, 0.25, 0.25]])}
    run = cubage.Run(lambda X: np.exp(12 * X[:, 0]) * (1 + X[:, 2]), cubage.Box([0] * 3, [1] * 3))
    run.step()
    q, absq, fr = run._evaluate(box)
    pv = run._probe_values(box, np.ones(1, bool), mid=True, faces=False)
    assert run._faces_to_probe(fr, pv).tolist() == [[False, False, True, True, True, True]]

    exact = (1 / 3) * (2 * (1 - math.exp(-0.5))) ** 2
    run = cubage.Run(lambda X: np.abs(X[:, 0] + X[:, 1] - 1) * np.exp(-0.5 * (X[:, 2] + X[:, 3])),
                     cubage.Box([0] * 4, [1] * 4), rel_tol=1e-6)
    res = run.run()
    _honest(res, exact, 1e-6)
    assert res.converged and run.checks["face_probes_spared"] > 0
    corner = {"centre": np.array([[0.125, 0.625, 0.5, 0.5]]), "halfw": np.array([[0.125, 0.125, 0.5, 0.5]])}
    q, absq, fr = run._evaluate(corner)
    pv = run._probe_values(corner, np.ones(1, bool), mid=True, faces=False)
    assert not run._faces_to_probe(fr, pv).any()


def test_kink_beside_a_face_behind_a_steep_factor_keeps_its_face_probes():
    """Issue 12 (regression for the selective face probes): Genz's C0 family in 3-D with the kink in z 0.6 % of a
    width from a face of the dyadic grid (u_z = 0.74755) behind a steep factor along x claimed convergence at 1e-6
    with no face probes (3.8e-6 true against 8.7e-7 reported); the faces the diagonals cannot watch keep theirs.
    Closed form: product of the 1-D integrals of exp(-a|x - u|) (Genz 1984; cubage.bench.genz_families.exact)."""
    res, exact = _c0_on_cube([11.993090379879337, 9.254509958735671, 6.663036290419094],
                             [0.5141176465995139, 0.49687343539350426, 0.7475474866000918], 1e-6, 2_000_000)
    assert abs(res.value - exact) <= res.error


def test_point_singularity_explains_the_signature_of_the_regions_touching_it():
    """Issue 12 (smooth cost): 1/|x| on the unit cube.  The first region's probe next to the origin reads a value
    far beyond its nodes' (clipped): the origin is remembered as a point singularity.  A region touching it whose
    only signature is a non-asymptotic rule hierarchy owes that signature to the singularity: of its children,
    the one away from the origin is not watched and gets its vertex probes only (with a kink signature too, it
    is probed as before).  The
    run stays honest: closed form 3 ln((1 + sqrt 3)/sqrt 2) - pi/4 (from memory; tests/test_engine.py's
    test_corner_singularity_cube checks it too)."""
    from cubage.engine.run import FLAG_DISAGREED, FLAG_NON_ASYMPTOTIC
    exact = 3 * math.log((1 + math.sqrt(3)) / math.sqrt(2)) - math.pi / 4
    run = cubage.Run(lambda X: 1.0 / np.sqrt((X * X).sum(axis=1)), cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6)
    res = run.run()
    _honest(res, exact, 1e-6)
    assert run.checks["singular_vertices"] == [[0.0, 0.0, 0.0]]
    parents = {"centre": np.array([[0.25] * 3] * 2), "halfw": np.array([[0.25] * 3] * 2),
               "flags": np.array([FLAG_NON_ASYMPTOTIC, FLAG_NON_ASYMPTOTIC | FLAG_DISAGREED], np.uint8)}
    # children of a split along x, laid out child 0 of every parent, then child 1: [0, 0.25] and [0.25, 0.5]
    kids = {"centre": np.array([[0.125, 0.25, 0.25]] * 2 + [[0.375, 0.25, 0.25]] * 2),
            "halfw": np.array([[0.125, 0.25, 0.25]] * 4)}
    assert run._explained(parents, kids).tolist() == [False, False, True, False]


def _irwin_hall_abs(c, k=3):
    """E|S - c| for S a sum of k independent uniforms on [0, 1] (Irwin-Hall distribution: exact piecewise-polynomial
    CDF, common practice; benchmarks/engine.py's kink reference uses the same formula)."""
    pos = sum((-1) ** j * math.comb(k, j) * max(c - j, 0.0) ** (k + 1) for j in range(k + 1))
    return (k / 2 - c) + 2 * pos / math.factorial(k + 1)


def test_point_singularity_power_explains_the_signatures_of_boxes_near_it():
    """Issue 12 (smooth cost): 1/|x| on the unit cube.  The probe next to the origin climbs from the corner node
    like |x|^-1 and so did the corner node from the centre: the power 1 is remembered with the point.  A box near
    the origin but not touching it, [0, 0.5] x [0.25, 0.5] x [0.5, 0.75], shows a non-asymptotic rule hierarchy
    in f, none in f |x| (a constant): the singularity explains it, and its children are not probed.  A weak kink
    crossing such a box (1/|x| + 0.01 |x + y + z - 1|) still shows in f |x|.  Closed forms:
    3 ln((1 + sqrt 3)/sqrt 2) - pi/4 (from memory, checked in tests/test_engine.py against scipy) plus
    0.01 E|S - 1| (Irwin-Hall, common practice)."""
    i3 = 3 * math.log((1 + math.sqrt(3)) / math.sqrt(2)) - math.pi / 4
    run = cubage.Run(lambda X: 1.0 / np.sqrt((X * X).sum(axis=1)), cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6)
    _honest(run.run(), i3, 1e-6)
    assert run.checks["singular_powers"] == [pytest.approx(1.0, abs=1e-6)]
    near = {"centre": np.array([[0.25, 0.375, 0.625], [0.125, 0.125, 0.125]]),
            "halfw": np.array([[0.25, 0.125, 0.125], [0.125, 0.125, 0.125]])}
    w, wp = run._singular_factors(near, 2 ** 3)
    x = run.geometry.points({k: v[:1] for k, v in near.items()})
    assert np.allclose(w[0], np.sqrt((x * x).sum(axis=1))) and np.isfinite(wp[0]).all()
    assert np.isnan(w[1]).all()                          # the box touching the origin: no model
    box = {k: v[:1] for k, v in near.items()}
    q, absq, fr = run._evaluate(box)
    assert run._non_asymptotic(q, absq, box, fr).tolist() == [False]
    powers, run.checks["singular_powers"] = run.checks["singular_powers"], []
    assert run._non_asymptotic(q, absq, box, fr).tolist() == [True]      # f alone shows the signature
    run.checks["singular_powers"] = powers

    run = cubage.Run(lambda X: 1.0 / np.sqrt((X * X).sum(axis=1)) + 0.01 * np.abs(X.sum(axis=1) - 1.0),
                     cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6)
    _honest(run.run(), i3 + 0.01 * _irwin_hall_abs(1.0), 1e-6)
    assert run.checks["singular_powers"] == [pytest.approx(1.0, abs=1e-3)]
    crossed = {"centre": np.array([[0.125, 0.25, 0.625]]), "halfw": np.array([[0.125, 0.25, 0.125]])}
    q, absq, fr = run._evaluate(crossed)
    assert run._non_asymptotic(q, absq, crossed, fr).tolist() == [True]


def test_thin_layer_at_a_vertex_has_no_power():
    """A wild probe value that the nodes do not lead up to is a point to remember but no power law: 1 + 1e6 where
    |x| < 1e-5 on the unit cube reads 1e6 at the probe next to the origin, 1 at the corner node and the centre.
    Closed form 1 + 1e6 (pi/6) 1e-15 (volume of a ball octant, common practice)."""
    run = cubage.Run(lambda X: 1.0 + 1e6 * ((X * X).sum(axis=1) < 1e-10), cubage.Box([0] * 3, [1] * 3),
                     rel_tol=1e-6)
    _honest(run.run(), 1.0 + 1e6 * math.pi / 6 * 1e-15, 1e-6)
    assert run.checks["singular_vertices"] == [[0.0, 0.0, 0.0]]
    assert run.checks["singular_powers"] == [None]


def test_singular_face_explains_the_signature_of_the_regions_touching_it():
    """Issue 12 (smooth cost): x0^(-1/2) (x1 + x2 + x3) on [0, 1]^4 is singular along the whole face x0 = 0.  The
    first region's probes at the vertices on that face (all but the one where x1 + x2 + x3 vanishes too) read
    a few hundred times its nodes, climbing steeply from the corner nodes: the face is remembered.  A region
    touching it whose only signature is a non-asymptotic rule hierarchy owes that signature to it: of its
    children, the one away from the face is not watched and gets its vertex probes only (with a kink signature
    too, it is probed as before); a child touching the face elsewhere is not explained.  Closed form:
    2 * 3/2 = 3 (int_0^1 x^(-1/2) dx = 2, the mean of x1 + x2 + x3 is 3/2; common practice)."""
    from cubage.engine.run import FLAG_DISAGREED, FLAG_NON_ASYMPTOTIC
    run = cubage.Run(lambda X: X[:, 0] ** -0.5 * (X[:, 1] + X[:, 2] + X[:, 3]), cubage.Box([0] * 4, [1] * 4),
                     rel_tol=1e-6)
    res = run.run()
    _honest(res, 3.0, 1e-6)
    assert res.converged
    assert run.checks["singular_faces"] == [[[0.0, 0.0, 0.0, 0.0], [0.0, 1.0, 1.0, 1.0]]]
    parents = {"centre": np.array([[0.25, 0.5, 0.5, 0.5]] * 3), "halfw": np.array([[0.25, 0.5, 0.5, 0.5]] * 3),
               "flags": np.array([FLAG_NON_ASYMPTOTIC, FLAG_NON_ASYMPTOTIC | FLAG_DISAGREED, FLAG_NON_ASYMPTOTIC],
                                 np.uint8)}
    # parents 0 and 1 split along x0 ([0, 0.25] then [0.25, 0.5]); parent 2 along x1 (both halves touch x0 = 0)
    kids = {"centre": np.array([[0.125, 0.5, 0.5, 0.5]] * 2 + [[0.25, 0.25, 0.5, 0.5]]
                               + [[0.375, 0.5, 0.5, 0.5]] * 2 + [[0.25, 0.75, 0.5, 0.5]]),
            "halfw": np.array([[0.125, 0.5, 0.5, 0.5]] * 2 + [[0.25, 0.25, 0.5, 0.5]]
                              + [[0.125, 0.5, 0.5, 0.5]] * 2 + [[0.25, 0.25, 0.5, 0.5]])}
    assert run._explained(parents, kids).tolist() == [False, False, False, True, False, False]


def test_jump_beside_a_singular_face_is_seen_by_the_explained_children():
    """Issue 12 (regression): x0^(-1/2) (x1 + x2 + x3) + (x1 + x2 + x3 > 0.434) on [0, 1]^4.  The singular face
    x0 = 0 explains the signature of the regions touching it, but the jump crosses their children away from it
    too, near the corner x1 = x2 = x3 = 0 where no node lies; with those children not probed at all the run spent
    its budget reporting 3.8e-3 against a true 6.1e-3.  They get their vertex probes.  Closed form: 3 (as above)
    plus P(S > 0.434) = 1 - 0.434^3/6 (Irwin-Hall CDF, common practice)."""
    c = 0.434
    exact = 3 + 1 - c ** 3 / 6
    res = cubage.integrate(lambda X: X[:, 0] ** -0.5 * X[:, 1:].sum(axis=1) + (X[:, 1:].sum(axis=1) > c),
                           cubage.Box([0] * 4, [1] * 4), rel_tol=1e-4, budget=1_000_000, raise_on_failure=False)
    _honest(res, exact, 1e-4)
    assert abs(res.value - exact) <= res.error


def test_small_jump_near_a_vertex_beside_a_singular_face_is_not_hidden_by_the_audit_axis():
    """Issue 12 "no silent wrong answer" (regression): x0^(-1/2) (x1 + x2 + x3) + 0.01 (x1 + x2 + x3 > 2.566) on
    [0, 1]^4 at 1e-6.  The singular face x0 = 0 has every split across x0, and the audit split its one value region,
    the largest-error one too, along x0 as well: no node line moved along x1..x3, the jump's corner lies beyond the
    corner nodes (x1 + x2 + x3 = 2.53) of every box, and the run converged after 4,632 evaluations reporting 7.6e-7
    of the value against a true 4.6e-5.  With a singularity known, the next value region joins the audit, split
    across another axis: its child's corner nodes read the jump, and the run refines it.  Closed form: 3 (int_0^1
    x^(-1/2) dx = 2 times int (x1 + x2 + x3) = 3/2, elementary) plus 0.01 times the volume of x1 + x2 + x3 > s in
    the unit cube, (3 - s)^3 / 6 for 2 <= s <= 3 (Irwin-Hall distribution, common practice)."""
    s = 2.566
    exact = 3 + 0.01 * (3 - s) ** 3 / 6
    res = cubage.integrate(lambda X: X[:, 0] ** -0.5 * X[:, 1:].sum(axis=1) + 0.01 * (X[:, 1:].sum(axis=1) > s),
                           cubage.Box([0] * 4, [1] * 4), rel_tol=1e-6, budget=300_000, raise_on_failure=False)
    true = _honest(res, exact, 1e-6)
    assert true <= res.error


def test_explained_children_read_the_vertices_they_share_from_the_one_before():
    """Issue 12 (smooth cost): x0^(-1/2) (x1 + x2 + x3) on [0, 1]^4 at 1e-6.  Each child away from the singular face
    x0 = 0 shares the 8 vertices of its face towards x0 = 1 with the explained child split off before it, whose probes
    read them 3 * 2^-20 of a half-width across that face: it reads them from there (560 -> 288 probe evaluations,
    engine benchmark 4,904 -> 4,632; first release 4,161), and the run stays honest with none of those checks
    deviating.  Closed form 3 (int_0^1 x^(-1/2) dx = 2 times int (x1 + x2 + x3) = 3/2, elementary)."""
    run = cubage.Run(lambda X: X[:, 0] ** -0.5 * X[:, 1:].sum(axis=1), cubage.Box([0] * 4, [1] * 4), rel_tol=1e-6)
    res = run.run()
    _honest(res, 3.0, 1e-6)
    assert res.converged
    assert run.checks["probes_shared"] >= 8 * 30
    assert res.trust["flagged_regions"] <= 1


def test_diagonal_kink_takes_mid_probes_only_where_the_models_miss_the_vertex():
    """Issue 12 (smooth cost): |x0 + x1 - 1| exp(-(x2 + x3)/2) on [0, 1]^4 at 1e-6 (the engine benchmark's diagonal
    kink).  The children beside the kink are probed; a mid probe is taken only at the vertices whose probe the
    sharpest smooth model misses by more than the skip share (a feature beyond a corner node adds to the miss at
    the vertex beyond it): 7,700 of 10,256 spared, 167,783 -> 160,091 evaluations (first release 146,547), the
    same honest result.  Reference: E|U1 + U2 - 1| = 1/3 (Irwin-Hall, common practice) times
    (2 (1 - e^(-1/2)))^2 (elementary)."""
    exact = (1.0 / 3.0) * (2 * (1 - math.exp(-0.5))) ** 2
    run = cubage.Run(lambda X: np.abs(X[:, 0] + X[:, 1] - 1.0) * np.exp(-0.5 * (X[:, 2] + X[:, 3])),
                     cubage.Box([0] * 4, [1] * 4), rel_tol=1e-6)
    res = run.run()
    _honest(res, exact, 1e-6)
    assert res.converged and abs(res.value - exact) <= res.error
    assert run.checks["mid_probes_spared"] > 0


def test_steep_smooth_factor_is_no_singular_face():
    """A steep exponential reads far above the nodes at the vertices of one edge of the first region too
    (exp(12 (x0 + x1 + x2)) on [0, 1]^4: e^36 at the vertices (1, 1, 1, *) against e^30.4 at the highest nodes),
    but it climbs evenly along the diagonals, not like a power law near the edge: no singular face is
    remembered, and the run is honest.  Closed form ((e^12 - 1)/12)^3 (a product of 1-D integrals, common
    practice)."""
    exact = ((math.exp(12) - 1) / 12) ** 3
    run = cubage.Run(lambda X: np.exp(12 * (X[:, 0] + X[:, 1] + X[:, 2])), cubage.Box([0] * 4, [1] * 4),
                     rel_tol=1e-6)
    res = run.run()
    _honest(res, exact, 1e-6)
    assert run.checks["singular_faces"] == []


def test_small_run_audit_takes_one_value_region_and_the_largest_error_region():
    """Issue 12 item 6 (smooth cost on small runs): where 5 % of the evaluations pay for less than one split, the
    audit's sample is the region holding the most value and the region with the largest error estimate, not two
    value regions beside it (on the smooth Genz families at 1e-4, tuning seeds 7, 8, 9, that third split cost 1.9 %
    of all evaluations and found nothing the other two missed).  exp(-|x|^2) on [0,1]^3 at 1e-6 converges with a
    dozen regions.  Closed form (sqrt(pi)/2 erf(1))^3 (Abramowitz & Stegun 7.1.1)."""
    exact = (math.sqrt(math.pi) / 2 * math.erf(1.0)) ** 3
    res = cubage.integrate(lambda X: np.exp(-(X ** 2).sum(axis=1)), cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6)
    assert res.converged and res.trust["audit"] == "passed"
    assert res.trust["audits"] >= 1 and res.trust["audit_regions"] <= 2 * res.trust["audits"]
    assert abs(res.value - exact) <= res.error


def test_gauss_kronrod_audit_children_of_a_probed_region_are_not_probed_again():
    """Issue 12 item 6 (regression: 2-D one-region runs of Genz's oscillatory family, tuning seed 8 draw 5): the
    vertex probes of the four audit children of cos(2 pi u0 + a . x), whose first region's probes agreed, deviated
    from the cubic extrapolation by its fourth-order remainder where the cubic term vanished by accident; the
    audit extrapolated 4e-7 of 'hidden' error against a goal of 9e-11 (true error 4e-17) and the run refined
    through four failed audits to 5,725 evaluations.  Then the audit cost its split only (225 + 4 probes + 4 x 225);
    now its lattice check (233 lattice points beside the first region's kept node values), which passes, no split.
    Closed form: Re(e^(2 pi i u0) prod (e^(i a_k) - 1)/(i a_k)) (Genz 1984; cubage.bench.genz_families.exact,
    checked in tests/test_genz.py)."""
    a = np.array([6.285570175676215, 2.7144298243237848])
    u = np.array([0.9779393744774885, 0.16349613278395514])
    res = cubage.integrate(genz.integrand("oscillatory", a, u), cubage.Box([0] * 2, [1] * 2), rel_tol=1e-6)
    assert res.converged and res.trust["audits"] == 1 and res.trust["audit"] == "passed"
    assert res.trust["audit_checks"] == 1 and res.trust["audit_checks_failed"] == 0
    assert res.trust["audit_evaluations"] == 233 and res.evaluations == 225 + 4 + 233
    assert abs(res.value - genz.exact("oscillatory", a, u)) <= res.error


@pytest.mark.parametrize("tol", [5e-2, 1e-2, 1e-4])
def test_first_region_probes_mark_a_step_near_a_face_even_when_the_region_is_far_from_resolved(tol):
    """Issue 12 item 3 (a measured dead end, kept as a regression test): 1/(0.2 + y)^2 + 50 [x > 0.98] on [0,1]^3.
    The first region's rule estimate is 3.5 % of its value (far from resolved), and only its vertex probes see the
    step; their signature marks the whole lineage, whose resolved regions are then probed.  Dropping the first
    region's probe signature where the region is split anyway saved the smooth Genz families 18 % of their
    evaluations at 1e-4 (tuning seeds 7, 8, 9) but made this run claim convergence after 899 to 1,699 evaluations,
    2x to 1,500x beyond its goal (rel_tol 5e-2 to 1e-4).  Closed form: 1/0.2 - 1/1.2 + 50 x 0.02 (by hand)."""
    exact = (1 / 0.2 - 1 / 1.2) + 50 * 0.02
    f = lambda X: 1.0 / (0.2 + X[:, 1]) ** 2 + 50.0 * (X[:, 0] > 0.98)
    run = cubage.Run(f, cubage.Box([0] * 3, [1] * 3), rel_tol=tol, budget=200_000)
    run.step()
    first = run.result()
    assert first.error >= 1.0                       # the probes' floor covers the step's true error 50 * 0.02
    assert "values near a vertex disagree" in " ".join(first.trust["worst"][0]["signatures"])
    _honest(run.run(), exact, tol)


@pytest.mark.parametrize("corner", [(1, 1, 1), (0, 1, 1), (1, 0, 0)])
def test_jump_cut_off_a_domain_corner_beside_a_point_singularity_3d(corner):
    # 1/|x| + 0.01 (cut off the corner `corner` of [0, 1]^3 by the plane at L1 distance 0.13 from it), rel_tol 1e-6.
    # Exact: B_3(-1) = 3/2 log(2 + sqrt 3) - pi/4 (Bailey, Borwein & Crandall, "Box integrals", J. Comput. Appl.
    # Math. 206 (2007) 196-208) plus 0.01 times the corner simplex's volume 0.13^3 / 3! (volume of a simplex with
    # legs 0.13: common practice).  The regions holding the corner were never probed at their own scale and the
    # run converged 3.2x beyond its goal with the corner missed; at (1, 0, 0) a box's own check at the vertex let
    # the jump pass within the allowance of its scale (3.2x too) until smaller boxes holding the vertex were checked.
    c = np.asarray(corner, dtype=float)

    def f(X):
        dist = np.where(c == 1, 1.0 - X, X).sum(axis=1)
        return 1.0 / np.sqrt((X * X).sum(axis=1)) + 0.01 * (dist < 0.13)
    exact = 1.5 * math.log(2 + math.sqrt(3)) - math.pi / 4 + 0.01 * 0.13 ** 3 / 6
    res = cubage.integrate(f, cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6, raise_on_failure=False)
    _honest(res, exact, 1e-6)


def test_small_jump_in_a_domain_corner_beside_a_gaussian_3d():
    # exp(-|x|^2) + 0.001 (x + y + z > 2.8) on [0, 1]^3 at rel_tol 1e-6.  Exact: (sqrt(pi)/2 erf(1))^3 (Abramowitz &
    # Stegun 7.1.1) plus 0.001 times the corner simplex's volume 0.2^3 / 3! (common practice).  The corner check
    # deviated only in a box an eighth the size of the one holding (1, 1, 1), and a floor from that small box's volume
    # let the run converge 3.2x beyond its goal.
    exact = (math.sqrt(math.pi) / 2 * math.erf(1.0)) ** 3 + 0.001 * 0.2 ** 3 / 6
    res = cubage.integrate(lambda X: np.exp(-(X * X).sum(axis=1)) + 0.001 * (X.sum(axis=1) > 2.8),
                           cubage.Box([0] * 3, [1] * 3), rel_tol=1e-6, raise_on_failure=False)
    _honest(res, exact, 1e-6)


@pytest.mark.parametrize("tol", [1e-4, 1e-6])
@pytest.mark.parametrize("a, b", [(0.39879, 0.42833), (0.15593, 0.16221)])
def test_slab_the_lattice_saw_and_the_audit_split_missed_2d(a, b, tol):
    """Issue 12 "no silent wrong answer" (benchmarks/stress.py, seed 31: a slab 0.03 of the integral between the node
    lines of the first 2-D box and of its four audit children): the audit's lattice check failed, the split into four
    that followed measured nothing (the children's nodes missed the slab too) and the audit passed: converged after
    1,362 evaluations 291x (1e-4) and 29,100x (1e-6) beyond the goal.  What the lattice measured beyond the split is
    now carried by the lattice points in the slab down the lineage (Run._lattice_hidden, _carry_lattice_hits)
    until the splits measure it; the second slab was then found only where its points lay (converged 145x beyond
    the goal) until the audit checked again the largest boxes of a lattice box whose points were all gone with
    error left (Run._orphan_leaves).  exp(0.2 (x + y)) + h [a < x < b] on the unit square:
    ((e^0.2 - 1)/0.2)^2 + h (b - a) (elementary antiderivatives)."""
    base = (math.expm1(0.2) / 0.2) ** 2
    h = 0.03 * base / (b - a)
    f = lambda X: np.exp(0.2 * X.sum(axis=1)) + h * ((X[:, 0] > a) & (X[:, 0] < b))  # noqa: E731
    run = cubage.Run(f, cubage.Box([0, 0], [1, 1]), rel_tol=tol, budget=300_000)
    res = run.run()
    _honest(res, base + h * (b - a), tol)
    assert run.checks.get("lattice_hidden", 0) >= 1


@pytest.mark.parametrize("d, k, a, b, tol", [(2, 0, 0.78022, 0.78627, 1e-4), (2, 0, 0.78022, 0.78627, 1e-6),
                                            (3, 1, 0.97717, 0.98951, 1e-4), (3, 1, 0.97717, 0.98951, 1e-6)])
def test_slab_a_parent_saw_between_its_childrens_node_lines(d, k, a, b, tol):
    """Issue 12 "no silent wrong answer" (benchmarks/stress.py, seed 31): a box [0.75, 1] x ... had a node line at
    x0 = 0.7823 inside the slab, its children [0.75, 0.875] x ... node lines at 0.7759 and 0.7871, on either side
    of it.  The split check raised the children to the measured discrepancy, but the next split of a child (along
    the other axis) agreed with it, neither seeing the slab, and the floor was gone: converged 188x beyond the goal
    at 1e-6 (1.8x at 1e-4, reporting a quarter of its true error; since the 2-D audit's orphaned lattice error is
    checked along the axis lines of its points it is found there too, with three times the evaluations), the 3-D
    slab 281x (1e-6) and 3x (1e-4).  The children now carry the discrepancy (Run._blind_floors) and are bisected
    across the parent's split axis.
    exp(0.2 sum x) + h [a < x_k < b] on the unit cube: ((e^0.2 - 1)/0.2)^d (elementary antiderivatives, a product
    of 1-D integrals) plus the slab's integral, its width b - a times h times its cross-section's volume 1
    (elementary)."""
    base = (math.expm1(0.2) / 0.2) ** d
    h = 3e-4 * base / (b - a)
    f = lambda X: np.exp(0.2 * X.sum(axis=1)) + h * ((X[:, k] > a) & (X[:, k] < b))  # noqa: E731
    run = cubage.Run(f, cubage.Box([0] * d, [1] * d), rel_tol=tol, budget=300_000)
    res = run.run()
    _honest(res, base + h * (b - a), tol)
    assert run.checks.get("blind_splits", 0) >= 1


@pytest.mark.parametrize("share, tol", [(3e-4, 1e-4), (3e-3, 1e-6)])
def test_slab_on_a_first_box_node_line_outlives_three_bisections(share, tol):
    """Issue 12 "no silent wrong answer": a slab 0.39596 < x0 < 0.39626 on the unit square holds the first box's
    K15 node line x0 = 0.5 - 0.5 * 0.207784955 = 0.396108 (Kronrod 1965; QUADPACK, Piessens et al. 1983), which saw
    it; the children carried the discrepancy through three bisections across x0 ([0, 0.5], [0.25, 0.5],
    [0.375, 0.5]), whose node lines all straddle the slab, and dropped it: converged after 7,332 evaluations with
    the whole slab missing (3x the goal at share 3e-4 and 1e-4, 2,991x at share 3e-3 and 1e-6) and an estimate of
    1e-10 of the goal.  The floor now stays in the boxes holding one of the measuring box's node lines until a
    split sees the slab (Run._blind_floors).
    exp(0.2 (x0 + x1)) + h [a < x0 < b]: ((e^0.2 - 1)/0.2)^2 (elementary antiderivatives, a product of 1-D
    integrals) plus h (b - a) (elementary)."""
    a, b = 0.39596, 0.39626
    base = (math.expm1(0.2) / 0.2) ** 2
    h = share * base / (b - a)
    f = lambda X: np.exp(0.2 * X.sum(axis=1)) + h * ((X[:, 0] > a) & (X[:, 0] < b))  # noqa: E731
    run = cubage.Run(f, cubage.Box([0, 0], [1, 1]), rel_tol=tol, budget=300_000)
    res = run.run()
    _honest(res, base + h * (b - a), tol)
    assert run.checks.get("blind_splits", 0) >= 1


@pytest.mark.parametrize("d, c", [(4, 0.999), (5, 0.998)])
def test_narrow_corner_cube_read_as_a_singular_vertex_is_resolved(d, c):
    """Issue 12 "no silent wrong answer" (benchmarks/stress.py, seed 31, corner cubes in 5-D and 6-D):
    exp(0.2 sum x) + h [x_i > c for every i] on the unit cube, the cube worth 0.3 % of the integral.  Its value,
    ~1e11 times the base's, reads beyond PROBE_WILD at the vertex probe (1, ..., 1): it was taken for a point
    singularity and clipped, so the box at the vertex shrank until the bounded floor met the goal and the run
    converged at 1e-4 with the whole cube missing (true error 3.0e-3 of the value, reported 5-6e-5).  No power law
    climbs from the centre through the corner node to that probe (Run._singular_power): the value is kept, the
    floor is the feature's, and the run refines into the cube (4-D: converged after 42,051 evaluations, 1.3e-5
    true against 9.8e-5 reported; 5-D: its budget spent, 1.2e-5 true against 1.4e-4 reported).  Exact:
    ((e^0.2 - 1)/0.2)^d (elementary antiderivatives, a product of 1-D integrals) plus h times the cube's volume
    (1 - c)^d (elementary)."""
    base = (math.expm1(0.2) / 0.2) ** d
    h = 3e-3 * base / (1 - c) ** d
    f = lambda X: np.exp(0.2 * X.sum(axis=1)) + h * (X > c).all(axis=1)  # noqa: E731
    res = cubage.integrate(f, cubage.Box([0] * d, [1] * d), rel_tol=1e-4, budget=300_000, raise_on_failure=False)
    true = _honest(res, base + h * (1 - c) ** d, 1e-4)
    assert true <= res.error


@pytest.mark.parametrize("case, tol", [("slab", 1e-6), ("ridge", 1e-4), ("ridge", 1e-6)])
def test_feature_along_an_axis_is_checked_in_the_wide_boxes_beside_its_lineage(case, tol):
    """Issue 12 "no silent wrong answer" (benchmarks/stress.py, seed 31): exp(0.2 sum x) plus a feature along one
    axis, a slab 0.84987 < x1 < 0.89992 worth 3e-4 of the 4-D integral or a ridge exp(-((x0 - 0.59063)/0.024)^2)
    worth 3 % of the 3-D one.  The run refined across the feature in some boxes, down to its faces, while wide boxes
    beside them held it between their node lines along that axis (x1 in [0.5, 1]: lines at 0.84 and 0.92; x0 in
    [0, 1], an audit child split along x1: lines at 0.5 and 0.68) and converged with half the slab (true 1.5e-4
    against 9.7e-7 reported at 1e-6) or a quarter of the ridge (7.3e-3 against 2.1e-5 at 1e-4) missing.  The audit
    now splits such boxes across that axis (Run._straddlers).  Exact: ((e^0.2 - 1)/0.2)^d (elementary
    antiderivatives, a product of 1-D integrals) plus the slab's h (b - a) (elementary) or the ridge's
    h w sqrt(pi)/2 (erf((1 - c)/w) + erf(c/w)) (definition of erf, Abramowitz & Stegun 7.1.1)."""
    base = (math.expm1(0.2) / 0.2) ** (4 if case == "slab" else 3)
    if case == "slab":
        d, a, b = 4, 0.84987, 0.89992
        h = 3e-4 * base / (b - a)
        f = lambda X: np.exp(0.2 * X.sum(axis=1)) + h * ((X[:, 1] > a) & (X[:, 1] < b))  # noqa: E731
        exact = base + h * (b - a)
    else:
        d, c, w = 3, 0.59063, 0.024
        unit = w * math.sqrt(math.pi) / 2 * (math.erf((1 - c) / w) + math.erf(c / w))
        h = 0.03 * base / unit
        f = lambda X: np.exp(0.2 * X.sum(axis=1)) + h * np.exp(-((X[:, 0] - c) / w) ** 2)  # noqa: E731
        exact = base + h * unit
    res = cubage.integrate(f, cubage.Box([0] * d, [1] * d), rel_tol=tol, budget=300_000, raise_on_failure=False)
    true = abs(res.value - exact)
    # converged: within its goal (the slab's run reports 0.97 of its true error, 9.2e-7 of the value, goal 1e-6)
    assert not res.converged or true <= tol * abs(exact), (res.status, true, res.error)
    if case == "ridge":
        _honest(res, exact, tol)


def test_fibonacci_lattice_of_the_2d_audit_check_has_distinct_lines():
    """The 2-D audit check's lattice (Run._audit_check): a rank-1 lattice with N = 233 points and generator 144
    (Fibonacci numbers; Korobov 1959, Sloan & Joe 1994) has N distinct coordinates on each axis, since the generator
    is prime to N, and N distinct values of x + y and x - y, since 1 + 144 and 1 - 144 are prime to the prime 233
    (elementary number theory): a slab between the rule's node lines, along an axis or a diagonal, is crossed."""
    from cubage.engine.run import AUDIT_LATTICE, _fibonacci_lattice
    pts = _fibonacci_lattice(AUDIT_LATTICE)
    assert pts.shape == (233, 2) and np.all(np.abs(pts) < 1)
    for v in (pts[:, 0], pts[:, 1], pts[:, 0] + pts[:, 1], pts[:, 0] - pts[:, 1]):
        assert len(np.unique(np.round(v * 233 / 2, 6))) == 233
    # equal weights integrate the constant and, as any lattice rule, trigonometric polynomials e^(2 pi i k.x) with
    # k off the dual lattice exactly (Sloan & Joe 1994): here cos(pi (x + 1)) on [-1, 1] (mean 0)
    assert abs(np.cos(np.pi * (pts[:, 0] + 1)).mean()) < 1e-13


def test_2d_lattice_check_passes_a_cone_at_a_vertex_of_the_box():
    """Regression: the box integral B_2(1) = int_[0,1]^2 sqrt(x^2 + y^2) = (sqrt 2 + asinh 1)/3 (Bailey, Borwein &
    Crandall, "Box integrals", J. Comput. Appl. Math. 206 (2007) 196-208) at rel_tol 1e-6.  The lattice of the
    audit's check had a point 1/466 of the box's side from the vertex holding the cone on both axes, where the
    box's interpolant misses the cone most; that one point read 5.1e-7 of missed error in [0, 1/2]^2 whose rule
    was 1.7e-9 off the closed form (scipy.integrate.dblquad), the check failed and the run refined 4.7x
    further.  No lattice point lies that near a vertex now, and the check passes on the first audit."""
    from cubage.engine.run import AUDIT_LATTICE, _fibonacci_lattice
    p = (_fibonacci_lattice(AUDIT_LATTICE) + 1) / 2
    near = np.maximum(np.minimum(p[:, 0], 1 - p[:, 0]), np.minimum(p[:, 1], 1 - p[:, 1]))
    assert near.min() > 0.04
    exact = (math.sqrt(2.0) + math.asinh(1.0)) / 3
    run = cubage.Run(lambda X: np.sqrt((X * X).sum(axis=1)), cubage.Box([0, 0], [1, 1]), rel_tol=1e-6,
                     budget=300_000)
    res = run.run()
    assert res.converged
    _honest(res, exact, 1e-6)
    assert run.checks.get("audit_check_failed", 0) == 0


def test_lattice_basis_interpolates_polynomials_of_the_rule_exactly():
    """The check's interpolant P (tensor Lagrange interpolation on the 15 Kronrod abscissae, barycentric form of
    Berrut & Trefethen 2004) reproduces any polynomial of degree <= 14 per axis (uniqueness of polynomial
    interpolation, common practice): then f - P vanishes at every lattice point and the check reads 0."""
    from cubage.engine.rules.gauss_kronrod import kronrod15
    from cubage.engine.run import AUDIT_LATTICE, _fibonacci_lattice, _lattice_basis
    x, _, _ = kronrod15()
    lx, ly = _lattice_basis(AUDIT_LATTICE, tuple(float(v) for v in x))

    def poly(u, v):
        return 1 + 3 * u ** 14 * v ** 3 - 2 * u ** 5 * v ** 13 + v ** 14 - 0.5 * u * v

    F = poly(x[:, None], x[None, :])                       # node values on the 15 x 15 grid, axis 0 slowest
    pts = _fibonacci_lattice(AUDIT_LATTICE)
    P = np.einsum("ni,ij,nj->n", lx, F, ly)
    assert np.allclose(P, poly(pts[:, 0], pts[:, 1]), rtol=0, atol=1e-12)


def test_2d_lattice_check_sees_a_slab_between_the_nodes():
    """Regression (benchmarks/stress.py): 2-D, exp(0.2 (x + y)) + 0.05 on 0.64 < x < 0.66, inside the gap between
    the Kronrod abscissae 0.6039 and 0.7029 of the first region, at rel_tol 1e-4: the first region's nodes and
    probes all miss the slab; the audit's lattice check sees it (and the run does not claim convergence with the
    slab missing).  Closed form ((e^0.2 - 1)/0.2)^2 + 0.05 * 0.02 (elementary antiderivatives)."""
    exact = (math.expm1(0.2) / 0.2) ** 2 + 0.05 * 0.02
    res = cubage.integrate(lambda X: np.exp(0.2 * X.sum(axis=1)) + 0.05 * ((X[:, 0] > 0.64) & (X[:, 0] < 0.66)),
                           cubage.Box([0, 0], [1, 1]), rel_tol=1e-4, raise_on_failure=False)
    assert res.trust["audit_checks_failed"] >= 1
    assert res.status != "converged" or abs(res.value - exact) <= 2e-4 * exact


def test_2d_lattice_check_counts_its_estimate_twice_near_a_face():
    """Regression (benchmarks/stress.py, 2-D bump draw 4): exp(0.2 (x + y)) + h exp(-|x - c|^2 / w^2) with
    c = (0.25005, 0.01276), w = 0.02856 beside the face y = 0 at rel_tol 1e-6.  The lattice check read the missed
    error of its box as 1.0e-6 against a true 2.6e-6 (the bump covers about one lattice point) and, with its
    estimate counted once, let the run converge 2.1 times beyond its goal; counted twice it fails and the full audit
    follows.  Closed form: ((e^0.2 - 1)/0.2)^2 + h prod_i w sqrt(pi)/2 (erf((1 - c_i)/w) + erf(c_i/w))
    (Abramowitz & Stegun 7.1.1)."""
    from scipy.special import erf
    c = np.array([0.25005474, 0.01276139])
    w, h = 0.028563323200390612, 0.001948197534594091
    exact = (math.expm1(0.2) / 0.2) ** 2 + h * np.prod(
        [w * math.sqrt(math.pi) / 2 * (erf((1 - ci) / w) + erf(ci / w)) for ci in c])
    res = cubage.integrate(lambda X: np.exp(0.2 * X.sum(axis=1)) + h * np.exp(-(((X - c) / w) ** 2).sum(axis=1)),
                           cubage.Box([0, 0], [1, 1]), rel_tol=1e-6, raise_on_failure=False)
    assert res.status != "converged" or abs(res.value - exact) <= 2e-6 * exact


_GAUSS_1D = math.sqrt(math.pi) / 2 * math.erf(1.0)    # int_0^1 exp(-t^2) dt (Abramowitz & Stegun 7.1.1)


@pytest.mark.parametrize("vertex", list(itertools.product((0, 1), repeat=3)))
def test_jump_cut_off_any_domain_corner_of_a_one_region_run_3d(vertex):
    # exp(-|x|^2) + 0.1 (|x - v|_1 < 0.2) on [0, 1]^3 at rel_tol 1e-4, v any vertex of the cube.  Exact:
    # (sqrt(pi)/2 erf(1))^3 (Abramowitz & Stegun 7.1.1) plus 0.1 times the corner simplex's volume 0.2^3 / 3!
    # (common practice).  The one region's vertex probes let the jump pass within the allowance of its scale, and
    # the domain-corner check skipped the region because it was probed (and would have looked at one vertex only,
    # the first); the audit's split then made the boxes holding the vertices right after the check: converged
    # 3.2x beyond its goal at (1, 1, 1) and at four other vertices.
    v = np.asarray(vertex, dtype=float)
    exact = _GAUSS_1D ** 3 + 0.1 * 0.2 ** 3 / 6
    res = cubage.integrate(lambda X: np.exp(-(X * X).sum(axis=1)) + 0.1 * (np.abs(X - v).sum(axis=1) < 0.2),
                           cubage.Box([0] * 3, [1] * 3), rel_tol=1e-4, budget=2_000_000, raise_on_failure=False)
    assert res.converged                    # it converges, honestly
    _honest(res, exact, 1e-4)


def test_small_jump_at_a_domain_vertex_of_a_probed_box_4d():
    # exp(-|x|^2) + 0.01 (|x - (0, 1, 0, 1)|_1 < 0.3) on [0, 1]^4 at rel_tol 1e-6.  Exact: (sqrt(pi)/2 erf(1))^4
    # (Abramowitz & Stegun 7.1.1) plus 0.01 times the corner simplex's volume 0.3^4 / 4! (common practice).  The box
    # holding the vertex had been probed below a signature (its probes agreed within the allowance of its scale),
    # so the domain-corner check skipped it; the audit split it right after the check: converged 10.8x beyond its
    # goal.
    c = np.array([0.0, 1.0, 0.0, 1.0])
    exact = _GAUSS_1D ** 4 + 0.01 * 0.3 ** 4 / 24
    res = cubage.integrate(lambda X: np.exp(-(X * X).sum(axis=1)) + 0.01 * (np.abs(X - c).sum(axis=1) < 0.3),
                           cubage.Box([0] * 4, [1] * 4), rel_tol=1e-6, budget=2_000_000, raise_on_failure=False)
    assert res.converged
    _honest(res, exact, 1e-6)


def test_one_percent_kink_in_the_region_holding_most_value_and_error_5d():
    # exp(0.3 sum x) (1 + 0.00996 |x3 - 0.3955|) on [0, 1]^5.  Exact: the product formula E^4 (E + c K) with
    # E = (e^0.3 - 1)/0.3 and K = int_0^1 e^(0.3 t) |t - s| dt, by parts on each side of s (checked here against
    # mpmath's quadrature).  The audit split its largest-error region, which was also the one holding the most
    # value, along the widest axis other than the rule's (the kink's): parallel to the kink its children agreed
    # with it, and the run converged 12x beyond its goal at 1e-6 after 2,272 evaluations.  (At 1e-4 the one-region
    # run still converges within its goal but reports 1/25 of its true error: a one-region audit keeps the widest
    # other axis, see Run._audit.)
    import mpmath
    b, c, s = 0.3, 0.00996, 0.3955
    E = math.expm1(b) / b
    K = math.exp(b) * ((1 - s) / b - 1 / b ** 2) + 2 * math.exp(b * s) / b ** 2 - s / b - 1 / b ** 2
    assert K == pytest.approx(float(mpmath.quad(lambda t: mpmath.exp(b * t) * abs(t - s), [0, s, 1])), rel=1e-12)
    exact = E ** 4 * (E + c * K)
    res = cubage.integrate(lambda X: np.exp(b * X.sum(axis=1)) * (1 + c * np.abs(X[:, 3] - s)),
                           cubage.Box([0] * 5, [1] * 5), rel_tol=1e-6, budget=2_000_000, raise_on_failure=False)
    assert res.converged
    _honest(res, exact, 1e-6)


def test_2d_lattice_check_reports_the_slab_it_measured():
    """Regression (benchmarks/stress.py, 2-D slab draw): exp(0.2 (x + y)) + h on 0.63 < y < 0.67, between the
    first region's nodes, holding 3e-5 of the integral, at rel_tol 1e-4.  The missed slab fits the goal, so the
    audit's lattice check passes after one region (225 + 4 + 233 evaluations); the run reported 1.4e-14 against a
    true 3.0e-5 until the check's measure became the box's estimate, as a split audit's corrected estimates do.
    Closed form ((e^0.2 - 1)/0.2)^2 + 0.04 h (elementary antiderivatives)."""
    base = (math.expm1(0.2) / 0.2) ** 2
    h = 3e-5 * base / 0.04
    exact = base + 0.04 * h
    res = cubage.integrate(lambda X: np.exp(0.2 * X.sum(axis=1)) + h * ((X[:, 1] > 0.63) & (X[:, 1] < 0.67)),
                           cubage.Box([0, 0], [1, 1]), rel_tol=1e-4)
    assert res.converged and res.trust["audit_checks"] == 1 and res.trust["audit_checks_failed"] == 0
    assert abs(res.value - exact) <= res.error <= 1e-4 * exact


def _corner_peak_exact(d: int, c: float) -> float:
    """int over [0, 1]^d of (1 + c sum x)^-(d+1): d repeated integrations give the alternating sum over the cube's
    vertices v of (-1)^|v| / (1 + c |v|), over d! c^d (Genz 1984, "Testing multidimensional integration routines",
    the corner peak family; for d = 1, 1/c (1 - 1/(1 + c)) by hand)."""
    s = sum((-1) ** sum(v) / (1 + c * sum(v)) for v in itertools.product((0, 1), repeat=d))
    return s / (math.factorial(d) * c ** d)


@pytest.mark.parametrize("r, amp", [(0.2, 0.001), (0.1, 0.003)])
def test_jump_at_a_domain_vertex_is_not_read_away_by_two_levels_of_corner_checks_3d(r, amp):
    # (1 + 0.3 (x + y + z))^-4 + amp (|x - (1, 1, 1)|_1 < r) on [0, 1]^3 at rel_tol 1e-6.  Exact: Genz's corner
    # peak (_corner_peak_exact) plus amp times the corner simplex's volume r^3 / 3! (common practice).  From the
    # second level on, Run._domain_corners reads a check with the one above it (CORNER_DECAY): the jump adds the
    # same amount to both levels' deviations, so the bound they give is at least the jump.  A reading that took the
    # change between the levels for the jump-free residual (bound |e_L - e_(L-1)|) excused the jump at both
    # levels and converged 5.5x (r = 0.2) and 2.2x (r = 0.1) beyond the goal.
    d, v = 3, np.ones(3)
    exact = _corner_peak_exact(d, 0.3) + amp * r ** d / 6
    res = cubage.integrate(lambda X: (1 + 0.3 * X.sum(axis=1)) ** -(d + 1) + amp * (np.abs(X - v).sum(axis=1) < r),
                           cubage.Box([0] * d, [1] * d), rel_tol=1e-6, budget=2_000_000, raise_on_failure=False)
    _honest(res, exact, 1e-6)


def test_corner_peak_closed_form_against_scipy():
    # the closed form above against scipy's adaptive quadrature (scipy.integrate.tplquad) in 3-D
    from scipy.integrate import tplquad
    ref, _ = tplquad(lambda z, y, x: (1 + 0.3 * (x + y + z)) ** -4, 0, 1, 0, 1, 0, 1, epsabs=1e-13, epsrel=1e-12)
    assert _corner_peak_exact(3, 0.3) == pytest.approx(ref, rel=1e-9)


def test_jump_at_a_domain_vertex_that_fills_the_smaller_boxes_is_seen_3d():
    # (1 + 0.3 (x + y + z))^-4 + 0.003 (x + y + z < 0.2) on [0, 1]^3 at rel_tol 1e-6.  Exact: Genz's corner peak
    # (_corner_peak_exact) plus 0.003 times the corner simplex's volume 0.2^3 / 3! (common practice).  The checks of
    # the boxes holding (0, 0, 0) let the jump pass at every level: at the larger boxes within the allowance the
    # jump's own values at their nodes inflated, at the smaller ones (wholly inside the jump) nothing deviated; the
    # run converged 16x beyond its goal after 527 evaluations (0.01: 53x).  Read level by level, the deviation from
    # the corner peak's power model did not shrink from one level to the next, as a smooth residual does
    # (CORNER_STEADY).
    d = 3
    exact = _corner_peak_exact(d, 0.3) + 0.003 * 0.2 ** d / 6
    res = cubage.integrate(lambda X: (1 + 0.3 * X.sum(axis=1)) ** -(d + 1) + 0.003 * (X.sum(axis=1) < 0.2),
                           cubage.Box([0] * d, [1] * d), rel_tol=1e-6, budget=2_000_000, raise_on_failure=False)
    _honest(res, exact, 1e-6)


def test_jump_near_a_face_beside_three_waves_is_not_hidden_by_the_remainder_bound():
    """Issue 12 (smooth cost, vertex probes): three plane waves plus a jump of 0.219 across x2 = 0.9789 on
    [0, 1]^5 (development seed 9 of the two-wave study, rounded).  The waves' fourth-order term along the
    diagonals (:func:`cubage.engine.estimate.diagonal_remainder`) widens the first region's vertex checks by
    about the waves' magnitude, and the jump, 2 % from the face, hid under it: with the bound clearing the
    region outright the run converged at 1e-4 with a true error 33x its goal.  A region the bound clears is
    still watched, so its children are probed with the short mid-probe checks, which take no such allowance.
    Exact: int_0^1 e^{i a x} dx = (e^{ia} - 1)/(ia) per axis (by hand), times e^{iu}, real part; the jump adds
    0.219 (1 - 0.9789)."""
    amps = [1.0, 0.6, 0.4]
    ws = [np.array(w) for w in ([-0.9212, 2.0774, -1.5508, -1.3140, 2.6118],
                                [-2.4336, -1.8380, -1.0344, 1.3453, 2.2592],
                                [1.5169, 0.8888, 1.1881, -2.4618, 1.4441])]
    us = [0.5305, 0.6755, 2.7779]
    hj, s = 0.219, 0.9789
    f = lambda X: sum(A * np.cos(X @ w + u) for A, w, u in zip(amps, ws, us)) + hj * (X[..., 2] > s)
    exact = sum(A * (np.exp(1j * u) * np.prod((np.exp(1j * w) - 1) / (1j * w))).real
                for A, w, u in zip(amps, ws, us)) + hj * (1 - s)
    r = cubage.integrate(f, cubage.Box([0] * 5, [1] * 5), rel_tol=1e-4, budget=1_000_000, raise_on_failure=False)
    assert r.status != "converged" or abs(r.value - exact) <= 2e-4 * abs(exact)


def _exp_kink_exact(d, b, c, s):
    """int_[0,1]^d exp(b sum x) (1 + c |x_k - s|) dx = E^(d-1) (E + c K), E = (e^b - 1)/b and
    K = int_0^1 e^(b t) |t - s| dt by parts on each side of s (checked against mpmath's quadrature)."""
    import mpmath
    E = math.expm1(b) / b
    K = math.exp(b) * ((1 - s) / b - 1 / b ** 2) + 2 * math.exp(b * s) / b ** 2 - s / b - 1 / b ** 2
    assert K == pytest.approx(float(mpmath.quad(lambda t: mpmath.exp(b * t) * abs(t - s), [0, s, 1])), rel=1e-12)
    return E ** (d - 1) * (E + c * K)


@pytest.mark.parametrize("k, s, c, b", [(1, 0.3891, 0.00368, 0.3), (3, 0.0661, 0.0062, 1.0)])
def test_small_kink_beside_a_smooth_exponential_factor_5d(k, s, c, b):
    """Issue 12 (benchmarks/silent_cases.py, kink family, seed 31): exp(b sum x) (1 + c |x_k - s|) on [0, 1]^5 at
    1e-6.  The smooth factor's low-degree error fills |q5 - q3|, and the ratio opinion scaled the kink's
    |q7 - q5| down by that factor's convergence: a one-region run (0.37 % kink) converged 9.6x beyond its goal
    after 325 evaluations, a kink 0.066 from a face 2.2x after 6,825.  In log f the exponential is integrated
    exactly by every member of the rule (Genz & Malik 1980), so the rules' differences there are the kink's."""
    exact = _exp_kink_exact(5, b, c, s)
    res = cubage.integrate(lambda X: np.exp(b * X.sum(axis=1)) * (1 + c * np.abs(X[:, k] - s)),
                           cubage.Box([0] * 5, [1] * 5), rel_tol=1e-6, budget=2_000_000, raise_on_failure=False)
    assert res.converged
    _honest(res, exact, 1e-6)


def test_log_rule_opinion_reads_a_kink_beside_an_exponential_and_nothing_on_smooth_factors():
    """Issue 12: the one region of [0, 1]^5 under exp(0.3 sum x) (1 + 0.00368 |x1 - 0.3891|): its rule estimate
    must cover the rule's true error (closed form of _exp_kink_exact); on exp(0.3 sum x) and a Gaussian, whose
    logarithms every member of the rule integrates exactly (polynomials of degree <= 2; Genz & Malik 1980), the
    opinion of log f adds nothing to the rule's own estimate."""
    box = cubage.Box([0] * 5, [1] * 5)

    def first(f):
        run = cubage.Run(f, box)
        g = run.geometry.root()
        q, absq, fr = run._evaluate(g)
        return q[0, 0, 0], run._errors(q, absq)[0, 0], run._rule_errors(g, q, absq, fr)[0, 0]

    b, c, s = 0.3, 0.00368, 0.3891
    q7, own, est = first(lambda X: np.exp(b * X.sum(axis=1)) * (1 + c * np.abs(X[:, 1] - s)))
    true = abs(q7 - _exp_kink_exact(5, b, c, s))
    assert own < true / 5                       # the ratio opinion alone: 2.0e-6 against 2.1e-5
    assert est >= true / 2
    for smooth in (lambda X: np.exp(b * X.sum(axis=1)), lambda X: np.exp(-((X - 0.3) ** 2).sum(axis=1))):
        _, own, est = first(smooth)
        assert est == own


@pytest.mark.parametrize("vertex, r, smooth", [((0, 1, 0), 0.258, "exp"), ((0, 1, 1), 0.174, "gauss")])
def test_jump_reaching_past_the_smallest_checked_box_keeps_its_floor_through_the_audit_3d(vertex, r, smooth):
    """Issue 12 (benchmarks/silent_cases.py, corner-jump family, seed 31): g + 0.0039 (|x - v|_1 < r) on [0, 1]^3
    at 1e-4, g = exp(0.3 sum x) or exp(-|x|^2).  Exact: prod int_0^1 g_i ((e^0.3 - 1)/0.3, elementary;
    sqrt(pi)/2 erf(1), Abramowitz & Stegun 7.1.1) plus 0.0039 r^3 / 3! (the corner simplex's volume: common
    practice).  A domain-corner check found the jump and raised its box's floor, within the goal; the audit then
    split that box, whose children's nodes and probes missed the jump as the parent's had, and the run converged
    reporting 3e-6 / 0.18 of its true error."""
    v = np.asarray(vertex, dtype=float)
    if smooth == "exp":
        g, base = (lambda X: np.exp(0.3 * X.sum(axis=1))), (math.expm1(0.3) / 0.3) ** 3
    else:
        g, base = (lambda X: np.exp(-(X * X).sum(axis=1))), _GAUSS_1D ** 3
    exact = base + 0.0039 * r ** 3 / 6
    res = cubage.integrate(lambda X: g(X) + 0.0039 * (np.abs(X - v).sum(axis=1) < r), cubage.Box([0] * 3, [1] * 3),
                           rel_tol=1e-4, budget=2_000_000, raise_on_failure=False)
    assert res.converged
    _honest(res, exact, 1e-4)


@pytest.mark.parametrize("tol", [1e-4, 1e-6, 1e-8])
def test_singular_face_on_the_unit_square_converges_with_an_honest_estimate(tol):
    """Issue 12: x^(-1/2) e^y on [0, 1]^2.  Exact: int_0^1 x^(-1/2) dx (e - 1) = 2 (e - 1) (elementary).  The
    vertex probes along x = 0 read the singularity's value, and the boxes there kept a floor of 300-400 times
    their whole integral at every depth: at 1e-6 the box along the face could no longer be split in floating
    point (width 2^-48) and the run spent its 2e6 budget reporting 7.9e-5 against a true 4.7e-9.  A probe that
    climbs like the inner nodes' power law now costs that power law's mass beyond the outermost node."""
    exact = 2 * (math.e - 1)
    res = cubage.integrate(lambda X: X[:, 0] ** -0.5 * np.exp(X[:, 1]), cubage.Box([0, 0], [1, 1]), rel_tol=tol,
                           budget=2_000_000, raise_on_failure=False)
    assert res.converged
    _honest(res, exact, tol)


@pytest.mark.parametrize("vertex, r, amp", [((0, 0, 0, 1), 0.266, 0.11), ((0, 0, 1, 0), 0.320, 0.027)])
def test_audit_children_of_a_box_whose_probes_deviated_keep_its_error_4d(vertex, r, amp):
    """Issue 12 (benchmarks/silent_cases.py, corner-jump family, seed 31): exp(-|x|^2) + amp (|x - v|_1 < r) on
    [0, 1]^4 at 1e-4.  Exact: (sqrt(pi)/2 erf(1))^4 (Abramowitz & Stegun 7.1.1) plus amp r^4 / 4! (the corner
    simplex's volume: common practice).  The half-box holding v had its vertex probes deviate, a floor within the
    goal (skipped by the domain-corner check: flagged boxes are refined anyway); the audit split it instead, its
    children's probes at the same scale agreed, and the run converged reporting 0.22 / 0.44 of its true error."""
    v = np.asarray(vertex, dtype=float)
    exact = _GAUSS_1D ** 4 + amp * r ** 4 / 24
    res = cubage.integrate(lambda X: np.exp(-(X * X).sum(axis=1)) + amp * (np.abs(X - v).sum(axis=1) < r),
                           cubage.Box([0] * 4, [1] * 4), rel_tol=1e-4, budget=2_000_000, raise_on_failure=False)
    assert res.converged
    _honest(res, exact, 1e-4)


def test_bump_between_the_nodes_beside_a_separable_factor_4d():
    """Issue 12 (benchmarks/stress.py, seed 31, bump index 8): exp(0.2 sum x) + h exp(-|x - c|^2 / w^2) on
    [0, 1]^4, the bump of width 0.14 between the first region's nodes and worth 3e-6 of the integral, at rel_tol
    1e-6.  Exact: ((e^0.2 - 1) / 0.2)^4 (elementary) plus h times a product of 1-D Gaussian integrals
    w sqrt(pi)/2 (erf((1 - c_i)/w) + erf(c_i/w)) (Abramowitz & Stegun 7.1.1).  The separable model of log|f|
    explained every vertex and domain-corner check of the first region (exp(0.2 sum x) is exactly separable)
    although a corner node read the bump at 28 times the goal per unit volume: the run converged after 230
    evaluations 2.4x beyond its goal.  A model must now predict the corner nodes it was not read from."""
    from scipy.special import erf
    c, w, d = np.array([0.8863, 0.2191, 0.0125, 0.6097]), 0.14, 4
    base = (math.expm1(0.2) / 0.2) ** d
    unit = math.prod(w * math.sqrt(math.pi) / 2 * (erf((1 - ci) / w) + erf(ci / w)) for ci in c)
    h = 3e-6 * base / unit
    res = cubage.integrate(lambda X: np.exp(0.2 * X.sum(axis=1)) + h * np.exp(-(((X - c) / w) ** 2).sum(axis=1)),
                           cubage.Box([0.0] * d, [1.0] * d), rel_tol=1e-6, budget=300_000, raise_on_failure=False)
    _honest(res, base + h * unit, 1e-6)



@pytest.mark.parametrize("d, k, s, c, tol", [(5, 0, 0.10047541582242941, 0.004994587090607687, 1e-6),
                                             (5, 1, 0.3891293146296639, 0.003681730130333562, 1e-4),
                                             (6, 1, 0.07487725739897813, 0.004395471784288223, 1e-6)])
def test_log_opinion_on_a_kink_beside_an_exponential_holds(d, k, s, c, tol):
    """Issue 12 (benchmarks/silent_cases.py, seed 31, kink draws 5, 0 and 2): exp(0.3 sum x) (1 + c |x_k - s|) on
    [0, 1]^d.  Exact: E^(d-1) (E + c K) with E = (e^0.3 - 1)/0.3 and K = int_0^1 e^(0.3 t) |t - s| dt, by parts
    on each side of s (checked against mpmath's quadrature).  All three converged within their goals with estimates
    below their true errors (0.54 / 0.75, 0.064 / 0.096 and 0.014 / 0.17 of the goal): the rules' opinion on
    log|f| was capped at f's |q7 - q5|, in which the exponential's difference cancelled part of the kink's, or
    silent in a child of a non-smooth region whose log|f| ratio fell below LOG_RATIO_LIMIT by the kink's position
    (0.099 and 0.084)."""
    import mpmath
    b = 0.3
    E = math.expm1(b) / b
    K = math.exp(b) * ((1 - s) / b - 1 / b ** 2) + 2 * math.exp(b * s) / b ** 2 - s / b - 1 / b ** 2
    assert K == pytest.approx(float(mpmath.quad(lambda t: mpmath.exp(b * t) * abs(t - s), [0, s, 1])), rel=1e-12)
    exact = E ** (d - 1) * (E + c * K)
    res = cubage.integrate(lambda X: np.exp(b * X.sum(axis=1)) * (1 + c * np.abs(X[:, k] - s)),
                           cubage.Box([0] * d, [1] * d), rel_tol=tol, budget=2_000_000, raise_on_failure=False)
    assert res.converged
    _honest(res, exact, tol)


@pytest.mark.parametrize("tol", [1e-4, 1e-6])
def test_slab_beside_the_boxes_that_found_it_is_checked_along_its_axis_2d(tol):
    """Issue 12 (benchmarks/stress.py, seed 31, 2-D slab index 1): exp(0.2 (x + y)) + h on 0.78022 < x < 0.78627,
    worth 3e-4 of the integral.  Exact: ((e^0.2 - 1) / 0.2)^2 + h (b - a) (elementary).  The first region's
    lattice check read the slab at one point; the boxes around it were refined, and the lattice check's hidden
    error went to the largest boxes of the domain, beside the slab, while five boxes of [0.75, 0.875] x [0.375, 1]
    held it between their nodes: converged 188x beyond its goal at 1e-6 (1.8x, reporting 0.49 of its goal, at
    1e-4).  The boxes checked again now meet the axis lines through the points that carried that error."""
    a, b = 0.78022, 0.78627
    base = (math.expm1(0.2) / 0.2) ** 2
    h = 3e-4 * base / (b - a)
    res = cubage.integrate(lambda X: np.exp(0.2 * X.sum(axis=1)) + h * ((X[:, 0] > a) & (X[:, 0] < b)),
                           cubage.Box([0.0, 0.0], [1.0, 1.0]), rel_tol=tol, budget=2_000_000, raise_on_failure=False)
    assert res.converged
    _honest(res, base + h * (b - a), tol)


def test_a_smooth_run_is_not_held_back_by_the_value_trend():
    """Issue 12 (smooth cost): the convergence trend stands in for split checks that understate the error next to
    singularities and kinks; a run whose every split agreed with its parent, with no signature anywhere, is not
    held back by it.  A 6-D product peak at 1e-4 was held back four steps on a trend floor 1.12x its goal while its
    own estimate fell to 0.013x of it: 17,589 -> 33,993 evaluations.  Closed form: prod a_i (atan(a_i (1 - u_i)) +
    atan(a_i u_i)) (Genz 1984)."""
    a = np.array([0.28929968792802274, 1.2440574849412205, 3.435790955658348, 0.06993509115041295,
                  2.0166313201977033, 0.19428546012429254])
    u = np.array([0.12778644500379444, 0.5400042203801159, 0.2618122806900478, 0.5335378581452132,
                  0.7078140871766518, 0.04298908102329524])
    exact = float(np.prod(a * (np.arctan(a * (1.0 - u)) + np.arctan(a * u))))
    assert exact == pytest.approx(genz.exact("product-peak", a, u), rel=1e-14)
    run = cubage.Run(genz.integrand("product-peak", a, u), cubage.Box([0] * 6, [1] * 6), rel_tol=1e-4,
                     budget=2_000_000)
    res = run.run()
    assert res.converged and res.trust["smooth"]
    _honest(res, exact, 1e-4)
    assert run.checks.get("trend_held_back", 0) == 0


def test_audit_near_boxes_finds_every_box_that_meets_an_interval():
    """The audit's prefilter (engine.audit._Near) returns a superset of the boxes that meet an interval along an
    axis, compared with the definition written out here (two intervals ``[c - h, c + h]`` and ``[lo, hi]`` meet
    when each starts before the other ends, common practice), on the boxes of random bisections of [0, 1]: the
    audit tests its candidates exactly, so a superset keeps its result."""
    from cubage.engine.audit import _Near
    rng = np.random.default_rng(5)
    for trial in range(40):
        boxes = [(0.5, 0.5)]
        for _ in range(int(rng.integers(1, 300))):
            c, h = boxes.pop(int(rng.integers(len(boxes))))
            boxes += [(c - h / 2, h / 2), (c + h / 2, h / 2)]
        centre, halfw = np.array(boxes).T
        near = _Near(centre, halfw, 1e-9)
        for _ in range(20):
            lo = float(rng.random())
            hi = lo + float(rng.random()) * 0.1 * (trial % 3)
            want = np.nonzero((centre - halfw <= hi) & (centre + halfw >= lo))[0]
            got = near.within(lo, hi)
            if got is None:                 # more half-widths than it groups: the caller tests every box
                continue
            assert np.all(np.diff(got) > 0) and set(want) <= set(got), (trial, lo, hi)
