"""Warm starts of scans (issue 14 item 3): what a warm start carries over from the run it starts from.

Expected integrals come from closed forms named beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import cubage
from cubage.engine.run import FLAG_DISAGREED, FLAG_WARY
from cubage.session.scan import FALLING, REFINE_AHEAD, _refine_ahead, _seed, coarsen

CUBE = cubage.Box([0.0, 0.0, 0.0], [1.0, 1.0, 1.0])


def _cloud(X, a):
    return np.exp(-a * ((X - 0.3) ** 2).sum(axis=1))


def _cloud_exact(a: float) -> float:
    """Product of three 1-D Gaussian integrals over [0, 1] with erf (A&S 7.1.1)."""
    return (math.sqrt(math.pi / a) / 2 * (math.erf(math.sqrt(a) * 0.7) + math.erf(math.sqrt(a) * 0.3))) ** 3


def _finished(a: float) -> cubage.Run:
    run = cubage.Run(lambda X: _cloud(X, a), CUBE, rel_tol=1e-8)
    run.run()
    assert run.status == "converged"
    return run


def test_partition_carries_flags_and_the_wary_counters():
    """issue 14 item 3: ``Run.partition()`` hands on the regions' signature flags and the learnt
    wary-class counters, and a warm start takes the counters over."""
    run = _finished(3.0)
    part = run.partition()
    assert part["flags"].shape == part["depth"].shape == (run.store.n,)
    assert np.array_equal(part["flags"], run.store["flags"])
    part["wary"] = np.array([20.0, 6.0, 2.0])           # as if 20 wary splits had fallen short 3x
    warm = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=part)
    warm.step()
    assert warm.checks["wary_splits"] == 20 and warm._wary_factor() == 3.0


def test_warm_start_probes_regions_next_to_a_signature_only():
    """issue 14 item 3: a warm start probes the vertices of the start regions that carried a non-smooth
    signature (and puts them in the wary class) and of the regions touching them (a moving feature moves
    into them); regions far from any signature are not probed again, as a cold run does not probe the
    children of smooth regions.  The value still meets its goal against the closed form (erf, A&S 7.1.1)."""
    part = _finished(3.0).partition()
    n = len(part["depth"])
    part["flags"] = np.zeros(n, np.uint8)
    marked = np.zeros(n, bool)
    marked[::7] = True
    part["flags"][marked] = FLAG_DISAGREED
    lo, hi = part["centre"] - part["halfw"], part["centre"] + part["halfw"]
    # closed boxes that meet a marked one (sharing a face, edge or corner), the marked ones included
    near = np.array([((lo[i] <= hi[marked]) & (hi[i] >= lo[marked])).all(axis=1).any() for i in range(n)])
    assert marked.sum() < near.sum() < n
    warm = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=part)
    warm.step()
    size = warm.rule.size
    resolved = warm._looks_resolved(*warm._evaluate({k: warm.store[k][:n] for k in warm.geometry.columns})[:2])
    assert (resolved & near).any()
    # every resolved-looking region next to a signature is probed (the engine's neighbourhood is a
    # conservative grid, so a few more may be), and far fewer than all of them; two probes per vertex and one
    # per face, as a cold run gives the children of a non-smooth region
    per = 2 * 2 ** 3 + 2 * 3
    assert n * size + per * int((resolved & near).sum()) <= warm.evaluations
    assert warm.evaluations < n * size + per * int(resolved.sum())
    assert (warm.evaluations - n * size) % per == 0
    fl = warm.store["flags"][:n]
    assert ((fl & FLAG_WARY) != 0)[marked].all() and not ((fl & FLAG_WARY) != 0)[~marked].any()
    # without flags (a partition from elsewhere) every region that looks resolved is probed, as before
    bare = {k: v for k, v in part.items() if k not in ("flags", "wary")}
    plain = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=bare)
    plain.step()
    assert plain.evaluations == n * size + 2 ** 3 * int(resolved.sum())
    res = warm.run()
    assert res.status == "converged" and abs(res.value - _cloud_exact(3.2)) <= res.error


def test_kink_moving_into_smooth_regions_is_not_missed():
    """issue 14 item 3 regression: on |x - c| e^(y + z/2) with c stepping along x (no alignment: a Python
    integrand), a warm point whose kink moved into regions next to the old kink's (smooth there, unprobed)
    claimed convergence at c = 0.3776 with a true error 300x its estimate; probing the regions next to
    a signature, no point claims convergence with a true error above its estimate.  Closed form:
    int_0^1 |x - c| dx = (c^2 + (1 - c)^2) / 2 (elementary), times (e - 1) and 2 (e^(1/2) - 1)."""
    def f(X, c):
        return np.abs(X[:, 0] - c) * np.exp(X[:, 1] + 0.5 * X[:, 2])

    def exact(c):
        return (c * c + (1 - c) ** 2) / 2 * (math.e - 1) * 2 * (math.exp(0.5) - 1)
    grid = {"c": np.linspace(0.1, 0.9, 50)[14:18]}
    res = cubage.scan(f, CUBE, grid, rel_tol=1e-6, budget=3_000_000)
    assert any(p.warm_from is not None for p in res.points)
    for p in res.points:
        assert not p.converged or abs(p.value - exact(p.constants["c"])) <= p.error, p.constants


def test_kink_near_a_carried_face_is_not_missed():
    """issue 14 item 3 regression: on |x - c| e^(y + z/2), once vertex probes let a smooth model of log|f|
    explain a deviation, the warm point at c = 0.7531 (its kink just inside a face of a carried region)
    claimed convergence 286x its error estimate (30x the goal), while a cold run there spends its budget
    honestly.  The warm start's probes now include the second probe per vertex that a cold run gives the
    children of a non-smooth region: that point no longer claims convergence.  Closed form:
    int_0^1 |x - c| dx = (c^2 + (1 - c)^2) / 2 (elementary), times (e - 1) and 2 (e^(1/2) - 1)."""
    def f(X, c):
        return np.abs(X[:, 0] - c) * np.exp(X[:, 1] + 0.5 * X[:, 2])

    def exact(c):
        return (c * c + (1 - c) ** 2) / 2 * (math.e - 1) * 2 * (math.exp(0.5) - 1)
    res = cubage.scan(f, CUBE, {"c": np.linspace(0.1, 0.9, 50)[38:41]}, rel_tol=1e-6, budget=2_000_000)
    assert [p.warm_from is not None for p in res.points] == [False, True, True]
    for p in res.points:
        assert not p.converged or abs(p.value - exact(p.constants["c"])) <= p.error, p.constants


def test_moving_kink_warm_and_cold_agree_and_are_honest():
    """issue 14 item 3: a kink moving with the scanned constant (|x - c| e^(y + z/2) on the unit cube):
    warm and cold agree within their error estimates at every point, and every point is within its
    error of the closed form (int_0^1 |x - c| dx = (c^2 + (1 - c)^2) / 2, elementary; the other factors
    e - 1 and 2 (e^(1/2) - 1))."""
    def f(X, c):
        return np.abs(X[:, 0] - c) * np.exp(X[:, 1] + 0.5 * X[:, 2])

    def exact(c):
        return (c * c + (1 - c) ** 2) / 2 * (math.e - 1) * 2 * (math.exp(0.5) - 1)
    grid = {"c": [0.61, 0.64, 0.67, 0.70, 0.73]}
    warm = cubage.scan(f, CUBE, grid, rel_tol=1e-6)
    cold = cubage.scan(f, CUBE, grid, rel_tol=1e-6, warm=False)
    assert warm.converged and cold.converged
    assert sum(p.warm_from is not None for p in warm.points) == 4
    for w, k in zip(warm.points, cold.points):
        assert abs(w.value - k.value) <= w.error + k.error
        assert abs(w.value - exact(w.constants["c"])) <= w.error
        assert abs(k.value - exact(k.constants["c"])) <= k.error


# --------------------------------------------------------------------------
# shaping the partition handed on: merging by trend, splitting ahead
# --------------------------------------------------------------------------

def _grid_partition(k: int) -> dict:
    """k^3 equal boxes tiling the unit cube (engine coordinates are the user's on a bounded box)."""
    t = (np.arange(k) + 0.5) / k
    c = np.stack(np.meshgrid(t, t, t, indexing="ij"), axis=-1).reshape(-1, 3)
    return {"centre": c, "halfw": np.full_like(c, 0.5 / k), "axis": np.zeros(len(c), np.int8),
            "depth": np.full(len(c), 3 * int(math.log2(k)), np.int16)}


def _tiles_the_cube(part: dict) -> None:
    lo, hi = part["centre"] - part["halfw"], part["centre"] + part["halfw"]
    assert np.prod(hi - lo, axis=1).sum() == pytest.approx(1.0, rel=1e-14)      # volume of the unit cube
    # int x^2 y z^3 over the unit cube = (1/3)(1/2)(1/4) = 1/24 (elementary), box by box
    mono = ((hi[:, 0] ** 3 - lo[:, 0] ** 3) / 3 * (hi[:, 1] ** 2 - lo[:, 1] ** 2) / 2
            * (hi[:, 2] ** 4 - lo[:, 2] ** 4) / 4).sum()
    assert mono == pytest.approx(1 / 24, rel=1e-13)


def test_coarsen_merges_boxes_whose_errors_fell_not_those_that_grew():
    """issue 14 item 3 (coarsening by trend): the same boxes with the same errors are merged when their
    errors fell since the previous point (a feature moved away) and kept when they grew (a scan getting
    harder); NaN errors are never merged; the result still tiles the cube."""
    part = _grid_partition(8)
    n = len(part["centre"])
    err = np.full(n, 1e-9)
    kw = dict(allowance=1e-6, cap=1e-7)
    falling = coarsen(part, err, np.zeros(3), np.ones(3), trend=np.full(n, 0.5), **kw)
    rising = coarsen(part, err, np.zeros(3), np.ones(3), trend=np.full(n, 2.0), **kw)
    unknown = coarsen(part, np.full(n, np.nan), np.zeros(3), np.ones(3), allowance=np.inf)
    assert len(falling["centre"]) < len(rising["centre"]) <= n
    assert len(falling["centre"]) <= n // 8 and len(unknown["centre"]) == n
    for p in (falling, rising, unknown):
        _tiles_the_cube(p)
    # no merged box predicted (errors extrapolated by their trends) above the cap (FALLING: its multiple)
    assert np.all(2.0 * rising["error"] <= 1e-7) and np.all(0.5 * falling["error"] <= FALLING[1] * 1e-7)


def test_refine_ahead_splits_the_regions_with_the_largest_errors():
    """issue 14 item 3 (splitting ahead): a warm point that had to split regions after its start hands on
    its partition with the share REFINE_AHEAD of that many largest-error regions already split; the
    partition still tiles the cube."""
    first = _finished(3.0)
    start = _seed(first, None, None)
    run = cubage.Run(lambda X: _cloud(X, 4.5), CUBE, rel_tol=1e-8, start=start)
    run.run()
    n0, n = len(start["centre"]), run.store.n
    assert n > n0                                             # the harder point had to split
    key = run.store["key"]
    err = np.where(np.isfinite(key), key, 0.0)
    part, err2, trend2, _ = _refine_ahead(run, run.partition(), err, np.full(n, np.nan), start)
    k = int(REFINE_AHEAD * (n - n0))
    assert k > 0 and len(part["centre"]) == n + k
    assert np.isnan(err2).sum() == 2 * k and np.isnan(trend2).all()
    top = np.argsort(-err, kind="stable")[:k]
    kept = {tuple(c) for c in part["centre"]}
    assert not any(tuple(c) in kept for c in run.store["centre"][top])
    _tiles_the_cube(part)


def test_simplex_scan_warm_and_cold_agree_with_dirichlet():
    """issue 14 item 3 on a simplex domain (partitions are split ahead, never merged): every point of
    exp(c (x + y + z)) over the unit 3-simplex within its error of the closed form
    int_0^1 e^(c s) s^2/2 ds = (e^c (c^2 - 2c + 2) - 2) / (2 c^3) (the sum s has density s^2/2 on the
    simplex, Dirichlet's formula); warm and cold agree within their errors."""
    tri = cubage.Simplex([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]])

    def exact(c):
        return (math.exp(c) * (c * c - 2 * c + 2) - 2) / (2 * c**3)
    grid = {"c": np.linspace(1.0, 6.0, 6)}
    f = lambda X, c: np.exp(c * X.sum(axis=1))
    warm = cubage.scan(f, tri, grid, rel_tol=1e-8)
    cold = cubage.scan(f, tri, grid, rel_tol=1e-8, warm=False)
    assert warm.converged and cold.converged
    assert sum(p.warm_from is not None for p in warm.points) == 5
    for w, k in zip(warm.points, cold.points):
        assert abs(w.value - k.value) <= w.error + k.error
        assert abs(w.value - exact(w.constants["c"])) <= w.error


