"""Integrands that exit, interrupt, hang, crash their worker or return nonsense; workers that outlive cubage.

Each test names the item of issue 10 it guards.  Every test is bounded: the
subprocesses have timeouts, and waits poll with a deadline (a bound against
hanging, not a measurement of speed).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from conftest import as_from_a_terminal

import cubage
from cubage.engine.checkpoint import read_checkpoint
from cubage.engine.parallel import make_evaluator

BOX2 = cubage.Box([0.0, 0.0], [1.0, 1.0])


def _env():
    env = dict(os.environ)
    env.pop("COLUMNS", None)
    return env


def start(*args, cwd):
    return subprocess.Popen([sys.executable, "-m", "cubage", *map(str, args)], cwd=cwd, env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, preexec_fn=as_from_a_terminal)


def run(*args, cwd, timeout=120):
    return subprocess.run([sys.executable, "-m", "cubage", *map(str, args)], cwd=cwd, env=_env(),
                          capture_output=True, text=True, timeout=timeout)


def wait_until(cond, what: str, proc=None, timeout: float = 60.0):
    t0 = time.monotonic()
    while not cond():
        if proc is not None and proc.poll() is not None:
            out, err = proc.communicate()
            pytest.fail(f"process ended (rc {proc.returncode}) before {what}: {err[-2000:]}")
        if time.monotonic() - t0 > timeout:
            if proc is not None:
                proc.kill()
            pytest.fail(f"timed out waiting for {what}")
        time.sleep(0.05)


# ---------------------------------------------------------------------------
# item 5: SystemExit and KeyboardInterrupt raised by the integrand
# ---------------------------------------------------------------------------

def exits(X):
    """Calls sys.exit(0) (a module-level function, so worker processes can import it)."""
    sys.exit(0)


def interrupts(X):
    raise KeyboardInterrupt


@pytest.mark.parametrize("f, word", [(exits, "SystemExit"), (interrupts, "KeyboardInterrupt")])
@pytest.mark.parametrize("backend", ["in-process", "threads", "processes"])
def test_exit_or_interrupt_in_the_integrand_is_an_integrand_error(f, word, backend):
    """issue 10 item 5: sys.exit() or KeyboardInterrupt inside user code is an IntegrandError, not an exit."""
    ev = None if backend == "in-process" else make_evaluator(2, backend, chunk_points=4)
    try:
        with pytest.raises(cubage.IntegrandError) as info:
            cubage.integrate(f, BOX2, rel_tol=1e-6, evaluator=ev)
    finally:
        if ev is not None:
            ev.close()
    assert word in str(info.value) and "\n" not in str(info.value)


EXITING_MODULE = textwrap.dedent("""
    import sys
    def f(X):
        sys.exit(0)
    def later(X):
        if X.shape[0] > 2:        # not on the two test points of the problem check
            sys.exit(0)
        return X[:, 0]
""")

PY_PROBLEM = textwrap.dedent("""
    [domain]
    variables = ["x", "y"]
    box = [[0, 1], [0, 1]]
    [integrand]
    python = "{target}"
    [goal]
    rel_tol = {rel_tol}
