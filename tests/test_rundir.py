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
from pathlib import Path

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


# --------------------------------------------------------------------------
# issue 10 and issue 11 item 7: refusals with one line, never "internal error"
# --------------------------------------------------------------------------

def _one_line_bad(code, out, err, *needles):
    assert code == 2, (code, out, err)
    assert "internal error" not in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1, err
    for n in needles:
        assert n in err, (n, err)


def test_an_old_layout_is_refused_with_a_clear_message(tmp_path, cli):
    """issue 11 item 7: run directories of the first layout (run.json, progress.jsonl, ...) are refused clearly."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "old"
    d.mkdir()
    for name in ("problem.toml", "run.json", "checkpoint.npz", "progress.jsonl"):
        (d / name).write_text("{}")
    _one_line_bad(*cli("resume", d), "older cubage layout", "cubage run")
    _one_line_bad(*cli("run", a, "--run-dir", d), "older cubage layout")
    _one_line_bad(*cli("watch", d, "--once"), "older cubage layout")


def test_run_dir_below_a_regular_file(tmp_path, cli):
    """issue 10 item 14: --run-dir below a regular file is one line, exit 2."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    (tmp_path / "plain").write_text("x")
    _one_line_bad(*cli("run", a, "--run-dir", tmp_path / "plain" / "rd"), "is a file, not a folder")


def test_ledger_with_wrong_types(tmp_path, cli):
    """issue 10 item 14: a run directory's ledger with wrong types is one line, exit 2."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "3000")[0] == 3
    led = json.loads((d / "ledger.json").read_text())
    for key, bad, needle in (("overrides", [1, 2], "'overrides' must be an object"),
                             ("problem", 7, "'problem' must be a string"),
                             ("overrides", {"workers": "many"}, "overrides.workers"),
                             ("overrides", {"checkpoint_every": "soon"}, "overrides.checkpoint_every"),
                             ("overrides", {"backend": 3}, "overrides.backend")):
        (d / "ledger.json").write_text(json.dumps({**led, key: bad}))
        _one_line_bad(*cli("resume", d), "ledger.json", needle)
        assert not (d / "occupant.json").exists()          # the lock is released after the refusal


@pytest.mark.parametrize("where", ["local header", "central directory", "end record"])
def test_bit_flip_in_the_checkpoint_zip_headers(tmp_path, cli, where):
    """issue 10 item 14: a bit flip in a checkpoint's zip headers is one line, exit 2 (not "internal error")."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "3000")[0] == 3
    ck = d / "partition.npz"
    data = bytearray(ck.read_bytes())
    sig = {"local header": b"PK\x03\x04", "central directory": b"PK\x01\x02", "end record": b"PK\x05\x06"}[where]
    pos = data.find(sig)
    assert pos >= 0
    for off in range(4, min(30, len(data) - pos)):   # flip one bit in each header byte in turn
        flipped = bytearray(data)
        flipped[pos + off] ^= 0x10
        ck.write_bytes(bytes(flipped))
        code, out, err = cli("resume", d, "--json")
        if code == 2:
            assert "internal error" not in err and "partition.npz" in err, err
        else:                                # a flip the container does not notice (a date field)
            assert code in (0, 3), err
            assert "internal error" not in err
    ck.write_bytes(bytes(data))