def test_moving_peak_warm_and_cold_agree_and_are_honest():
    """issue 14 item 3: a Gaussian peak moving along the cube's diagonal (the benchmark's moving feature,
    shorter): warm and cold agree within their errors, and every point is within its error of the product
    of three erf integrals (A&S 7.1.1)."""
    s = 0.1

    def f(X, c):
        return np.exp(-((X - c) ** 2).sum(axis=1) / (2 * s * s))

    def exact(c):
        w = s * math.sqrt(2)
        return (s * math.sqrt(math.pi / 2) * (math.erf((1 - c) / w) + math.erf(c / w))) ** 3
    grid = {"c": np.linspace(0.3, 0.7, 9)}
    warm = cubage.scan(f, CUBE, grid, rel_tol=1e-6)
    cold = cubage.scan(f, CUBE, grid, rel_tol=1e-6, warm=False)
    assert warm.converged and cold.converged
    for w, k in zip(warm.points, cold.points):
        assert abs(w.value - k.value) <= w.error + k.error
        assert abs(w.value - exact(w.constants["c"])) <= w.error


def test_aligned_partitions_are_not_merged_across_break_values(monkeypatch):
    """issue 14 item 3 with issue 13's breaks: a point that started from sub-boxes between declared break
    values hands on a partition that never straddles a break, however generous the coarsening (equal
    neighbours across a break look like dyadic siblings but are not); a scan with breaks meets its goal
    at every point against the closed form 0.5 (e^(3a (3/4)) - e^(3a/4)) / (3a) / 16 (elementary)."""
    dom = cubage.Box([0, 0, 0], [1, 0.25, 0.25])

    def f(X, a):
        return ((X[:, 0] > 0.25) & (X[:, 0] < 0.75)) * np.exp(3 * a * X[:, 0])

    def exact(a):
        return (math.exp(2.25 * a) - math.exp(0.75 * a)) / (3 * a) / 16
    brk = [[0.25, 0.75], [], []]
    monkeypatch.setattr("cubage.session.scan.COARSEN_CAP", math.inf)
    monkeypatch.setattr("cubage.session.scan.COARSEN_SHARE", 1e300)
    run = cubage.Run(lambda X: f(X, 1.0), dom, rel_tol=1e-10, breaks=brk)
    run.run()
    seed = _seed(run, None, None)
    lo, hi = seed["centre"][:, 0] - seed["halfw"][:, 0], seed["centre"][:, 0] + seed["halfw"][:, 0]
    for b in (0.25, 0.75):
        assert not np.any((lo < b - 1e-12) & (hi > b + 1e-12))
    monkeypatch.undo()
    res = cubage.scan(f, dom, {"a": [1.0, 1.2, 1.4, 1.6]}, rel_tol=1e-8, breaks=brk)
    assert res.converged
    for p in res.points:
        assert abs(p.value - exact(p.constants["a"])) <= p.error


