"""Scans (issue 14): the [scan] format, warm start, the order rule, resume, the CLI and the API.

Expected integrals come from closed forms named beside each check.
"""

from __future__ import annotations

import json
import math
import threading

import mpmath
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import cubage
from cubage.cli.commands import main
from cubage.problem.problem_file import ProblemError, bundled_problem_dir, load_problem, parse_problem
from cubage.problem.scan_table import MAX_POINTS
from cubage.session.scan import ExprSource, coarsen, plan_chains, run_scan, scan_path

BASE = """
[domain]
variables = ["x", "y", "z"]
box = [[0, 1], [0, 1], [0, 1]]
[integrand]
expr = "exp(-a*(x*x + y*y + z*z)) * (1 + c*x)"
constants = {{ a = 1.0, c = 0.0 }}
[goal]
rel_tol = 1e-8
[scan]
{scan}
"""


def _gauss_cube(a: float, c: float) -> float:
    """Closed form: prod of 1-D factors; int_0^1 e^{-a t^2} dt = sqrt(pi/a)/2 erf(sqrt a) (A&S 7.1.1),
    int_0^1 t e^{-a t^2} dt = (1 - e^{-a}) / (2a)."""
    g = math.sqrt(math.pi / a) / 2 * math.erf(math.sqrt(a))
    m1 = (1 - math.exp(-a)) / (2 * a)
    return g**3 + c * m1 * g**2


# --------------------------------------------------------------------------
# the format
# --------------------------------------------------------------------------

def test_lists_ranges_and_grid():
    p = parse_problem(BASE.format(scan='a = { log = [0.1, 10], count = 5 }\nc = [0.0, 0.5]'))
    g = p.scan
    assert g.names == ("a", "c") and g.shape == (5, 2) and g.size == 10
    # log spacing: the ends as written, equal ratios between (common practice, as numpy.geomspace)
    np.testing.assert_allclose(g.axes[0], [0.1, 10**-0.5, 1.0, 10**0.5, 10.0], rtol=1e-15)
    assert g.axes[0][0] == 0.1 and g.axes[0][-1] == 10.0
    assert g.point(3) == {"a": g.axes[0][1], "c": 0.5}          # C order: the last key fastest
    p = parse_problem(BASE.format(scan="a = { lin = [0.5, 3.0], count = 6 }"))
    np.testing.assert_allclose(p.scan.axes[0], [0.5, 1.0, 1.5, 2.0, 2.5, 3.0], rtol=0, atol=1e-15)


@pytest.mark.parametrize("scan,words", [
    ("b = [1.0, 2.0]", "'b' is not a constant"),
    ("a = []", "empty"),
    ('a = [1.0, "two"]', "must be a number"),
    ('a = "fast"', "list of numbers or a range"),
    ("a = { lin = [0, 1], count = 400 }\nc = { lin = [0, 1], count = 300 }", "over the limit of 100,000"),
    ("a = { log = [-1, 1], count = 3 }", "must be positive"),
    ("a = { lin = [0, 1] }", "count"),
])
def test_bad_scans_are_one_line_exit_2(tmp_path, capsys, scan, words):
    """issue 14 item 1: unknown constant, empty list, non-numeric, grid over 10^5 points -> one line, exit 2."""
    f = tmp_path / "bad.toml"
    f.write_text(BASE.format(scan=scan))
    with pytest.raises(ProblemError) as e:
        load_problem(f)
    assert words in str(e.value) and "\n" not in str(e.value) and "[scan]" in str(e.value)
    capsys.readouterr()
    assert main(["run", str(f)]) == 2
    err = capsys.readouterr().err
    assert words in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert 400 * 300 > MAX_POINTS


def test_scan_of_python_integrand_is_refused(tmp_path):
    text = BASE.format(scan="a = [1.0]").replace('expr = "exp(-a*(x*x + y*y + z*z)) * (1 + c*x)"\n', "")
    text = text.replace("constants = { a = 1.0, c = 0.0 }", 'python = "m.py:f"')
    with pytest.raises(ProblemError):
        parse_problem(text, allow_python=True)


