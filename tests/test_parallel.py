"""Parallel evaluation: identical values on every backend, clear failures, the auto rule.

Every test runs under a watchdog (faulthandler, see ``_watchdog``) so that a
hung pool kills the test process with a traceback instead of hanging CI; the
tests where a worker dies run in a subprocess with a timeout.
"""

from __future__ import annotations

import faulthandler
import json
import math
import os
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest

import cubage
from cubage.engine.parallel import PoolEvaluator, chunk_bounds, make_evaluator
from cubage.problem.expr import compile_expression
from cubage.problem.problem_file import integrand_from_spec

SQRT_PI = math.sqrt(math.pi)

# The 3-D Gaussian over [-2, 2]^3: (sqrt(pi) erf(2))^3, since
# int_{-a}^{a} exp(-x^2) dx = sqrt(pi) erf(a) (Abramowitz & Stegun 7.1.1, the definition of erf).
GAUSS3_EXACT = (SQRT_PI * math.erf(2.0)) ** 3
# Over [-1, 1]^2: exp(-(x^2+y^2)) -> (sqrt(pi) erf(1))^2 (A&S 7.1.1), and
# x^2 exp(-(x^2+y^2)) -> (sqrt(pi)/2 erf(1) - exp(-1)) * sqrt(pi) erf(1)
# (integration by parts of x * x exp(-x^2), then A&S 7.1.1).
VEC_EXACT = np.array([(SQRT_PI * math.erf(1.0)) ** 2,
                      (SQRT_PI / 2 * math.erf(1.0) - math.exp(-1.0)) * SQRT_PI * math.erf(1.0)])

BOX3 = cubage.Box([-2.0] * 3, [2.0] * 3)
BOX2 = cubage.Box([-1.0] * 2, [1.0] * 2)


@pytest.fixture(autouse=True)
def _watchdog():
    faulthandler.dump_traceback_later(120, exit=True)
    yield
    faulthandler.cancel_dump_traceback_later()


def gauss3():
    return compile_expression("exp(-(x**2 + y**2 + z**2))", ["x", "y", "z"])


def vec2():
    return compile_expression(["exp(-(x**2 + y**2))", "x**2 * exp(-(x**2 + y**2))"], ["x", "y"])


def _run(f, domain, evaluator, rel_tol=1e-7):
    return cubage.integrate(f, domain, rel_tol=rel_tol, evaluator=evaluator)


def _check_reference(res, exact, rel):
    # the error estimate is heuristic; compare with the closed form at a looser tolerance
    assert res.status == "converged"
    np.testing.assert_allclose(res.values, np.atleast_1d(exact), rtol=rel)


@pytest.fixture(scope="module")
def serial_results():
    return {"gauss3": _run(gauss3(), BOX3, None), "vec2": _run(vec2(), BOX2, None)}


# ---------------------------------------------------------------------------
# chunks
# ---------------------------------------------------------------------------

