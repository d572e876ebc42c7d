"""Stopping a headless run: signals, kill -9, stop-request; resuming to the same bits.

The engine's contract (cubature/engine.py, cubature/checkpoint.py) is that a
run resumed from a checkpoint ends with exactly the same value as one that
never stopped; these tests check that through the command line, with real
processes and real signals.
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time
from pathlib import Path

import pytest
from conftest import as_from_a_terminal

# the in-process tests send themselves signals that a suite started in the background would inherit ignored
pytestmark = pytest.mark.usefixtures("catchable_signals")

# ~4 s of work on one core (6e7 evaluations): a 4-D Gaussian times a narrow Lorentzian ridge (no closed
# form needed: the checks compare runs with each other, and with scipy below)
SLOW = """
title = "ridge in 4-D"
[domain]
variables = ["x", "y", "z", "w"]
box = [[-2, 2], [-2, 2], [-2, 2], [-2, 2]]
[integrand]
expr = "exp(-(x*x + y*y + z*z + w*w)) / (1 + 100*(x - 0.3)**2 + 50*(y + 0.2)**2)"
[goal]
rel_tol = 3e-9
budget = 400_000_000
"""

# far more work than any test waits for
ENDLESS = SLOW.replace("rel_tol = 3e-9", "rel_tol = 1e-13")
assert ENDLESS != SLOW


def progress_lines(d: Path) -> int:
    try:
        return len((d / "trail.jsonl").read_text().splitlines())
    except OSError:
        return 0


@pytest.fixture(scope="module")
def work(tmp_path_factory, cubage):
    """The problem file, and an uninterrupted run of it started in the background."""
    base = tmp_path_factory.mktemp("signals")
    prob = base / "slow.toml"
    prob.write_text(SLOW)
    ref = cubage.start("run", prob, "--json", cwd=base)
    state = {"base": base, "prob": prob, "proc": ref, "result": None, "cubage": cubage}
    yield state
    if ref.poll() is None:
        ref.kill()
        ref.wait()


def reference_result(work) -> dict:
    if work["result"] is None:
        out, err = work["proc"].communicate(timeout=180)
        assert work["proc"].returncode == 0, err
        work["result"] = json.loads(out)
    return work["result"]


def _history_rows(d: Path) -> list[float]:
    rows = []
    for line in (d / "trail.jsonl").read_text().splitlines():
        try:
            rec = json.loads(line)
        except ValueError:
            continue          # a line cut by kill -9
        rows += [r[0] for r in rec["rows"]]
    return rows


def test_sigterm_then_resume_gives_the_same_bits(work):
    d = work["base"] / "term"
    p = work["cubage"].start("run", work["prob"], "--json", "--run-dir", d, cwd=work["base"])
    work["cubage"].wait_for(lambda: progress_lines(d) >= 2, p, what="two progress lines")
    p.send_signal(signal.SIGTERM)
    out, err = p.communicate(timeout=60)
    assert p.returncode == 3, err
    stopped = json.loads(out)
    assert stopped["status"] == "stopped" and stopped["stopped_by"] == "SIGTERM"
    res = json.loads((d / "verdict.json").read_text())
    assert res["status"] == "stopped" and res["value"] == stopped["value"]
    assert (d / "partition.npz").is_file() and not (d / "occupant.json").exists()

    r = work["cubage"].start("resume", d, "--json", cwd=work["base"])
    # while the resumed run works, the stopped run's ending is gone (a watcher must not show it)
    work["cubage"].wait_for(lambda: (d / "occupant.json").exists() and not (d / "verdict.json").exists(), r,
                            what="the resume to start")
    out, err = r.communicate(timeout=120)
    assert r.returncode == 0, err
    done = json.loads(out)
    ref = reference_result(work)
    assert done["status"] == "converged"
    # the engine's resume guarantee: bit-for-bit the uninterrupted value (and the same work)
    assert done["value"] == ref["value"]
    assert done["error"] == ref["error"]
    assert done["evaluations"] == ref["evaluations"] and done["regions"] == ref["regions"]
    assert json.loads((d / "verdict.json").read_text())["status"] == "converged"
    rows = _history_rows(d)
    assert rows == sorted(set(rows))          # appended to the same log, no row twice


def test_kill_9_after_a_checkpoint_then_resume_gives_the_same_bits(work):
    d = work["base"] / "kill"
    p = work["cubage"].start("run", work["prob"], "--run-dir", d, "--checkpoint-every", "0.5", cwd=work["base"])
    work["cubage"].wait_for(lambda: (d / "partition.npz").is_file(), p, what="the first checkpoint")
    time.sleep(0.3)
    p.send_signal(signal.SIGKILL)
    p.communicate(timeout=30)
    assert p.returncode == -signal.SIGKILL
    assert (d / "occupant.json").is_file()             # nobody cleaned up: a stale lock
    assert not (d / "verdict.json").exists()

    r = work["cubage"]("resume", d, "--json", cwd=work["base"], timeout=120)
    assert r.returncode == 0, r.stderr
    assert "stale lock" in r.stderr
    done = json.loads(r.stdout)
    ref = reference_result(work)
    assert done["status"] == "converged"
    assert done["value"] == ref["value"] and done["evaluations"] == ref["evaluations"]
    rows = _history_rows(d)
    assert rows == sorted(set(rows))


def test_value_agrees_with_scipy(work):
    # an independent check of the figure the bit-for-bit tests compare against
    import math

    from scipy.integrate import nquad
    ref = reference_result(work)

    def f(w, z, y, x):
        return math.exp(-(x * x + y * y + z * z + w * w)) / (1 + 100 * (x - 0.3) ** 2 + 50 * (y + 0.2) ** 2)

    # separable: the z and w factors are (sqrt(pi) erf(2))^2 (Gaussian integral, A&S 7.1.1)
    zw = (math.sqrt(math.pi) * math.erf(2.0)) ** 2
    xy, _ = nquad(lambda y, x: f(0, 0, y, x), [[-2, 2], [-2, 2]], opts={"epsabs": 1e-13, "epsrel": 1e-11})
    assert ref["value"] == pytest.approx(xy * zw, rel=1e-7)


def test_stop_request_file_stops_with_exit_3(tmp_path, cubage):
    prob = tmp_path / "endless.toml"
    prob.write_text(ENDLESS)
    d = tmp_path / "rd"
    p = cubage.start("run", prob, "--json", "--run-dir", d, cwd=tmp_path)
    cubage.wait_for(lambda: progress_lines(d) >= 1, p, what="the first progress line")
    (d / "halt-request").touch()
    out, err = p.communicate(timeout=60)
    assert p.returncode == 3, err
    res = json.loads(out)
    assert res["status"] == "stopped" and res["stopped_by"] == "halt-request"
    assert json.loads((d / "verdict.json").read_text())["status"] == "stopped"
    assert (d / "partition.npz").is_file()
    assert not (d / "halt-request").exists()      # consumed, so a resume is not stopped at once


def _in_process_with_signal(argv, signum, after, capsys):
    """Run cubage.cli.commands.main(argv) here and send ourselves ``signum`` after ``after`` seconds."""
    from cubage.cli.commands import main
    timer = threading.Timer(after, os.kill, (os.getpid(), signum))
    capsys.readouterr()
    timer.start()
    try:
        code = main([str(a) for a in argv])
    finally:
        timer.cancel()
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def test_sigint_without_run_dir_stops_with_the_estimate(tmp_path, capsys):
    prob = tmp_path / "endless.toml"
    prob.write_text(ENDLESS)
    before = signal.getsignal(signal.SIGINT)
    code, out, err = _in_process_with_signal(["run", prob, "--json"], signal.SIGINT, 0.7, capsys)
    assert code == 3, err
    res = json.loads(out)
    assert res["status"] == "stopped" and res["stopped_by"] == "SIGINT"
    assert res["evaluations"] > 0 and res["value"] > 0    # positive integrand, so a positive estimate
    assert signal.getsignal(signal.SIGINT) is before       # handlers restored


def test_sighup_with_run_dir_checkpoints_and_stops(tmp_path, capsys):
    prob = tmp_path / "endless.toml"
    prob.write_text(ENDLESS)
    d = tmp_path / "rd"
    code, out, err = _in_process_with_signal(["run", prob, "--json", "--run-dir", d], signal.SIGHUP, 0.7, capsys)
    assert code == 3, err
    res = json.loads(out)
    assert res["stopped_by"] == "SIGHUP"
    assert json.loads((d / "verdict.json").read_text())["status"] == "stopped"
    assert (d / "partition.npz").is_file() and not (d / "occupant.json").exists()


# --------------------------------------------------------------------------
# issue 10 items 15a and 15g: every phase of a command is covered
# --------------------------------------------------------------------------

QUICK = """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 2]]
[integrand]
expr = "exp(-x*x - y*y)"
[goal]
rel_tol = 1e-9
"""


def test_sigterm_while_the_pool_starts_stops_cleanly(tmp_path, capsys, monkeypatch):
    """issue 10 item 15a: the handlers are installed before any pool starts; SIGTERM then stops the run cleanly."""
    from cubage.session.prepare import PreparedRun
    prob = tmp_path / "endless.toml"
    prob.write_text(ENDLESS)
    d = tmp_path / "rd"
    start, seen = PreparedRun.start_evaluator, {}

    def start_under_fire(self):
        seen["handler"] = signal.getsignal(signal.SIGTERM)
        os.kill(os.getpid(), signal.SIGTERM)           # arrives while the pool is being started
        start(self)
        seen["evaluator"] = self.evaluator
    monkeypatch.setattr(PreparedRun, "start_evaluator", start_under_fire)
    before = signal.getsignal(signal.SIGTERM)
    from cubage.cli.commands import main
    capsys.readouterr()
    code = main(["run", str(prob), "--json", "--run-dir", str(d), "--workers", "2", "--backend", "threads"])
    out, err = capsys.readouterr()
    assert seen["handler"] not in (signal.SIG_DFL, before)        # ours, already installed
    assert seen["evaluator"] is not None
    assert code == 3, err
    res = json.loads(out)
    assert res["status"] == "stopped" and res["stopped_by"] == "SIGTERM"
    assert json.loads((d / "verdict.json").read_text())["status"] == "stopped"
    assert not (d / "occupant.json").exists()
    assert signal.getsignal(signal.SIGTERM) is before


def test_a_run_started_under_nohup_outlives_the_hangup(tmp_path, cubage):
    """``nohup cubage run ...`` (the README's recipe for SSH) starts with SIGHUP ignored; the hang-up at logout
    must not stop the run.  Before, the command's own handler replaced the inherited SIG_IGN and the run
    stopped with status ``stopped`` at logout."""
    prob = tmp_path / "endless.toml"
    prob.write_text(ENDLESS)
    d = tmp_path / "rd"

    def nohup():
        as_from_a_terminal()
        signal.signal(signal.SIGHUP, signal.SIG_IGN)
    p = cubage.start("run", prob, "--json", "--run-dir", d, cwd=tmp_path, preexec_fn=nohup)
    try:
        cubage.wait_for(lambda: progress_lines(d) >= 2, p, what="two progress lines")
        p.send_signal(signal.SIGHUP)
        seen = progress_lines(d)
        cubage.wait_for(lambda: progress_lines(d) >= seen + 2, p, what="progress after the hang-up")
        p.send_signal(signal.SIGTERM)
        out, err = p.communicate(timeout=60)
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()
    assert p.returncode == 3, err
    assert json.loads(out)["stopped_by"] == "SIGTERM"


@pytest.mark.parametrize("delay", [0.5])
def test_sigterm_early_in_a_process_pool_run_leaves_no_workers(tmp_path, delay):
    """issue 10 item 15a: SIGTERM around the pool's start ends cubage; no worker keeps its output pipes open."""
    import subprocess
    import sys
    prob = tmp_path / "endless.toml"
    prob.write_text(ENDLESS)
    entry = ("import sys; sys.stderr.write('ready\\n'); sys.stderr.flush(); "
             "from cubage.cli import main; sys.exit(main())")
    root = Path(__file__).resolve().parents[1]
    p = subprocess.Popen([sys.executable, "-c", entry, "run", str(prob), "--workers", "2", "--backend", "processes",
                          "--json"], cwd=tmp_path, env={**os.environ, "PYTHONPATH": str(root)},
                         stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                         preexec_fn=as_from_a_terminal)
    assert p.stderr.readline() == "ready\n"
    time.sleep(delay)
    p.send_signal(signal.SIGTERM)
    # communicate() returns only when every holder of the pipes (cubage and any worker) has closed them
    out, err = p.communicate(timeout=60)
    assert p.returncode in (3, 130), (p.returncode, err)
    assert "Traceback" not in err
    if p.returncode == 3:
        assert json.loads(out)["stopped_by"] == "SIGTERM"


def test_sigterm_during_the_second_opinion_keeps_the_main_result(tmp_path, capsys, monkeypatch):
    """issue 10 item 15g: SIGTERM in the --second-opinion phase still writes the main result and JSON; lock freed."""
    from cubage.session.driver import RunDriver
    prob = tmp_path / "q.toml"
    prob.write_text(QUICK)
    d = tmp_path / "rd"
    drive, calls = RunDriver.drive, []

    def drive_and_signal(self, *a, **kw):
        calls.append(self)
        if len(calls) == 2:                               # the second opinion's run
            os.kill(os.getpid(), signal.SIGTERM)
        return drive(self, *a, **kw)
    monkeypatch.setattr(RunDriver, "drive", drive_and_signal)
    from cubage.cli.commands import main
    capsys.readouterr()
    code = main(["run", str(prob), "--json", "--run-dir", str(d), "--second-opinion"])
    out, err = capsys.readouterr()
    assert len(calls) == 2
    res = json.loads(out)
    # ∫_0^1 e^{-x^2} dx ∫_0^2 e^{-y^2} dy = (pi/4) erf(1) erf(2)  (Abramowitz & Stegun 7.1.1)
    import math
    assert res["status"] == "converged" and abs(res["value"] - math.pi / 4 * math.erf(1) * math.erf(2)) < 1e-8
    assert res["second_opinion"]["status"] == "stopped" and res["second_opinion"]["stopped_by"] == "SIGTERM"
    assert code == 0, err
    assert json.loads((d / "verdict.json").read_text())["second_opinion"]["status"] == "stopped"
    assert not (d / "occupant.json").exists()
