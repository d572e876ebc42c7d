"""Run directories: layout, lock, refusals, resume with a new goal, damaged checkpoints, the trail.

Integral values are checked against closed forms named beside each check;
file layout and exit codes against the run-directory contract (docs in
cubature/session/run_directory.py).
"""

from __future__ import annotations

import json
import math
import os
import socket
import subprocess
import sys

import numpy as np
import pytest

from cubage.engine.run import Snapshot
from cubage.session.progress_records import record_to_snapshot
from cubage.session.run_directory import RunDir, RunDirError, TrailLog, pid_alive

GAUSS2 = """
title = "narrow 2-D Gaussian on a square"
[domain]
variables = ["x", "y"]
box = [[-1, 1], [-1, 1]]
[integrand]
expr = "exp(-50*(x*x + y*y))"
[goal]
rel_tol = 1e-6
[reference]
value = 0.06283185307179585
source = "(sqrt(pi/50) erf(sqrt(50)))^2, erf as in Abramowitz & Stegun 7.1.1"
"""

OTHER = """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 1]]
[integrand]
expr = "exp(-40*((x - 0.3)**2 + (y - 0.6)**2))"
"""


def _gauss_exact():
    # ∫_[-1,1]^2 exp(-50(x^2+y^2)) = (sqrt(pi/50) erf(sqrt(50)))^2 (separable Gaussian, A&S 7.1.1)
    return (math.sqrt(math.pi / 50) * math.erf(math.sqrt(50))) ** 2


def test_run_dir_layout(tmp_path, cli):
    prob = tmp_path / "g.toml"
    prob.write_text(GAUSS2)
    d = tmp_path / "runs" / "one"
    code, out, err = cli("run", prob, "--run-dir", d, "--json")
    assert code == 0, err
    for name in ("source.toml", "ledger.json", "partition.npz", "trail.jsonl", "verdict.json"):
        assert (d / name).is_file(), name
    assert not (d / "occupant.json").exists()                  # released at the end
    assert (d / "source.toml").read_text() == prob.read_text()
    info = json.loads((d / "ledger.json").read_text())
    for key in ("layout", "settings", "overrides", "problem_fingerprint", "sessions"):
        assert key in info, key
    for key in ("cubage_version", "started", "host", "pid"):
        assert key in info["sessions"][0], key
    assert info["sessions"][0]["host"] == socket.gethostname()
    res = json.loads((d / "verdict.json").read_text())
    assert res["status"] == "converged"
    assert res["value"] == pytest.approx(_gauss_exact(), rel=1e-6)
    assert res == json.loads(out)                     # --json prints the same record
    recs = [json.loads(line) for line in (d / "trail.jsonl").read_text().splitlines()]
    assert recs and all(r["kind"] == "tick" for r in recs)
    assert recs[-1]["status"] == "converged"
    hist = None
    snap = None
    the_map = json.loads((d / "trail-map.json").read_text())
    for r in recs:
        snap = record_to_snapshot(r, history=hist, map_rec=the_map, previous=snap)
        hist = snap.history
    assert isinstance(snap, Snapshot)
    assert snap.value[0] == pytest.approx(res["value"], rel=1e-12)
    assert the_map["kind"] == "map" and len(the_map["map"]["centres"]) > 0    # the map lives beside the trail
    assert all("map" not in r and "top" not in r for r in recs)


def test_run_refuses_a_dir_of_another_problem(tmp_path, cli):
    a, b = tmp_path / "a.toml", tmp_path / "b.toml"
    a.write_text(GAUSS2)
    b.write_text(OTHER)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d)[0] == 0
    code, out, err = cli("run", b, "--run-dir", d)
    assert code == 2 and out == ""
    assert len(err.splitlines()) == 1 and "another problem" in err and str(d) in err


def test_run_on_a_dir_with_a_checkpoint_points_to_resume(tmp_path, cli):
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "2000")[0] == 3
    code, out, err = cli("run", a, "--run-dir", d)
    assert code == 2 and len(err.splitlines()) == 1
    assert f"cubage resume {d}" in err


def test_run_refuses_a_folder_with_other_files(tmp_path, cli):
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "thesis"
    d.mkdir()
    (d / "chapter1.tex").write_text("x")
    code, _, err = cli("run", a, "--run-dir", d)
    assert code == 2 and "not an empty folder" in err


def test_locked_dir_refuses_naming_the_pid(tmp_path, cli):
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    d.mkdir()
    holder = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        (d / "occupant.json").write_text(json.dumps({"pid": holder.pid, "host": socket.gethostname(),
                                            "started": "2026-01-01T00:00:00"}))
        code, out, err = cli("run", a, "--run-dir", d)
        assert code == 2 and out == ""
        assert len(err.splitlines()) == 1 and f"pid {holder.pid}" in err
        # the lock is left alone
        assert json.loads((d / "occupant.json").read_text())["pid"] == holder.pid
    finally:
        holder.kill()
        holder.wait()


def test_stale_lock_is_taken_over(tmp_path, cli):
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    d.mkdir()
    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    pid = int(gone.stdout)
    assert not pid_alive(pid)
    (d / "occupant.json").write_text(json.dumps({"pid": pid, "host": socket.gethostname(), "started": "earlier"}))
    code, out, err = cli("run", a, "--run-dir", d, "--json")
    assert code == 0, err
    assert f"stale lock of pid {pid}" in err
    assert not (d / "occupant.json").exists()