# --------------------------------------------------------------------------
# the order rule
# --------------------------------------------------------------------------

@pytest.mark.parametrize("shape", [(7,), (3, 4), (2, 3, 4)])
def test_path_visits_every_point_once_through_neighbours(shape):
    path = scan_path(shape)
    assert sorted(path) == list(range(math.prod(shape)))
    idx = np.array(np.unravel_index(path, shape)).T
    steps = np.abs(np.diff(idx, axis=0)).sum(axis=1)
    assert (steps == 1).all()                      # boustrophedon: one grid step at a time
    chains = plan_chains(shape, 3)
    assert [k for c in chains for k in c] == path and max(map(len, chains)) - min(map(len, chains)) <= 1


def test_coarsen_keeps_a_partition_of_the_box():
    """Merged boxes still tile the domain: volumes sum to the box's, and a polynomial integrates exactly."""
    f = lambda X: np.exp(-20 * ((X - 0.3) ** 2).sum(1))
    run = cubage.Run(f, cubage.Box([0, 0, 0], [2, 1, 1]), rel_tol=1e-9)
    run.run()
    part = run.partition()
    merged = coarsen(part, np.full(len(part["centre"]), 1e-30), np.zeros(3), np.array([2.0, 1, 1]), 1.0)
    assert len(merged["centre"]) < len(part["centre"]) / 4
    vol = np.prod(2 * merged["halfw"], axis=1).sum()
    assert vol == pytest.approx(2.0, rel=1e-14)
    lo, hi = merged["centre"] - merged["halfw"], merged["centre"] + merged["halfw"]
    # int x^2 y z over [0,2]x[0,1]^2 = (8/3)(1/2)(1/2) = 2/3 (elementary), box by box
    mono = ((hi[:, 0] ** 3 - lo[:, 0] ** 3) / 3 * (hi[:, 1] ** 2 - lo[:, 1] ** 2) / 2
            * (hi[:, 2] ** 2 - lo[:, 2] ** 2) / 2).sum()
    assert mono == pytest.approx(2 / 3, rel=1e-13)


# --------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------

def test_bundled_scan_every_point_against_closed_form():
    """issue 14 item 9: orbital-overlap-scan, every point against S(R) = (pi/(a+b))^{3/2} exp(-ab R^2/(a+b))
    (Gaussian product theorem, Boys 1950), evaluated with mpmath."""
    p = load_problem(bundled_problem_dir() / "orbital-overlap-scan.toml")
    c = p.integrand_spec["constants"]
    a, b = mpmath.mpf(c["a"]), mpmath.mpf(c["b"])
    source = ExprSource(p.integrand_spec, p.fingerprint())
    res = run_scan(source, p.domain, p.scan, {"rel_tol": p.goal.rel_tol})
    assert len(res.points) == p.scan.size == 21 and res.converged
    for pt in res.points:
        R = mpmath.mpf(pt.constants["R"])
        exact = float((mpmath.pi / (a + b)) ** mpmath.mpf(1.5) * mpmath.exp(-a * b * R**2 / (a + b)))
        assert abs(pt.value - exact) <= pt.error, (pt.constants, pt.value, exact, pt.error)