def test_links_in_a_run_directory_are_refused(tmp_path, cli):
    """issue 10 item 15: resume never follows a symlinked trail out of the run directory."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "3000")[0] == 3
    outside = tmp_path / "precious.log"
    outside.write_text("my notes\n")
    (d / "trail.jsonl").unlink()
    (d / "trail.jsonl").symlink_to(outside)
    _one_line_bad(*cli("resume", d), "trail.jsonl", "symbolic link")
    assert outside.read_text() == "my notes\n"
    (d / "trail.jsonl").unlink()
    (d / "verdict.json").unlink()
    (d / "verdict.json").symlink_to(outside)
    _one_line_bad(*cli("run", a, "--run-dir", d), "verdict.json", "symbolic link")
    assert outside.read_text() == "my notes\n"


def test_run_dir_in_a_folder_that_cannot_be_written(tmp_path, cli):
    """issue 10 item 15h: a run directory under /proc or in a read-only folder: one line naming the cause."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    _one_line_bad(*cli("run", a, "--run-dir", "/proc/cubage-test-rd"), "/proc/cubage-test-rd", "cannot")
    ro = Path("/sys/kernel/cubage-test-rd")      # sysfs refuses new folders even to root
    _one_line_bad(*cli("run", a, "--run-dir", ro), str(ro), "cannot be made")


def test_read_only_run_directory(tmp_path, cli, monkeypatch):
    """issue 10 item 15h: a read-only run directory: one line naming the cause, not masked by the lock release."""
    import errno

    from cubage.session import run_directory
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "3000")[0] == 3
    real_open = os.open

    def read_only(path, flags, *args, **kw):          # what a read-only mount answers to every write
        if flags & (os.O_WRONLY | os.O_RDWR | os.O_CREAT) and str(d) in str(path):
            raise OSError(errno.EROFS, "Read-only file system", str(path))
        return real_open(path, flags, *args, **kw)
    monkeypatch.setattr(run_directory.os, "open", read_only)
    _one_line_bad(*cli("resume", d), "Read-only file system")


def test_disk_full_during_a_checkpoint(tmp_path, cli, monkeypatch):
    """issue 10 item 15h: a disk that fills during a checkpoint: one line naming the cause; the estimate is kept."""
    import errno

    from cubage.engine.run import Run
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)

    def full(self, path):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))
    monkeypatch.setattr(Run, "save_checkpoint", full)
    code, out, err = cli("run", a, "--run-dir", tmp_path / "rd", "--json")
    assert code == 2 and "No space left on device" in err and "partition.npz" in err
    assert "internal error" not in err and "Traceback" not in err
    rec = json.loads(out)
    assert "No space left" in rec["storage_error"] and rec["evaluations"] > 0
    assert not (tmp_path / "rd" / "occupant.json").exists()


def test_a_second_run_on_a_directory_in_use_says_what_to_do(tmp_path, cli):
    """issue 10 item 21: a second run on a directory in use must not suggest resume (which fails with "in use")."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "3000")[0] == 3
    holder = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        (d / "occupant.json").write_text(json.dumps({"pid": holder.pid, "host": socket.gethostname(),
                                                     "started": "2026-01-01T00:00:00"}))
        code, out, err = cli("run", a, "--run-dir", d)
        _one_line_bad(code, out, err, f"in use by pid {holder.pid}", f"cubage watch {d}", "halt-request")
        assert "resume" not in err
        _one_line_bad(*cli("resume", d), f"in use by pid {holder.pid}")
    finally:
        holder.kill()
        holder.wait()


def _dead_pid() -> int:
    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    return int(gone.stdout)


def test_watch_says_the_runner_is_gone_and_how_to_continue(tmp_path, cli):
    """issue 10 item 16: after the runner dies, watch shows that it is gone and says `cubage resume DIR`."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "3000")[0] == 3
    # what kill -9 leaves: no verdict, the lock of a process that is gone, a trail whose last word is "running"
    (d / "verdict.json").unlink()
    lines = (d / "trail.jsonl").read_text().splitlines()
    last = json.loads(lines[-1])
    last["status"] = "running"
    (d / "trail.jsonl").write_text("\n".join(lines[:-1] + [json.dumps(last)]) + "\n")
    (d / "occupant.json").write_text(json.dumps({"pid": _dead_pid(), "host": socket.gethostname(), "started": "t"}))
    code, out, err = cli("watch", d, "--plain")
    assert code == 3, err
    assert "is gone" in out and f"cubage resume {d}" in out
    assert "runner-gone" not in err and "Traceback" not in err