def test_chunk_bounds_depend_only_on_n_and_size():
    # the contract of the module: boundaries cover [0, n] in order, sizes as documented
    for n in (1, 1023, 1024, 1025, 5000, 32768, 1_000_000):
        b = chunk_bounds(n)
        assert b[0] == 0 and b[-1] == n and np.all(np.diff(b) > 0)
        size = min(8192, max(1024, -(-n // 16)))  # the documented rule: ceil(n/16) within [1024, 8192]
        assert np.all(np.diff(b)[:-1] == size)
    assert chunk_bounds(10, 4).tolist() == [0, 4, 8, 10]
    assert chunk_bounds(0).tolist() == [0]


# ---------------------------------------------------------------------------
# identical values on every backend
# ---------------------------------------------------------------------------

def test_processes_give_identical_values(serial_results):
    with make_evaluator(2, "processes") as ev:
        assert ev.describe() == "2 loky processes"
        g = _run(gauss3(), BOX3, ev)
        v = _run(vec2(), BOX2, ev)
        assert ev.steps_parallel > 0
    assert np.array_equal(g.values, serial_results["gauss3"].values)
    assert np.array_equal(v.values, serial_results["vec2"].values)
    assert g.evaluations == serial_results["gauss3"].evaluations
    _check_reference(g, GAUSS3_EXACT, 1e-7)
    _check_reference(v, VEC_EXACT, 1e-7)


@pytest.mark.parametrize("workers", [2, 3])
def test_threads_give_identical_values(serial_results, workers):
    with make_evaluator(workers, "threads", chunk_points=100) as ev:
        assert ev.describe() == f"{workers} threads"
        g = _run(gauss3(), BOX3, ev)
        v = _run(vec2(), BOX2, ev)
        assert ev.mode == "parallel"
    assert np.array_equal(g.values, serial_results["gauss3"].values)
    assert np.array_equal(v.values, serial_results["vec2"].values)
    _check_reference(g, GAUSS3_EXACT, 1e-7)
    _check_reference(v, VEC_EXACT, 1e-7)


def vector_callable(X):
    """A plain Python vector integrand (pickled by joblib, no spec)."""
    r2 = X[:, 0] ** 2 + X[:, 1] ** 2
    e = np.exp(-r2)
    return np.stack([e, X[:, 0] ** 2 * e], axis=1)


def test_plain_callable_vector_integrand_in_processes():
    ref = _run(vector_callable, BOX2, None)
    with make_evaluator(2, "processes", chunk_points=32) as ev:
        res = _run(vector_callable, BOX2, ev)
        assert ev.steps_parallel > 0
    assert np.array_equal(res.values, ref.values)
    _check_reference(res, VEC_EXACT, 1e-7)


def test_dask_local_cluster_identical_values_and_failure(serial_results):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp",
                                  host="127.0.0.1", dashboard_address="127.0.0.1:0") as lc:
        address = lc.scheduler_address
        with make_evaluator(2, "dask", address) as ev:
            assert ev.describe() == f"dask at {address}"
            g = _run(gauss3(), BOX3, ev)
            v = _run(vec2(), BOX2, ev)
            assert ev.steps_parallel > 0
        with make_evaluator(2, "dask", address, chunk_points=16) as ev:  # small chunks: even step 1 is sent out
            with pytest.raises(cubage.IntegrandError) as info:
                _run(raising, BOX2, ev)
            msg = str(info.value)
            # still usable after a failure
            again = _run(vec2(), BOX2, ev)
            assert ev.steps_parallel > 0
    assert np.array_equal(g.values, serial_results["gauss3"].values)
    assert np.array_equal(v.values, serial_results["vec2"].values)
    assert np.array_equal(again.values, serial_results["vec2"].values)
    _check_reference(g, GAUSS3_EXACT, 1e-7)
    assert "raising" in msg and "ValueError: negative corner reached" in msg and "\n" not in msg


# ---------------------------------------------------------------------------
# failures
# ---------------------------------------------------------------------------

def raising(X):
    """Raises once any point has both coordinates below -0.5 (the first step has such points)."""
    if np.any((X[:, 0] < -0.5) & (X[:, 1] < -0.5)):
        raise ValueError("negative corner reached")
    return X[:, 0] ** 2


def test_threads_raising_integrand_names_it_and_the_error():
    ev = make_evaluator(2, "threads", chunk_points=4)
    with pytest.raises(cubage.IntegrandError) as info:
        _run(raising, BOX2, ev)
    msg = str(info.value)
    assert "test_parallel:raising" in msg and "ValueError: negative corner reached" in msg
    assert "2 threads" in msg and "\n" not in msg
    ev.close()
    ev.close()  # idempotent


FAILURES_SCRIPT = textwrap.dedent("""
    import json, sys
    import numpy as np
    import cubage
    from cubage.engine.parallel import make_evaluator
    from cubage.problem.problem_file import integrand_from_spec
    out = {}
    box = cubage.Box([-1.0, -1.0], [1.0, 1.0])
    for name in ("bad", "die"):
        spec = {"kind": "python", "target": "failing.py:" + name, "base_dir": sys.argv[1]}
        f = integrand_from_spec(spec)
        ev = make_evaluator(2, "processes", spec=spec, chunk_points=4)
        try:
            cubage.integrate(f, box, rel_tol=1e-6, evaluator=ev)
            out[name] = {"error": None}
        except cubage.IntegrandError as exc:
            out[name] = {"error": str(exc), "type": type(exc).__name__}
        if name == "die":
            # usable again after a worker died (a fresh pool replaces the broken one), then closed;
            # the spec's integrand is what runs, and x = 0.25 at 16 points is harmless
            out[name]["after"] = float(np.sum(ev(f, np.full((16, 2), 0.25))))
        ev.close()
    print(json.dumps(out))
""")

FAILING_MODULE = textwrap.dedent("""
    import os
    import numpy as np

    def bad(X):
        if np.any(X[:, 0] > 0.5):
            raise ZeroDivisionError("pole at the rim")
        return X[:, 0]

    def die(X):
        if np.any(X[:, 0] > 0.5):
            os._exit(7)
        return X[:, 0]
""")


def test_loky_raising_and_dying_workers_give_clear_errors(tmp_path):
    (tmp_path / "failing.py").write_text(FAILING_MODULE)
    proc = subprocess.run([sys.executable, "-c", FAILURES_SCRIPT, str(tmp_path)], capture_output=True,
                          text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    bad, die = out["bad"], out["die"]
    assert bad["type"] == "IntegrandError"
    assert "failing.py:bad" in bad["error"] and "ZeroDivisionError: pole at the rim" in bad["error"]
    assert die["type"] == "IntegrandError"
    assert "worker died" in die["error"] and "failing.py:die" in die["error"] and "\n" not in die["error"]
    # die returns x, so 16 points at x = 0.25 sum to 4 (computed by hand)
    assert die["after"] == 4.0


# ---------------------------------------------------------------------------
# integrands that travel by import path
# ---------------------------------------------------------------------------

USER_MODULE = textwrap.dedent("""
    import os
    import numpy as np

    with open(os.path.join(os.path.dirname(__file__), "imports.log"), "a") as fh:
        fh.write(f"{os.getpid()}\\n")

    def gauss(X):
        return np.exp(-(X ** 2).sum(axis=1))
""")


def test_python_import_path_integrand_in_loky(tmp_path):
    (tmp_path / "usermod.py").write_text(USER_MODULE)
    spec = {"kind": "python", "target": "usermod.py:gauss", "base_dir": str(tmp_path)}
    f = integrand_from_spec(spec)
    ref = _run(f, BOX3, None)

    # the bound integrand pickles by reference (import path and code digest), so the worker
    # processes import the module themselves (issue 11: the evaluator knows nothing of problem files)
    with make_evaluator(2, "processes", spec=spec, chunk_points=512) as ev:
        res = _run(f, BOX3, ev)
        assert ev.steps_parallel > 0
        pids = set(ev.worker_pids())
    assert np.array_equal(res.values, ref.values)
    _check_reference(res, GAUSS3_EXACT, 1e-7)
    importers = [int(line) for line in (tmp_path / "imports.log").read_text().split()]
    # imported once in this process and at most once in each worker process (the per-worker cache)
    assert importers.count(os.getpid()) == 1
    workers = [p for p in importers if p != os.getpid()]
    assert 1 <= len(workers) == len(set(workers)) <= 2
    assert set(workers) <= pids | set(workers)


def test_close_shuts_the_loky_workers_down():
    ev = make_evaluator(2, "processes")
    pids = ev.worker_pids()
    assert pids and os.getpid() not in pids
    ev.close()
    deadline = time.monotonic() + 20
    alive = list(pids)
    while alive and time.monotonic() < deadline:
        alive = [p for p in alive if _alive(p)]
        time.sleep(0.05)
    assert alive == []
    with pytest.raises(RuntimeError):
        ev(gauss3(), np.zeros((10, 3)))


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    try:  # a zombie still answers kill(0); reap it if it is our child
        done, _ = os.waitpid(pid, os.WNOHANG)
        return done == 0
    except ChildProcessError:
        return True


# ---------------------------------------------------------------------------
# the automatic choice
# ---------------------------------------------------------------------------

def test_auto_stays_in_process_for_a_cheap_integrand(serial_results):
    ev = make_evaluator(2, "auto")
    with ev:
        res = _run(gauss3(), BOX3, ev)
        assert ev.mode == "serial"
        # every step calls the evaluator at least once (some also probe region vertices in a second call)
        assert ev.steps_parallel == 0 and ev.steps_serial >= res.steps
        assert ev.dispatch_seconds is None  # the pool was never started
        assert ev.describe().startswith("auto: in-process")
    assert np.array_equal(res.values, serial_results["gauss3"].values)


def slow_gauss(X):
    """exp(-|x|^2), made to cost about 20 us a point."""
    time.sleep(20e-6 * X.shape[0])
    return np.exp(-(X ** 2).sum(axis=1))


def test_auto_goes_parallel_for_a_costly_integrand():
    X = np.random.default_rng(7).uniform(-2, 2, (4096, 3))
    expect = slow_gauss(X)
    with PoolEvaluator(2, "processes", auto=True, min_serial_seconds=0.0) as ev:
        outs = [ev(slow_gauss, X) for _ in range(3)]
        # two timed in-process calls measure the cost (~80 ms a call > 20 ms), the third goes to the pool
        assert ev.steps_serial == 2 and ev.steps_parallel == 1 and ev.mode == "parallel"
        assert ev.cost_per_point > 1e-5 and ev.dispatch_seconds is not None
        assert "2 loky processes" in ev.describe()
    for out in outs:
        assert np.array_equal(out, expect)
    # exp(-|x|^2) at each point, against the math module (an independent implementation)
    np.testing.assert_allclose(expect, [math.exp(-sum(v * v for v in row)) for row in X], rtol=1e-15)


def test_auto_with_one_worker_and_serial_are_the_engine_call():
    assert make_evaluator(1, "auto") is None
    assert make_evaluator(4, "serial") is None


# ---------------------------------------------------------------------------
# options
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("kwargs, word", [
    ({"backend": "gpu"}, "backend"),
    ({"workers": 0}, "workers"),
    ({"workers": "many"}, "workers"),
    ({"workers": 2, "backend": "threads", "cluster": "tcp://127.0.0.1:8786"}, "cluster"),
    ({"workers": 2, "chunk_points": 0, "backend": "threads"}, "chunk_points"),
])
def test_bad_options_are_one_line_value_errors(kwargs, word):
    with pytest.raises(ValueError) as info:
        make_evaluator(**kwargs)
    assert word in str(info.value) and "\n" not in str(info.value)


def test_workers_auto_is_the_core_count():
    with make_evaluator("auto", "threads") as ev:
        assert ev.workers == (os.cpu_count() or 1)


def test_dask_without_the_cluster_extra_says_how_to_install(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # makes "import distributed" fail
    with pytest.raises(ValueError) as info:
        make_evaluator(2, "dask", "tcp://127.0.0.1:8786")
    assert "pip install 'cubage[cluster]'" in str(info.value)


def test_dask_needs_a_reachable_scheduler(tmp_path):
    pytest.importorskip("distributed")
    with pytest.raises(ValueError) as info:
        make_evaluator(2, "dask", str(tmp_path / "no-such-scheduler.json"))
    assert "scheduler file" in str(info.value)


def test_parallel_module_does_not_import_the_problem_layer():
    """issue 11 item 4: the engine's evaluator imports nothing above the engine."""
    import ast
    from pathlib import Path

    import cubage.engine.parallel as parallel
    tree = ast.parse(Path(parallel.__file__).read_text())
    names = [n.module for n in ast.walk(tree) if isinstance(n, ast.ImportFrom) and n.module] + \
        [a.name for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names]
    assert not [m for m in names if m.startswith(("cubage.problem", "cubage.session", "cubage.cli", "cubage.tui"))]


def test_unpicklable_integrand_for_processes_is_one_line():
    """issue 11 item 4: an integrand that cannot be pickled is a one-line IntegrandError naming it."""
    import threading
    lock = threading.Lock()

    def holds_a_lock(X):
        with lock:
            return X[:, 0]

    holds_a_lock.lock = lock          # cloudpickle follows the function's attributes
    with make_evaluator(2, "processes", chunk_points=4) as ev:
        with pytest.raises(cubage.IntegrandError) as info:
            _run(holds_a_lock, BOX2, ev)
    assert "cannot be sent to worker processes" in str(info.value) and "\n" not in str(info.value)