# --------------------------------------------------------------------------
# feature alignment in scans (issue 13's features at each point's constants)
# --------------------------------------------------------------------------

_KINK = """
[domain]
variables = ["x", "y", "z"]
box = [[0, 1], [0, 1], [0, 1]]
[integrand]
expr = "abs(x - c) * exp(-a * y) * (1 + z)"
constants = {{ a = 1.0, c = 0.5 }}
[goal]
rel_tol = 1e-8
{method}
[scan]
{scan}
"""


def _kink_exact(a: float, c: float) -> float:
    """int_0^1 |x - c| dx = (c^2 + (1 - c)^2) / 2, int_0^1 e^(-a y) dy = (1 - e^-a) / a, int_0^1 (1 + z) dz
    = 3/2 (elementary)."""
    return (c * c + (1 - c) ** 2) / 2 * (1 - math.exp(-a)) / a * 1.5


def _scan_file(scan: str, method: str = ""):
    from cubage.problem.problem_file import parse_problem
    from cubage.session.prepare import scan_settings
    from cubage.session.scan import ExprSource, run_scan
    p = parse_problem(_KINK.format(scan=scan, method=method))
    source = ExprSource.from_problem(p)
    return source, run_scan(source, p.domain, p.scan, scan_settings(p))


def test_scan_points_align_with_a_kink_that_moves_with_the_constant():
    """issue 14 with issue 13 (scans used no alignment): a kink |x - c| that moves with the scanned c is
    detected at each point's own constants and gets a region boundary there, so every point meets its
    goal against the closed form (elementary) at a fraction of the unaligned cost; the partition moves
    with it, so each point starts from its own aligned partition (no warm start across a moved feature)."""
    source, res = _scan_file("c = [0.3137, 0.4211, 0.5477, 0.6903]")
    assert source.features({"a": 1.0, "c": 0.3137}, cubage.Box([0, 0, 0], [1, 1, 1]))["breaks"][0] == [0.3137]
    assert res.converged
    for p in res.points:
        assert abs(p.value - _kink_exact(1.0, p.constants["c"])) <= p.error
        assert p.warm_from is None
    _, off = _scan_file("c = [0.3137, 0.4211, 0.5477, 0.6903]", '[method]\nalign = "off"')
    assert res.evaluations < off.evaluations / 5