def test_lock_of_another_host_is_respected(tmp_path):
    d = tmp_path / "rd"
    d.mkdir()
    (d / "occupant.json").write_text(json.dumps({"pid": 1, "host": "some-other-machine", "started": "t"}))
    with pytest.raises(RunDirError, match="pid 1 on host some-other-machine"):
        RunDir(d).acquire()


def test_lock_is_exclusive_within_one_process_pair(tmp_path):
    d = tmp_path / "rd"
    d.mkdir()
    first = RunDir(d)
    first.acquire()
    held = json.loads((d / "occupant.json").read_text())
    assert held["pid"] == os.getpid() and held["host"] == socket.gethostname()
    first.release()
    assert not (d / "occupant.json").exists()


def test_truncated_checkpoint_is_a_clear_error_on_resume(tmp_path, cli):
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "3000")[0] == 3
    ck = d / "partition.npz"
    data = ck.read_bytes()
    ck.write_bytes(data[: len(data) // 2])
    code, out, err = cli("resume", d)
    assert code == 2 and out == ""
    assert len(err.splitlines()) == 1 and "partition.npz" in err and "truncated or corrupted" in err
    assert not (d / "occupant.json").exists()


def test_checkpoint_of_another_problem_is_refused(tmp_path, cli):
    a, b = tmp_path / "a.toml", tmp_path / "b.toml"
    a.write_text(GAUSS2)
    b.write_text(OTHER)
    da, db = tmp_path / "ra", tmp_path / "rb"
    assert cli("run", a, "--run-dir", da, "--budget", "3000")[0] == 3
    assert cli("run", b, "--run-dir", db, "--budget", "700")[0] == 3
    (da / "partition.npz").write_bytes((db / "partition.npz").read_bytes())
    code, _, err = cli("resume", da)
    assert code == 2 and len(err.splitlines()) == 1 and "another problem" in err


def test_resume_without_checkpoint_says_how_to_start(tmp_path, cli):
    d = tmp_path / "rd"
    d.mkdir()
    (d / "ledger.json").write_text('{"layout": "cubage-run-dir 2"}')
    (d / "source.toml").write_text(GAUSS2)
    code, _, err = cli("resume", d)
    assert code == 2 and "no checkpoint yet" in err and "cubage run" in err


def test_resume_with_a_budget_then_a_tighter_goal(tmp_path, cli):
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    code, out, _ = cli("run", a, "--run-dir", d, "--budget", "1000", "--json")
    assert code == 3 and json.loads(out)["status"] == "budget-spent"
    # same budget: still short
    code, out, _ = cli("resume", d, "--json")
    assert code == 3 and json.loads(out)["status"] == "budget-spent"
    code, out, _ = cli("resume", d, "--json", "--budget", "10_000_000")
    res = json.loads(out)
    assert code == 0 and res["status"] == "converged"
    assert res["value"] == pytest.approx(_gauss_exact(), rel=1e-6)
    # a converged run resumed with a tighter goal keeps going until it meets that one
    code, out, _ = cli("resume", d, "--json", "--rel-tol", "1e-12")
    res2 = json.loads(out)
    assert code == 0 and res2["status"] == "converged"
    assert res2["evaluations"] > res["evaluations"]
    assert res2["error"] <= 1e-12 * abs(res2["value"])
    assert res2["value"] == pytest.approx(_gauss_exact(), rel=1e-11)
    info = json.loads((d / "ledger.json").read_text())
    assert len(info["sessions"]) == 4 and [e["command"] for e in info["sessions"]] == ["run"] + ["resume"] * 3
    assert info["sessions"][-1]["overrides"] == {"rel_tol": 1e-12}
    # the trail got appended to, its history never repeats a row
    rows = [row[0] for line in (d / "trail.jsonl").read_text().splitlines()
            for row in json.loads(line)["rows"]]
    assert rows == sorted(rows) and len(rows) == len(set(rows))


class _Snap:   # the fields trail_line and map_record read
    step, evaluations, regions, elapsed, rate, status, message = 1, 0, 1, 0.0, 0.0, "running", ""
    value = error = goal = np.ones(1)
    rel_tol, abs_tol, budget = 1e-6, 0.0, 100
    top = ()
    depth_error = np.zeros(1)
    map_centres = map_sizes = np.zeros((0, 1))
    map_lower, map_upper = np.zeros(1), np.ones(1)
    components = 1


def test_trail_skips_rows_already_written(tmp_path):
    log = TrailLog(RunDir(tmp_path), after_evaluations=20.0)
    s = _Snap()
    s.history = np.array([[10.0, 1, 1, 1], [20.0, 1, 1, 1], [30.0, 1, 1, 1]])
    log.write(s)
    s.history = np.array([[20.0, 1, 1, 1], [30.0, 1, 1, 1], [40.0, 1, 1, 1]])   # thinned + one new row
    log.write(s)
    log.close()
    recs = [json.loads(x) for x in (tmp_path / "trail.jsonl").read_text().splitlines()]
    assert [r[0] for r in recs[0]["rows"]] == [30.0]
    assert [r[0] for r in recs[1]["rows"]] == [40.0]
    assert json.loads((tmp_path / "trail-map.json").read_text())["kind"] == "map"


def test_trail_repairs_a_cut_last_line(tmp_path):
    p = tmp_path / "trail.jsonl"
    p.write_text('{"kind": "tick", "rows": [[5.0, 1, 1, 1]]}\n{"kind": "ti')
    d = RunDir(tmp_path)
    assert d.last_logged_evaluations() == 5.0
    log = TrailLog(d)
    log._fh.write("{}\n")
    log.close()
    assert p.read_text().splitlines()[-1] == "{}"