def test_bundled_scan_warm_and_cold_agree_within_their_errors():
    """issue 14 item 3: on the bundled orbital-overlap scan (its first 11 separations, R = 0 .. 2), warm
    and cold agree within the sum of their error estimates at every point, and each is within its error
    of S(R) = (pi/(a+b))^{3/2} exp(-ab R^2/(a+b)) (Gaussian product theorem, Boys 1950; mpmath)."""
    from cubage.problem.scan_table import grid_from_mapping
    p = load_problem(bundled_problem_dir() / "orbital-overlap-scan.toml")
    c = p.integrand_spec["constants"]
    a, b = mpmath.mpf(c["a"]), mpmath.mpf(c["b"])
    source = ExprSource(p.integrand_spec, p.fingerprint())
    grid = grid_from_mapping({"R": [p.scan.point(k)["R"] for k in range(11)]})
    warm = run_scan(source, p.domain, grid, {"rel_tol": p.goal.rel_tol})
    cold = run_scan(source, p.domain, grid, {"rel_tol": p.goal.rel_tol}, warm=False)
    assert warm.converged and cold.converged and sum(q.warm_from is not None for q in warm.points) == 10
    for w, k in zip(warm.points, cold.points):
        assert w.constants == k.constants
        assert abs(w.value - k.value) <= w.error + k.error
        R = mpmath.mpf(w.constants["R"])
        exact = float((mpmath.pi / (a + b)) ** mpmath.mpf(1.5) * mpmath.exp(-a * b * R**2 / (a + b)))
        assert abs(w.value - exact) <= w.error and abs(k.value - exact) <= k.error


def test_warm_and_cold_agree_within_their_errors():
    """issue 14 item 3: every point, warm and cold, within the sum of their error estimates; both against
    the closed form of _gauss_cube (erf, A&S 7.1.1)."""
    f = lambda X, a, c: np.exp(-a * (X**2).sum(1)) * (1 + c * X[:, 0])
    dom = cubage.Box([0, 0, 0], [1, 1, 1])
    grid = {"a": np.linspace(0.5, 4.0, 8), "c": [0.0, 1.0]}
    warm = cubage.scan(f, dom, grid, rel_tol=1e-8)
    cold = cubage.scan(f, dom, grid, rel_tol=1e-8, warm=False)
    assert warm.converged and cold.converged
    assert any(p.warm_from is not None for p in warm.points) and all(p.warm_from is None for p in cold.points)
    assert warm.evaluations < cold.evaluations
    for w, k in zip(warm.points, cold.points):
        assert w.constants == k.constants
        assert abs(w.value - k.value) <= w.error + k.error
        exact = _gauss_cube(w.constants["a"], w.constants["c"])
        assert abs(w.value - exact) <= 10 * 1e-8 * exact        # 10x the goal: estimates are heuristic


def test_table_and_json_shape():
    f = lambda X, a: np.exp(-a * (X**2).sum(1))
    res = cubage.scan(f, cubage.Box([0, 0], [1, 1]), {"a": [1.0, 2.0, 3.0]}, rel_tol=1e-9)
    t = res.table
    assert t.dtype.names == ("a", "value", "error", "evaluations", "status") and t.shape == (3,)
    # closed form (sqrt(pi/a)/2 erf(sqrt a))^2 (A&S 7.1.1)
    want = [(math.sqrt(math.pi / a) / 2 * math.erf(math.sqrt(a))) ** 2 for a in (1.0, 2.0, 3.0)]
    np.testing.assert_allclose(t["value"], want, rtol=1e-8)
    rec = json.loads(json.dumps(res.to_json()))
    assert [p["constants"]["a"] for p in rec["points"]] == [1.0, 2.0, 3.0]
    assert {"value", "error", "evaluations", "status", "warm_from"} <= set(rec["points"][0])
    lines = res.csv_text().splitlines()
    assert lines[0].startswith("index,a,value,error") and len(lines) == 4


def test_same_results_for_any_worker_count():
    """issue 14 item 4: chains run in worker processes give the same table as in-process, bit for bit."""
    f = lambda X, a: np.cos(a * X.sum(1))
    dom = cubage.Box([0, 0, 0], [1, 1, 1])
    grid = {"a": np.linspace(0.5, 5.0, 12)}
    one = cubage.scan(f, dom, grid, rel_tol=1e-7, chains=3, workers=1)
    two = cubage.scan(f, dom, grid, rel_tol=1e-7, chains=3, workers=2)
    assert [p.to_json() | {"seconds": 0} for p in one.points] == [p.to_json() | {"seconds": 0} for p in two.points]