def test_scan_warm_starts_within_a_feature_that_stays_put():
    """issue 14 item 3 with issue 13: scanning a with the kink fixed at c = 0.5 keeps the same aligned
    partition from point to point, so points after the first start warm; every point against the closed
    form (elementary)."""
    _, res = _scan_file("a = [0.5, 1.0, 1.5, 2.0, 2.5]")
    assert res.converged
    assert [p.warm_from is not None for p in res.points] == [False, True, True, True, True]
    for p in res.points:
        assert abs(p.value - _kink_exact(p.constants["a"], 0.5)) <= p.error


def test_audit_splits_are_merged_back_before_a_partition_is_handed_on():
    """issue 14 item 3 (audits must not pile regions up along a chain): the sibling pairs an audit split
    only to check the partition are merged back in the partition a point hands on, which still tiles
    the cube; the next point audits its own partition again."""
    from cubage.engine.run import _NON_SMOOTH, FLAG_AUDITED
    run = cubage.Run(lambda X: _cloud(X, 6.0), CUBE, rel_tol=1e-8, start=_seed(_finished(3.0), None, None))
    run.run()
    assert run.status == "converged" and run.trust()["audit"] == "passed"
    st = run.store
    fl = st["flags"]
    audited = ((fl & FLAG_AUDITED) != 0) & ((fl & _NON_SMOOTH) == 0)
    boxes = {(tuple(c), tuple(h)) for c, h in zip(st["centre"][audited], st["halfw"][audited])}

    def partners(c, h):          # audited boxes that fill the dyadic box one level up with (c, h)
        out = []
        for a in range(3):
            first = round((c[a] - h[a]) / (2 * h[a])) % 2 == 0
            other = list(c)
            other[a] += 2 * h[a] if first else -2 * h[a]
            if (tuple(other), h) in boxes:
                out.append(tuple(other))
        return out
    pairs = [(c, p[0]) for c, h in boxes if len(p := partners(c, h)) == 1
             and partners(p[0], h) == [c] and c < p[0]]
    assert pairs                                  # the audit split some regions into sibling pairs
    seed = _seed(run, None, None)
    kept = {tuple(c) for c in seed["centre"]}
    for a, b in pairs:
        assert a not in kept and b not in kept
        assert tuple((np.array(a) + np.array(b)) / 2) in kept
    _tiles_the_cube(seed)