def test_watch_of_an_ended_run_says_why_and_what_the_checks_found(tmp_path, cli):
    """issue 12 item 5: `cubage watch` of a run that ended short prints the engine's reason and its trust checks
    from the verdict, as `cubage run` does (it printed the status word alone).  The integral of 1/x over
    [0, 1] diverges (any calculus text): the reason names the face x = 0 and says the integral may diverge."""
    a = tmp_path / "a.toml"
    a.write_text('[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n[integrand]\nexpr = "1/x + y"\n'
                 '[goal]\nrel_tol = 1e-4\n')
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "50000")[0] == 3
    code, out, err = cli("watch", d, "--plain")
    assert code == 3, err
    lines = out.splitlines()
    assert any(ln.startswith("cubage watch: ended: budget-spent") for ln in lines), out
    assert any(ln.startswith("why ") for ln in lines) and "may diverge" in out, out
    assert any(ln.startswith("checks      no audit") for ln in lines), out
    assert any(ln.startswith("non-smooth  x∈[0,") for ln in lines), out


def test_watch_survives_lines_that_are_not_objects(tmp_path, cli):
    """issue 10 item 15i: a trail line that is valid JSON but not an object must not kill `cubage watch`."""
    a = tmp_path / "a.toml"
    a.write_text(GAUSS2)
    d = tmp_path / "rd"
    assert cli("run", a, "--run-dir", d, "--budget", "3000")[0] == 3
    with open(d / "trail.jsonl", "a") as fh:
        fh.write("[1, 2, 3]\n42\nnull\n")
    code, out, err = cli("watch", d, "--plain")
    assert code == 3, err                                  # the verdict: budget-spent
    assert "ended: budget-spent" in out and "unreadable line skipped" in err and "Traceback" not in err


def test_trail_lines_stay_small_whatever_the_history(tmp_path):
    """issue 10 item 10: a trail line is small and of constant size (history as deltas, the map in its own file)."""
    from cubage import Simplex
    from cubage.engine.run import Run
    from cubage.session.progress_records import ROWS_PER_LINE, map_record, new_rows, trail_line

    # a 6-D simplex run whose snapshot carries a long history, many regions and worst-region vertices
    verts = np.vstack([np.zeros(6), np.eye(6)])
    run = Run(lambda X: 1 / (0.01 + (X * X).sum(1)), Simplex(verts), rel_tol=1e-15, budget=10**8, batch=1)
    for _ in range(400):
        run.step()
    snap = run.snapshot()
    assert len(snap.history) > 300
    sizes = [len(json.dumps(trail_line(snap, new_rows(snap.history, after)))) for after in (-1.0, 1e3, 1e5)]
    assert max(sizes) < 1500, sizes                      # bounded, whatever the number of new rows
    assert len(json.loads(json.dumps(trail_line(snap, new_rows(snap.history, -1.0))))["rows"]) == ROWS_PER_LINE
    assert len(json.dumps(map_record(snap))) > 10 * max(sizes)   # the large part lives in trail-map.json


def test_ctrl_c_leaves_watch_and_not_the_run(tmp_path, cli, catchable_signals):
    """Ctrl-C in `cubage watch` leaves the viewer quietly (exit 0); the followed run is not touched."""
    import signal
    import threading
    d = tmp_path / "rd"
    d.mkdir()
    (d / "ledger.json").write_text(json.dumps({"layout": "cubage-run-dir 2", "problem": "p"}))
    (d / "occupant.json").write_text(json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "started": "t"}))
    timer = threading.Timer(0.8, os.kill, (os.getpid(), signal.SIGINT))
    timer.start()
    try:
        code, out, err = cli("watch", d, "--plain")
    finally:
        timer.cancel()
    assert code == 0 and "left; the run goes on" in out and "Traceback" not in err
    assert not (d / "halt-request").exists()