def _strip(points):
    return [p.to_json() | {"seconds": 0} for p in points]


def test_resume_mid_point_is_bit_identical(tmp_path):
    """issue 14 item 5: a scan stopped mid-way (inside a point) and resumed gives the same table as an
    uninterrupted scan, bit for bit."""
    f = lambda X, a: 1.0 / (0.02 + ((X - np.array([a, 0.5, 0.5])) ** 2).sum(1))
    dom = cubage.Box([0, 0, 0], [1, 1, 1])
    grid = {"a": np.linspace(0.2, 0.8, 6)}
    settings = {"rel_tol": 1e-7}
    src = cubage.session.scan.CallableSource(f)
    straight = run_scan(src, dom, cubage.session.scan.grid_from_mapping(grid), settings, chains=2)
    g = cubage.session.scan.grid_from_mapping(grid)
    stop = threading.Event()
    steps = [0]

    def on_step(job, run, now):       # stop inside the third point, after a few steps of it
        if job.index == straight.points[0].index or len(done) < 2:
            return
        steps[0] += 1
        if steps[0] == 5:
            stop.set()

    done = []
    part = run_scan(src, dom, g, settings, chains=2, run_dir=tmp_path, on_step=on_step,
                    on_point=lambda p, k, n: done.append(p), stop_event=stop, checkpoint_every=0)
    assert part.stopped and 0 < len(part.points) < 6
    assert list(tmp_path.glob("scan-current-*.npz"))            # the current point was checkpointed
    resumed = run_scan(src, dom, g, settings, chains=2, run_dir=tmp_path)
    assert not resumed.stopped and resumed.converged
    assert _strip(resumed.points) == _strip(straight.points)


def test_chains_on_a_dask_client_match_in_process():
    """issue 14 item 4: chains on a dask cluster (an in-process client here) give the same table, bit for bit."""
    distributed = pytest.importorskip("distributed")
    f = lambda X, a: np.exp(-a * (X**2).sum(1))
    dom = cubage.Box([0, 0, 0], [1, 1, 1])
    grid = {"a": np.linspace(0.5, 3.0, 9)}
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=2, dashboard_address=None) as c:
        on_dask = cubage.scan(f, dom, grid, rel_tol=1e-7, chains=3, cluster=c)
    here = cubage.scan(f, dom, grid, rel_tol=1e-7, chains=3)
    assert _strip(on_dask.points) == _strip(here.points) and here.converged
    # closed form per point: (sqrt(pi/a)/2 erf(sqrt a))^3 (A&S 7.1.1)
    for p in here.points:
        a = p.constants["a"]
        assert abs(p.value - (math.sqrt(math.pi / a) / 2 * math.erf(math.sqrt(a))) ** 3) <= 10 * 1e-7 * p.value


# --------------------------------------------------------------------------
# hostile and random [scan] tables
# --------------------------------------------------------------------------

_VALUES = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True), st.integers(min_value=-10**400, max_value=10**400),
    st.booleans(), st.text(max_size=5),
    st.lists(st.one_of(st.floats(allow_nan=True), st.integers(min_value=-10**30, max_value=10**30),
                       st.text(max_size=3)), max_size=6),
    st.fixed_dictionaries({}, optional={"lin": st.lists(st.floats(allow_nan=True), max_size=3),
                                        "log": st.lists(st.floats(allow_nan=True), max_size=3),
                                        "count": st.integers(min_value=-5, max_value=10**7),
                                        "step": st.integers()}),
)


def _toml_value(v) -> str:
    import json as _json
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return "nan" if math.isnan(v) else ("inf" if v == math.inf else "-inf" if v == -math.inf else repr(v))
    if isinstance(v, int):
        return str(v)
    if isinstance(v, str):
        return _json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(st.sampled_from(["a", "c", "b", "zz"]), _VALUES, max_size=3))