def test_aligned_scan_resumed_mid_way_gives_the_same_table(tmp_path):
    """issue 14 item 5 with issue 13's features: a scan whose points are aligned with a kink (fixed at
    c = 0.5, so points warm-start from aligned partitions), stopped inside a point and resumed, gives the
    same table bit for bit as one that ran through; every point within its error of the closed form
    (elementary)."""
    import threading

    from cubage.problem.problem_file import parse_problem
    from cubage.session.prepare import scan_settings
    from cubage.session.scan import ExprSource, run_scan
    p = parse_problem(_KINK.format(scan="a = [0.5, 1.0, 1.5, 2.0, 2.5, 3.0]", method=""))
    src, settings = ExprSource.from_problem(p), scan_settings(p)
    straight = run_scan(src, p.domain, p.scan, settings)
    stop = threading.Event()
    done = []

    def on_step(job, run, now):       # stop inside the third point, right after its start (a warm point may
        if len(done) >= 2 and run.step_count >= 1:      # converge at its second step)
            stop.set()
    part = run_scan(src, p.domain, p.scan, settings, run_dir=tmp_path, on_step=on_step,
                    on_point=lambda pt, k, n: done.append(pt), stop_event=stop, checkpoint_every=0)
    assert part.stopped and 0 < len(part.points) < 6
    resumed = run_scan(src, p.domain, p.scan, settings, run_dir=tmp_path)
    assert resumed.converged
    key = lambda pts: [(q.index, float(q.value), float(q.error), q.evaluations, q.status, q.warm_from)
                       for q in pts]
    assert key(resumed.points) == key(straight.points)
    for q in straight.points:
        assert abs(q.value - _kink_exact(q.constants["a"], 0.5)) <= q.error


