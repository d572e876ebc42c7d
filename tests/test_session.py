"""The session layer (cubage.session): forecast, JSON rule, result record, status words, driver, follower.

Expected values come from closed forms named beside each check, or from the
contracts written in the modules' docstrings.
"""

from __future__ import annotations

import json
import math
import os
import signal
import socket
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from cubage import Box, Run
from cubage.session import jsonio
from cubage.session.driver import RunDriver, StopSignals
from cubage.session.follower import RunFollower
from cubage.session.forecast import duration_text, forecast, time_to_goal
from cubage.session.prepare import InputError, Overrides, check_budget, check_tolerance, check_workers, prepare_run
from cubage.session.result_record import result_record
from cubage.session.run_directory import LAYOUT, RunDir
from cubage.session.status import ENGINE_WORDS, FINAL, is_final


def _hist(n, err):
    n = np.asarray(n, float)
    return np.column_stack([n, np.ones_like(n), np.ones_like(n), np.asarray(err, float)])


# --------------------------------------------------------------------------
# forecast (issue 10 item 1)
# --------------------------------------------------------------------------

def test_forecast_of_a_flat_power_law_does_not_overflow():
    """issue 10 item 1: the reproduction (n 2e8..2.7e8, err ~ n^-0.01) made math.exp overflow and ended the run."""
    n = np.linspace(2e8, 2.7e8, 20)
    err = 7.6e-7 * (n / n[0]) ** -0.01
    # at slope -0.01 the goal 1e-9 needs n ~ 2e8 * 760^100 evaluations (algebra): out of reach, reported as never
    fc = forecast(_hist(n, err), np.array([1e-9]), 1e6, budget=10**9)
    assert fc.evaluations == math.inf and fc.seconds == math.inf and fc.beyond_budget
    assert duration_text(fc.seconds) == "never"


@pytest.mark.parametrize("history", [
    np.zeros((0, 4)), np.full((8, 4), np.nan), np.full((8, 4), np.inf), np.zeros((3,)), [[1, 2]], "junk", None,
])
def test_forecast_never_raises(history):
    """issue 10 item 1: any failure of forecast code degrades to 'unknown' ('-'), never an exception."""
    assert time_to_goal(history, np.array([1e-3]), 1e5) is None
    assert forecast(history, [np.nan], float("nan")).seconds is None


def test_forecast_on_an_exact_power_law():
    # error = C n^-2; the goal g is met at n* = sqrt(C/g) (algebra, common practice)
    n = np.geomspace(1e3, 1e6, 30)
    C, g, rate = 1e4, 1e-12, 1e5
    fc = forecast(_hist(n, C * n ** -2.0), np.array([g]), rate, budget=1e9)
    assert fc.evaluations == pytest.approx(math.sqrt(C / g), rel=1e-9)
    assert fc.seconds == pytest.approx((math.sqrt(C / g) - n[-1]) / rate, rel=1e-9)
    assert fc.beyond_budget is False
    assert forecast(_hist(n, C * n ** -2.0), np.array([g]), rate, budget=1e7).beyond_budget   # 1e8 > 1e7


def test_one_duration_format():
    """issue 10 item 20: one duration format everywhere (the ticker printed 'eta 107707s')."""
    assert duration_text(107707) == "29 h 55 min"          # 107707 s = 29 h 55 min 7 s (arithmetic)
    assert duration_text(0.25) == "250 ms" and duration_text(12.34) == "12.3 s"
    assert duration_text(245) == "4 min 05 s" and duration_text(86400 * 5) == "5.0 days"
    assert duration_text(None) == "-" and duration_text(float("nan")) == "-" and duration_text(-1) == "-"


def test_a_display_that_raises_does_not_end_the_run():
    """issue 10 item 1: a failure of display code must not end a run; the run goes on to its goal."""
    calls = []

    def broken(snap):
        calls.append(snap.evaluations)
        raise OverflowError("math range error")

    # ∫_[0,1]^2 x y = 1/4 (product formula, common practice)
    run = Run(lambda X: X[:, 0] * X[:, 1], Box([0, 0], [1, 1]), rel_tol=1e-10, snapshot_interval=0.0)
    out = RunDriver(run).drive(broken)
    assert out.result.status == "converged" and out.result.value == pytest.approx(0.25, rel=1e-12)
    assert out.display_errors == len(calls) >= 1 and "OverflowError" in out.display_error


# --------------------------------------------------------------------------
# JSON rule, result record, status words
# --------------------------------------------------------------------------

def test_one_json_rule_for_non_finite_numbers():
    """issue 11 item 3: one rule for NaN/inf in every JSON file (strings 'nan', 'inf', '-inf'), read back by float."""
    obj = {"a": math.nan, "b": [np.inf, -np.inf, 1.5], "c": np.float32(2.0), "d": np.arange(2)}
    text = jsonio.dumps(obj)
    back = json.loads(text)
    assert back == {"a": "nan", "b": ["inf", "-inf", 1.5], "c": 2.0, "d": [0, 1]}
    assert math.isnan(float(back["a"])) and float(back["b"][1]) == -math.inf
    assert jsonio.number_from_json("inf") == math.inf