def test_random_scan_tables_are_accepted_or_one_line_errors(table):
    """issue 14 item 1 (and issue 10's rule): any [scan] table either parses into a valid grid or gives one
    line naming [scan]; never a traceback."""
    body = "\n".join(f"{k} = {_toml_value(v)}" for k, v in table.items())
    try:
        p = parse_problem(BASE.format(scan=body))
    except ProblemError as exc:
        assert "\n" not in exc.headline
        return
    g = p.scan
    assert set(g.names) <= {"a", "c"} and 1 <= g.size <= MAX_POINTS
    assert all(np.isfinite(ax).all() and ax.size >= 1 for ax in g.axes)


def test_cluster_from_a_problem_file_is_not_contacted(tmp_path, capsys):
    """issue 10 item 0 for scans, as for runs (cleanup item 1): an untrusted file's [method] cluster is not used;
    one note says so and the scan runs on this machine (tests/test_cluster_trust.py checks nothing connects)."""
    f = tmp_path / "c.toml"
    f.write_text(BASE.format(scan="a = [1.0, 2.0]") + '\n[method]\ncluster = "tcp://127.0.0.1:9"\n')
    assert main(["run", str(f), "--json"]) == 0
    err = capsys.readouterr().err
    assert "[method] cluster" in err and "not used" in err and len(err.strip().splitlines()) == 1


def test_a_folder_of_another_scan_is_refused(tmp_path):
    """issue 14 item 5: continuing a scan checks that the folder holds this scan (not another grid or integrand)."""
    f = lambda X, a: np.exp(-a * (X**2).sum(1))
    dom = cubage.Box([0, 0], [1, 1])
    cubage.scan(f, dom, {"a": [1.0, 2.0]}, rel_tol=1e-8, run_dir=tmp_path)
    with pytest.raises(cubage.CheckpointError, match="another scan"):
        cubage.scan(f, dom, {"a": [1.0, 3.0]}, rel_tol=1e-8, run_dir=tmp_path)
    again = cubage.scan(f, dom, {"a": [1.0, 2.0]}, rel_tol=1e-6, run_dir=tmp_path)   # a new goal is allowed
    assert len(again.points) == 2 and again.converged