def test_touching_finds_every_box_that_meets_one_of_a_set():
    """issue 14 item 3 (the warm start's neighbourhood of signatures): ``touching`` returns every box that
    meets (shares a face, edge or corner with, or overlaps) a box of the second set -- checked against the
    brute-force pairwise comparison (common practice) on random boxes in 1-5 dimensions, exactly touching
    ones included -- and no box farther than two grid cells from all of them."""
    from cubage.engine.run import touching
    rng = np.random.default_rng(20261202)
    for d in (1, 2, 3, 5):
        for _ in range(20):
            n, k = int(rng.integers(2, 300)), int(rng.integers(1, 40))
            lo = rng.random((n, d))
            hi = lo + 2.0 ** -rng.integers(0, 6, (n, d))
            src = rng.choice(n, size=min(k, n), replace=False)
            slo, shi = lo[src].copy(), hi[src].copy()
            lo[: min(5, n), 0] = shi[0, 0]                    # boxes starting exactly where one ends
            hi = np.maximum(hi, lo)
            exact = ((lo[:, None, :] <= shi[None]) & (hi[:, None, :] >= slo[None])).all(axis=2).any(axis=1)
            got = touching(lo, hi, slo, shi)
            assert not (exact & ~got).any()
            cell = (hi.max(axis=0) - lo.min(axis=0)) / max(2, min(64, round((1 << 18) ** (1 / d))))
            far = ~(((lo[:, None, :] <= shi[None] + 2 * cell) & (hi[:, None, :] >= slo[None] - 2 * cell))
                    .all(axis=2).any(axis=1))
            assert not (got & far).any()


# --------------------------------------------------------------------------
# a cheaper check where the neighbour's partition passed its own (issue 14 target: smooth scans)
# --------------------------------------------------------------------------

def test_warm_start_from_a_clean_audit_takes_part_of_the_audit_sample():
    """issue 14 item 3 (the warm point's audit): a warm start from a partition that passed its own audit
    with no non-smooth signature audits :data:`WARM_AUDIT_SHARE` of the usual sample (said in the trust
    report); the same start marked not audited takes the whole sample.  Both meet their goal against the
    closed form (erf, A&S 7.1.1)."""
    from cubage.engine.run import WARM_AUDIT_SHARE
    assert 0 < WARM_AUDIT_SHARE < 1
    part = _finished(3.0).partition()
    assert part["audited"].tolist() == [1]
    runs = {}
    for mark in (1, 0):
        start = {**part, "audited": np.array([mark], np.int8)}
        run = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=start)
        res = run.run()
        assert res.status == "converged" and abs(res.value - _cloud_exact(3.2)) <= res.error
        runs[mark] = res.trust
    assert runs[1]["audit"] == "passed" and runs[1]["audit_reduced"] == 1
    assert "audit_reduced" not in runs[0]
    assert runs[1]["audit_regions"] < runs[0]["audit_regions"]