""")


def test_cli_integrand_calling_sys_exit_fails_with_json(tmp_path):
    """issue 10 item 5: `cubage run --json` with an integrand that calls sys.exit(0): exit 1 and a JSON object."""
    (tmp_path / "mod.py").write_text(EXITING_MODULE)
    (tmp_path / "p.toml").write_text(PY_PROBLEM.format(target="mod.py:later", rel_tol=1e-6))
    proc = run("run", "p.toml", "--json", "--allow-python", cwd=tmp_path, timeout=60)
    assert proc.returncode == 1, proc.stderr
    rec = json.loads(proc.stdout)
    assert rec["status"] == "failed"
    assert "SystemExit" in proc.stderr and "Traceback" not in proc.stderr
    # exiting already on the problem's two test points: bad input, one line naming it
    (tmp_path / "q.toml").write_text(PY_PROBLEM.format(target="mod.py:f", rel_tol=1e-6))
    proc = run("run", "q.toml", "--allow-python", cwd=tmp_path, timeout=60)
    assert proc.returncode == 2 and "SystemExit" in proc.stderr and "Traceback" not in proc.stderr


def test_callers_numpy_errstate_applies_to_the_integrand():
    """issue 10 item 9 (the abandonable call runs in a helper thread): numpy's errstate set by the caller
    still applies to the integrand, as it did when the engine called it directly."""
    def inverse(X):
        return 1.0 / (X[:, 0] - 0.5)        # 0.5 is a node of the first region: division by zero

    with np.errstate(divide="raise"), pytest.raises(cubage.IntegrandError) as info:
        cubage.integrate(inverse, cubage.Box([0.0], [1.0]), rule="gauss-kronrod")
    assert "FloatingPointError" in str(info.value)


# ---------------------------------------------------------------------------
# item 14 (part): wrong shapes
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("f, words", [
    (lambda X: np.zeros((X.shape[0], 0)), "no components"),
    (lambda X: np.zeros((X.shape[0], 2, 2)), "expected"),
    (lambda X: np.zeros(X.shape[0] + 1), "expected"),
    (lambda X: np.zeros((1, X.shape[0])), "expected"),
])
def test_wrong_shapes_are_one_line_integrand_errors(f, words):
    """issue 10 item 14: shape (n, 0) and other wrong shapes: a one-line IntegrandError."""
    with pytest.raises(cubage.IntegrandError) as info:
        cubage.integrate(f, BOX2)
    assert words in str(info.value) and "\n" not in str(info.value)


def ragged(X):
    """(n,) for some chunks, (n, 2) for others."""
    return np.zeros(X.shape[0]) if X[0, 0] < 0.5 else np.zeros((X.shape[0], 2))


def test_chunks_of_different_shapes_are_one_line():
    """issue 10 item 14: chunks that come back with different shapes from the workers: one line."""
    with make_evaluator(2, "threads", chunk_points=4) as ev:
        with pytest.raises(cubage.IntegrandError) as info:
            cubage.integrate(ragged, BOX2, evaluator=ev)
    assert "different shapes" in str(info.value) and "\n" not in str(info.value)


# ---------------------------------------------------------------------------
# item 9: an integrand that never returns
# ---------------------------------------------------------------------------

def _ends(fn, limit: float = 60.0):
    """fn() in a thread; its value, or a test failure if it has not returned after ``limit`` seconds."""
    box: dict = {}
    t = threading.Thread(target=lambda: box.setdefault("value", fn()), daemon=True)
    t.start()
    t.join(limit)
    if t.is_alive():
        pytest.fail("the run did not end")
    return box["value"]


def _stuck_after(points: int):
    state = {"n": 0}

    def f(X):
        state["n"] += X.shape[0]
        if state["n"] > points:
            while True:          # never returns
                time.sleep(0.05)
        return np.exp(X[:, 0] + X[:, 1])
    return f


@pytest.mark.parametrize("backend", ["in-process", "threads"])
def test_time_limit_ends_a_stuck_integrand(backend):
    """issue 10 item 9: the time limit ends the run although the integrand call never returns; the
    estimate is the last complete step's."""
    ev = None if backend == "in-process" else make_evaluator(2, backend, chunk_points=8)
    try:
        res = _ends(lambda: cubage.integrate(_stuck_after(1000), BOX2, rel_tol=1e-14, time_limit=0.3, evaluator=ev))
    finally:
        if ev is not None:
            ev.close()
    assert res.status == "time-limit" and "abandoned" in res.message
    # exp(x + y) over the unit square is (e - 1)^2 (by hand); a few steps are already close
    assert abs(res.value - (np.e - 1) ** 2) < 1e-3


def test_stop_now_abandons_a_stuck_call():
    """issue 10 item 9: Run.stop(now=True) from another thread ends a run stuck in its integrand."""
    r = cubage.Run(_stuck_after(1000), BOX2, rel_tol=1e-14)
    threading.Timer(0.3, lambda: r.stop(now=True)).start()
    res = _ends(r.run)
    assert res.status == "stopped" and res.evaluations > 0


HANGING_MODULE = textwrap.dedent("""
    import os, time
    import numpy as np
    HERE = os.path.dirname(os.path.abspath(__file__))
    def f(X):
        while os.path.exists(os.path.join(HERE, "hang")):
            time.sleep(0.05)
        return np.exp(X[:, 0] + X[:, 1]) / (1.0 + 100.0 * (X[:, 0] - 0.3) ** 2)
""")


@pytest.mark.parametrize("extra", [[], ["--workers", "2", "--backend", "processes"]])
def test_first_sigterm_ends_a_stuck_run_with_its_checkpoint(tmp_path, extra):
    """issue 10 item 9: the first SIGTERM ends a run whose integrand hangs, with the checkpoint intact."""
    (tmp_path / "mod.py").write_text(HANGING_MODULE)
    (tmp_path / "p.toml").write_text(PY_PROBLEM.format(target="mod.py:f", rel_tol=1e-15))
    rd = tmp_path / "rd"
    p = start("run", "p.toml", "--json", "--allow-python", "--run-dir", rd, "--checkpoint-every", "0.1",
              "--budget", "1e9", *extra, cwd=tmp_path)
    try:
        wait_until(lambda: (rd / "partition.npz").exists(), "a first checkpoint", p)
        (tmp_path / "hang").write_text("")
        time.sleep(0.5)        # let the integrand get stuck
        before = read_checkpoint(rd / "partition.npz")[0]["evaluations"]
        p.send_signal(signal.SIGTERM)
        out, err = p.communicate(timeout=60)
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()
    assert p.returncode == 3, err
    rec = json.loads(out)
    assert rec["status"] == "stopped" and rec["stopped_by"] == "SIGTERM"
    meta, _ = read_checkpoint(rd / "partition.npz")
    assert meta["evaluations"] >= before and rec["evaluations"] == meta["evaluations"]


# ---------------------------------------------------------------------------
# item 13 and 15a: dying workers, and workers whose parent dies
# ---------------------------------------------------------------------------