class _Trust:
    def to_json(self):
        return {"audit": "passed", "worst": [0.1, 0.2]}


def test_result_record_schema_and_trust():
    """issue 11 item 3: one result-record schema; the engine Result's trust object is copied when present."""
    run = Run(lambda X: X[:, 0], Box([0], [1]), rel_tol=1e-12)
    res = run.run()
    res.trust = _Trust()

    class P:   # the fields the record reads from a problem
        title, path, variables, components = "line", Path("line.toml"), ["x"], 1

        class reference:
            value, source = 0.5, "∫_0^1 x dx = 1/2 (elementary)"
    rec = result_record(res, problem=P, written_by="test")
    assert rec["schema"] == "cubage-result 1" and rec["problem"]["name"] == "line"
    assert rec["status"] == "converged" and rec["converged"] is True and rec["final"] is True
    assert rec["trust"] == {"audit": "passed", "worst": [0.1, 0.2]}
    assert rec["reference"]["value"] == 0.5 and abs(rec["reference"]["true_error"]) < 1e-12
    assert "not a guaranteed bound" in rec["error_note"]
    json.dumps(rec, allow_nan=False)


def test_status_words_follow_the_engine():
    """issue 11 item 3: one set of status words with 'is final' (the engine's words plus the session's)."""
    from cubage.engine.run import STATUSES
    assert ENGINE_WORDS == STATUSES
    assert {w for w in STATUSES if is_final(w)} == set(STATUSES) - {"running", "paused"}
    assert is_final("runner-gone") and "runner-gone" in FINAL and not is_final("ready")


@pytest.mark.parametrize("ending", ["converged", "budget-spent", "time-limit", "stopped", "stalled", "failed"])
def test_reopenable_words_are_what_the_engine_reopens(ending):
    """The session's REOPENABLE set is exactly the endings Run.set_goal lets go on."""
    from cubage.session.status import REOPENABLE
    run = Run(lambda X: X[:, 0] * X[:, 1], Box([0, 0], [1, 1]), rel_tol=1e-3)
    run.run()
    run.status = ending                     # as if the run had ended so
    run.set_goal(rel_tol=1e-12, budget=10**7, time_limit=1e6)
    assert (not run.done) == (ending in REOPENABLE)


def test_checks_name_the_source_of_the_value():
    """issue 11 item 3: every goal/method check in one place, each message naming where the value came from."""
    with pytest.raises(InputError, match=r"^--rel-tol: must be a finite number"):
        check_tolerance(-1.0, "--rel-tol")
    with pytest.raises(InputError, match=r"^budget field"):
        check_budget(0, "budget field")
    assert check_workers("auto") == "auto" and check_workers("3") == 3
    with pytest.raises(InputError, match="workers"):
        check_workers(True, "workers")


def test_prepare_run_builds_the_rule_once_and_checks_the_combination(tmp_path):
    from cubage.problem.problem_file import parse_problem
    p = parse_problem('[domain]\nvariables=["x","y"]\nbox=[[0,1],[0,1]]\n[integrand]\nexpr="x*y"\n',
                      path=tmp_path / "xy.toml")
    prep = prepare_run(p, Overrides(rel_tol=1e-9, rule="genz-malik"))
    assert prep.run.rule_name == "genz-malik" and prep.nodes == 17    # Genz-Malik degree 7 in 2-D: 2^2+4*2+1 (1980)
    with pytest.raises(InputError, match=r"--rel-tol/--abs-tol: both tolerances are zero"):
        prepare_run(p, Overrides(rel_tol=0.0, abs_tol=0.0, labels={"rel_tol": "--rel-tol", "abs_tol": "--abs-tol"}))
    with pytest.raises(InputError, match=r"^--rule: unknown rule"):
        prepare_run(p, Overrides(rule="simpson", labels={"rule": "--rule"}))


def test_driver_goal_change_reopens_a_converged_run():
    """The driver honours goal/budget changes: a converged run goes on to a tighter goal."""
    # ∫_[0,1]^2 exp(x + y) = (e - 1)^2 (separable, elementary antiderivative)
    run = Run(lambda X: np.exp(X[:, 0] + X[:, 1]), Box([0, 0], [1, 1]), rel_tol=1e-4, rule="genz-malik")
    d = RunDriver(run)
    first = d.drive().result
    assert first.status == "converged"
    assert d.set_goal(rel_tol=1e-10) is True
    second = d.drive().result
    assert second.status == "converged" and second.value == pytest.approx((math.e - 1) ** 2, rel=1e-10)
    assert second.evaluations > first.evaluations
    with pytest.raises(InputError, match="budget"):
        d.set_goal(budget=1)