def test_resume_after_a_crash_at_any_file_write(tmp_path):
    """issue 14 item 5: a crash after a point's seed was written and in the middle of its line is continued to
    the same table, bit for bit (the torn line is recomputed; its predecessor's seed is still there)."""
    f = lambda X, a: np.exp(-a * ((X - 0.3) ** 2).sum(1))
    dom = cubage.Box([0, 0, 0], [1, 1, 1])
    grid = {"a": np.linspace(1.0, 6.0, 5)}
    straight = cubage.scan(f, dom, grid, rel_tol=1e-8)
    d = tmp_path / "rd"
    stop = threading.Event()
    src = cubage.session.scan.CallableSource(f)
    g = cubage.session.scan.grid_from_mapping(grid)
    part = run_scan(src, dom, g, {"rel_tol": 1e-8}, run_dir=d, stop_event=stop,
                    on_point=lambda p, k, n: stop.set() if k == 3 else None)
    assert len(part.points) == 3 and (d / "scan-seed-2.npz").is_file()
    # the crash: point 3's seed written (here a stand-in) and half of its line
    files = cubage.session.scan._ScanFiles(d)
    files.save_seed(3, None)
    line = json.dumps(straight.points[3].to_json())
    with open(d / "scan-points.jsonl", "a") as fh:
        fh.write(line[: len(line) // 2])
    resumed = run_scan(src, dom, g, {"rel_tol": 1e-8}, run_dir=d)
    assert _strip(resumed.points) == _strip(straight.points)
    assert len((d / "scan-points.jsonl").read_text().splitlines()) == 6     # the torn line, then 3 and 4


def test_a_points_own_evaluation_in_parallel_gives_the_same_table():
    """issue 14 item 4: each point's batches on a parallel evaluator (chains run here), the same table bit for bit."""
    from cubage.engine.parallel import make_evaluator
    f = lambda X, a: np.cos(a * X.sum(1))
    dom = cubage.Box([0, 0, 0], [1, 1, 1])
    grid = {"a": np.linspace(0.5, 4.0, 6)}
    ev = make_evaluator(workers=2, backend="threads")
    try:
        par = cubage.scan(f, dom, grid, rel_tol=1e-8, evaluator=ev)
    finally:
        if hasattr(ev, "close"):
            ev.close()
    here = cubage.scan(f, dom, grid, rel_tol=1e-8)
    assert _strip(par.points) == _strip(here.points) and here.converged
    with pytest.raises(ValueError, match="workers=1"):
        cubage.scan(f, dom, grid, evaluator=lambda g, X: g(X), workers=2)


# --------------------------------------------------------------------------
# declared features that do not fit the domain at one scan point
# --------------------------------------------------------------------------

_MISFIT = """
[domain]
variables = ["x", "y"]
box = {box}
[integrand]
expr = "{expr}"
constants = {{ c = {c0} }}
[goal]
rel_tol = 1e-6
[features]
{features}
[scan]
c = {values}
"""


@pytest.mark.parametrize("box,expr,c0,features,values,words", [
    # slanted at c = 1 on an unbounded box (axis-parallel, a break value, at the file's own c = 0)
    ("[[0, inf], [0, inf]]", "exp(-x-y) / sqrt(abs(x + c*y - 0.5))", "0.0",
     'singular = [{ plane = "x + c*y = 0.5", power = -0.5 }]', "[0.0, 0.5, 1.0]",
     "at scan point c = 0.5: cut planes and slanted singular planes need a bounded box"),
    # no variable left at c = 0
    ("[[0, 1], [0, 1]]", "abs(x - 0.5) * exp(y)", "1.0", 'cuts = ["c*x = 0.5"]', "[1.0, 2.0, 0.0]",
     "at scan point c = 0: 'c*x = 0.5' does not involve any variable"),
])
def test_declared_feature_that_misfits_one_scan_point_is_a_one_line_error(tmp_path, capsys, box, expr, c0,
                                                                          features, values, words):
    """issue 14 item 1 with issue 13's [features] (a point whose declared feature did not fit the domain
    ended `failed` with a bare engine message after the points before it had run): the file is refused up
    front with one line naming the key and the scan point, exit 2."""
    f = tmp_path / "misfit.toml"
    f.write_text(_MISFIT.format(box=box, expr=expr, c0=c0, features=features, values=values))
    with pytest.raises(ProblemError) as e:
        load_problem(f)
    assert words in str(e.value) and "\n" not in str(e.value) and "[features]" in str(e.value)
    capsys.readouterr()
    assert main(["run", str(f)]) == 2
    err = capsys.readouterr().err
    assert words in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_point_whose_features_misfit_is_failed_with_a_message_naming_it():
    """issue 14 (the scan API, where no problem file was checked): a point whose declared cut does not
    fit the domain at its constants ends `failed` with a message naming its constants and why; the other
    points integrate |x - 1/2| e^y on the unit square to (e - 1)/4 (elementary) within their errors."""
    spec = {"source": "abs(x - 0.5) * exp(y)", "variables": ["x", "y"], "constants": {"c": 1.0}}
    src = ExprSource(spec, "misfit-test", align="declared", feature_table={"cuts": ["c*x = 0.5"]})
    res = run_scan(src, cubage.Box([0, 0], [1, 1]), cubage.session.scan.grid_from_mapping({"c": [1.0, 0.0, 2.0]}),
                   {"rel_tol": 1e-8})
    bad = res.points[1]
    assert bad.status == "failed" and bad.evaluations == 0 and math.isnan(bad.value)
    assert "c = 0" in bad.message and "does not involve any variable" in bad.message
    assert "not integrated" in bad.message
    for p in (res.points[0], res.points[2]):
        assert p.converged and abs(p.value - (math.e - 1) / 4) <= p.error
    assert not res.converged