SEGFAULT_MODULE = textwrap.dedent("""
    import ctypes, multiprocessing
    import numpy as np
    def f(X):
        if multiprocessing.current_process().name != "MainProcess":
            ctypes.string_at(0)            # a segmentation fault, in worker processes only
        return 1.0 / (1e-4 + (X[:, 0] - 0.3) ** 2 + (X[:, 1] - 0.6) ** 2)
""")


def test_segfault_in_workers_is_one_clean_message(tmp_path):
    """issue 10 item 13: a worker killed by a segfault: one message, no fault dump per worker."""
    (tmp_path / "mod.py").write_text(SEGFAULT_MODULE)
    (tmp_path / "p.toml").write_text(PY_PROBLEM.format(target="mod.py:f", rel_tol=1e-12))
    proc = run("run", "p.toml", "--allow-python", "--workers", "2", "--backend", "processes", cwd=tmp_path)
    assert proc.returncode == 1
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert any("worker died" in ln for ln in lines), proc.stderr
    assert "Fatal Python error" not in proc.stderr and "Traceback" not in proc.stderr
    assert len(lines) <= 2, proc.stderr


ENDLESS = textwrap.dedent("""
    [domain]
    variables = ["x", "y", "z", "w"]
    box = [[-2, 2], [-2, 2], [-2, 2], [-2, 2]]
    [integrand]
    expr = "exp(-(x*x + y*y + z*z + w*w)) / (1 + 100*(x - 0.3)**2 + 50*(y + 0.2)**2)"
    [goal]
    rel_tol = 1e-14
    budget = 4_000_000_000
""")


def _children(pid: int) -> set[int]:
    kids: set[int] = set()
    try:
        for task in os.listdir(f"/proc/{pid}/task"):
            with open(f"/proc/{pid}/task/{task}/children") as fh:
                kids |= {int(x) for x in fh.read().split()}
    except OSError:
        pass
    return kids


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] not in ("Z", "X")
    except OSError:
        return False


@pytest.mark.skipif(not Path("/proc/self/task").is_dir(), reason="reads /proc (Linux)")
def test_workers_die_with_a_killed_parent_and_release_its_pipes(tmp_path):
    """issue 10 item 15a: kill -9 of cubage while loky workers run: the workers end and a reader of
    cubage's stdout/stderr pipes gets end-of-file (does not hang)."""
    (tmp_path / "p.toml").write_text(ENDLESS)
    p = start("run", "p.toml", "--workers", "2", "--backend", "processes", cwd=tmp_path)
    try:
        wait_until(lambda: len(_children(p.pid)) >= 2, "two worker processes", p)
        workers = _children(p.pid)
        p.kill()
        p.wait(timeout=30)
        box: dict = {}
        reader = threading.Thread(target=lambda: box.setdefault("out", p.stdout.read() + p.stderr.read()),
                                  daemon=True)
        reader.start()
        reader.join(30)
        assert not reader.is_alive(), "the output pipes stayed open after cubage died"
        wait_until(lambda: not any(_alive(w) for w in workers), "the orphaned workers to end", timeout=30)
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()


def _output_targets(_=None):
    """Where this process's stdout and stderr go (Linux)."""
    return os.readlink("/proc/self/fd/1"), os.readlink("/proc/self/fd/2")


@pytest.mark.skipif(not Path("/proc/self/fd").is_dir(), reason="reads /proc (Linux)")
def test_every_worker_pool_writes_nothing_to_cubages_pipes():
    """issue 10 items 13 and 15a: the evaluator's loky workers and the scan's worker processes have their
    stdout/stderr on /dev/null, so they never hold cubage's output pipes."""
    from cubage.session.scan import _executor
    with make_evaluator(2, "processes") as ev:
        outs = ev._run_all([(_output_targets, ())] * 4)
    ex = _executor(2)
    outs += [ex.submit(_output_targets).result(timeout=60) for _ in range(4)]
    assert outs and all(o == (os.devnull, os.devnull) for o in outs)


def test_nan_message_names_both_ways_to_declare_a_singular_point():
    """Review of issue 12's probes (user pass): the message for a NaN at a node told command-line users to write
    a Python keyword; it names the problem file's [features] table too."""
    import numpy as np

    import cubage
    f = lambda X: np.where(np.all(np.abs(X - 0.5) < 1e-12, axis=1), np.nan, 1.0)     # NaN at the centre node
    with pytest.raises(cubage.IntegrandError, match=r"\[features\] singular.*singular=\["):
        cubage.integrate(f, cubage.Box([0, 0, 0], [1, 1, 1]), rel_tol=1e-6)


def test_jacobian_overflow_is_one_error_without_numpy_warnings():
    """User pass: an integrand that is finite but does not decay on an infinite axis overflowed in f * Jacobian
    with a numpy RuntimeWarning before the one-line error."""
    import warnings

    import numpy as np

    import cubage
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(cubage.IntegrandError, match="Jacobian of the variable map overflows"):
            cubage.integrate(lambda X: np.full(len(X), 1e300), cubage.Box([0.0], [np.inf]), rel_tol=1e-6)