def test_stop_signals_stop_what_is_attached_and_restore_handlers(catchable_signals):
    before = signal.getsignal(signal.SIGTERM)
    run = Run(lambda X: X[:, 0], Box([0], [1]), rel_tol=1e-15, budget=10**9)
    with StopSignals() as g:
        g.attach(run)
        os.kill(os.getpid(), signal.SIGTERM)
        assert g.received == "SIGTERM" and run._stop.is_set()
        late = Run(lambda X: X[:, 0], Box([0], [1]))
        g.attach(late)                       # attached after the signal: stopped at once
        assert late._stop.is_set()
        with pytest.raises(KeyboardInterrupt):
            os.kill(os.getpid(), signal.SIGTERM)   # a second signal is the way out of a hanging step
    with StopSignals():
        with pytest.raises(KeyboardInterrupt):    # nothing attached (start-up, a viewer): end the command
            os.kill(os.getpid(), signal.SIGHUP)
    assert signal.getsignal(signal.SIGTERM) is before



def test_stop_signals_leave_a_signal_ignored_at_start_ignored(catchable_signals):
    """A command started under ``nohup`` (SIGHUP ignored) must outlive the terminal: the README's long-run
    recipe is ``nohup cubage run ... &``.  Before, StopSignals replaced the inherited SIG_IGN and logging out
    stopped the run."""
    before = signal.signal(signal.SIGHUP, signal.SIG_IGN)
    try:
        run = Run(lambda X: X[:, 0], Box([0], [1]), rel_tol=1e-15, budget=10**9)
        with StopSignals() as g:
            g.attach(run)
            assert signal.getsignal(signal.SIGHUP) is signal.SIG_IGN
            os.kill(os.getpid(), signal.SIGHUP)            # ignored by the kernel: nothing to deliver
            assert g.received is None and not run._stop.is_set()
            os.kill(os.getpid(), signal.SIGTERM)           # the others still stop the run
            assert g.received == "SIGTERM" and run._stop.is_set()
        assert signal.getsignal(signal.SIGHUP) is signal.SIG_IGN
    finally:
        signal.signal(signal.SIGHUP, before)

# --------------------------------------------------------------------------
# follower
# --------------------------------------------------------------------------

def _started_dir(tmp_path, pid: int) -> Path:
    d = tmp_path / "rd"
    d.mkdir()
    (d / "ledger.json").write_text(json.dumps({"layout": LAYOUT, "problem": "p"}))
    (d / "occupant.json").write_text(json.dumps({"pid": pid, "host": socket.gethostname(), "started": "t"}))
    return d


def test_follower_says_when_the_runner_is_gone(tmp_path):
    """issue 10 item 16: after the runner dies the follower shows it and says how to continue."""
    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    d = _started_dir(tmp_path, int(gone.stdout))
    run = Run(lambda X: X[:, 0], Box([0], [1]), rel_tol=1e-15, budget=10**6)
    run.step()
    from cubage.session.progress_records import trail_line
    (d / "trail.jsonl").write_text(json.dumps(trail_line(run.snapshot())) + "\n")
    f = RunFollower(d)
    assert f.poll() == 1 and f.snapshot.status == "running"
    assert f.status == "runner-gone" and f.runner_gone
    assert f"cubage resume {d}" in f.gone_message


def test_follower_of_a_live_runner_is_not_gone(tmp_path):
    d = _started_dir(tmp_path, os.getpid())
    f = RunFollower(d)
    f.poll()
    assert f.status == "waiting" and f.gone_message == ""


def test_follower_skips_lines_that_are_json_but_not_objects(tmp_path):
    """issue 10 item 15i: a trail line that is valid JSON but not an object must not kill the follower."""
    d = _started_dir(tmp_path, os.getpid())
    run = Run(lambda X: X[:, 0], Box([0], [1]), rel_tol=1e-15, budget=10**6)
    run.step()
    from cubage.session.progress_records import trail_line
    good = json.dumps(trail_line(run.snapshot()))
    (d / "trail.jsonl").write_text("\n".join(["[1, 2]", "3", '"x"', "null", '{"kind": "tick"}', good]) + "\n")
    f = RunFollower(d)
    assert f.poll() == 1 and f.bad_lines == 5 and f.snapshot.evaluations == run.evaluations
    assert "not an object" in f.last_error or "KeyError" in f.last_error


def test_rundir_request_stop_does_not_follow_links(tmp_path):
    """issue 10 item 15: files of a run directory are never followed when they are links."""
    target = tmp_path / "elsewhere.txt"
    target.write_text("keep me")
    d = tmp_path / "rd"
    d.mkdir()
    (d / "halt-request").symlink_to(target)
    from cubage.session.run_directory import RunDirError
    with pytest.raises(RunDirError):
        RunDir(d).request_stop()
    assert target.read_text() == "keep me"