def test_warm_audit_keeps_the_whole_sample_where_a_signature_shows():
    """issue 14 item 3 (never a cheaper audit next to a non-smooth signature): a clean, audited partition
    of a smooth integrand used to start |x - 0.37| e^(y + z/2) (a kink the partition knows nothing of):
    regions show non-smooth signatures, so the audit takes the whole sample, and the run meets its goal
    honestly or does not claim convergence.  Closed form: int_0^1 |x - c| dx = (c^2 + (1 - c)^2) / 2 (elementary), times
    e - 1 and 2 (e^(1/2) - 1)."""
    part = _finished(3.0).partition()
    assert part["audited"].tolist() == [1]
    c = 0.37
    run = cubage.Run(lambda X: np.abs(X[:, 0] - c) * np.exp(X[:, 1] + 0.5 * X[:, 2]), CUBE, rel_tol=1e-6,
                     start=part, budget=3_000_000)
    res = run.run()
    exact = (c * c + (1 - c) ** 2) / 2 * (math.e - 1) * 2 * (math.exp(0.5) - 1)
    t = res.trust
    assert (t["disagreed"] or t["lower_closer"] or t["flagged_regions"]) and "audit_reduced" not in t
    assert not res.converged or abs(res.value - exact) <= res.error
    # a partition that carries a signature is not marked audited
    bad = dict(part, flags=part["flags"] | np.where(np.arange(len(part["flags"])) == 0, FLAG_DISAGREED, 0)
               .astype(np.uint8))
    warm = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=bad)
    warm.run()
    assert warm.status == "converged" and "audit_reduced" not in warm.trust()
    assert warm.partition()["audited"].tolist() == [1]       # ... but its own clean run is


def test_wary_regions_cleared_by_their_own_probes_are_not_probed_again():
    """issue 14 item 3 (the warm start's probes): a start region that was a child of a non-smooth region
    (``FLAG_WARY``) is a reason to probe its neighbourhood only while its own vertices were not probed;
    probed and agreeing (``FLAG_PROBED``), it showed no feature at its scale.  Both runs meet their goal
    against the closed form (erf, A&S 7.1.1)."""
    from cubage.engine.run import FLAG_PROBED
    part = _finished(3.0).partition()
    n = len(part["depth"])
    marked = np.zeros(n, bool)
    marked[::7] = True
    evals = {}
    for extra in (0, FLAG_PROBED):
        start = dict(part, flags=np.where(marked, FLAG_WARY | extra, 0).astype(np.uint8))
        run = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=start)
        run.step()
        evals[extra] = run.evaluations
        res = run.run()
        assert res.status == "converged" and abs(res.value - _cloud_exact(3.2)) <= res.error
    size = cubage.Run(lambda X: _cloud(X, 3.2), CUBE).rule.size
    assert evals[FLAG_PROBED] == n * size < evals[0]


def test_scan_with_reduced_audits_resumed_mid_point_is_bit_identical(tmp_path):
    """issue 14 item 5 with the warm audit share: a smooth scan whose warm points audit part of the sample,
    stopped inside a warm point and resumed from its checkpoint, gives the same points bit for bit as one
    that ran through (the share is decided by what the checkpoint keeps); every point within its error of
    the closed form (erf, A&S 7.1.1)."""
    import threading

    from cubage.session.scan import CallableSource, grid_from_mapping, run_scan
    src, g = CallableSource(_cloud), grid_from_mapping({"a": np.linspace(3.0, 4.0, 5)})
    straight = run_scan(src, CUBE, g, {"rel_tol": 1e-8}, chains=1)
    assert sum(bool((p.trust or {}).get("audit_reduced")) for p in straight.points) >= 3
    stop = threading.Event()
    done = []

    def on_step(job, run, now):       # stop inside the third point, after its start
        if len(done) >= 2 and run.step_count >= 3:
            stop.set()
    part = run_scan(src, CUBE, g, {"rel_tol": 1e-8}, chains=1, run_dir=tmp_path, on_step=on_step,
                    on_point=lambda pt, k, n: done.append(pt), stop_event=stop, checkpoint_every=0)
    assert part.stopped and len(part.points) == 2 and list(tmp_path.glob("scan-current-*.npz"))
    resumed = run_scan(src, CUBE, g, {"rel_tol": 1e-8}, chains=1, run_dir=tmp_path)
    strip = lambda pts: [p.to_json() | {"seconds": 0} for p in pts]
    assert resumed.converged and strip(resumed.points) == strip(straight.points)
    for p in straight.points:
        assert abs(p.value - _cloud_exact(p.constants["a"])) <= p.error
