"""A problem file or a run directory never connects cubage to a dask cluster by itself.

Issue 10 item 0: the cluster protocol unpickles what the scheduler sends, so
whoever runs a scheduler that cubage connects to can run code in cubage.  A
cluster is therefore used only when named on the command line (``--cluster``)
or when the file is trusted with ``--allow-python``.  The tests stand up a
"hostile scheduler": a plain TCP listener on 127.0.0.1 that records whether
anything connected to it.

Issue 10 item 15b (second half): an address that is not a dask scheduler
gives one line, exit 2, within seconds.
"""

from __future__ import annotations

import json
import socket
import threading

import numpy as np
import pytest

pytest.importorskip("distributed")

PROBLEM = """
title = "plane over the unit square"
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 1]]
[integrand]
expr = "x + y"
[goal]
rel_tol = 1e-8
[method]
workers = 2
backend = "{backend}"
cluster = "{cluster}"
"""


class Listener:
    """A TCP listener on loopback that records connections; ``mode`` says what it does with one.

    "silent" keeps the connection open and says nothing; "close" hangs up at
    once; "http" answers like a web server.  Everything is bounded in time.
    """

    def __init__(self, mode: str = "silent"):
        self.mode = mode
        self.connections = 0
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(16)
        self.sock.settimeout(0.2)
        self.port = self.sock.getsockname()[1]
        self.address = f"tcp://127.0.0.1:{self.port}"
        self._open: list[socket.socket] = []
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._serve, daemon=True)
        self._thread.start()

    def _serve(self):
        while not self._stop.is_set():
            try:
                conn, _ = self.sock.accept()
            except (TimeoutError, OSError):
                continue
            self.connections += 1
            if self.mode == "close":
                conn.close()
            elif self.mode == "http":
                conn.settimeout(1.0)
                try:
                    conn.recv(1024)
                except OSError:
                    pass
                conn.sendall(b"HTTP/1.0 200 OK\r\nContent-Length: 2\r\n\r\nhi")
                conn.close()
            else:
                self._open.append(conn)

    def close(self):
        self._stop.set()
        self._thread.join(5)
        for c in self._open:
            c.close()
        self.sock.close()


@pytest.fixture(autouse=True)
def _short_handshake_wait(monkeypatch):
    # a silent server is recognised after CONNECT_SECONDS; one second keeps these tests short
    from cubage.engine import parallel
    monkeypatch.setattr(parallel, "CONNECT_SECONDS", 1.0)


@pytest.fixture
def hostile():
    lst = Listener("silent")
    yield lst
    lst.close()


def run_cli(capsys, *argv):
    from cubage.cli.commands import main
    capsys.readouterr()
    code = main([str(a) for a in argv])
    cap = capsys.readouterr()
    return code, cap.out, cap.err


@pytest.mark.parametrize("backend", ["dask", "auto"])
def test_problem_file_cluster_is_never_connected(tmp_path, capsys, hostile, backend):
    """issue 10 item 0: check, run and resume of a file naming a cluster do not connect to it."""
    prob = tmp_path / "p.toml"
    prob.write_text(PROBLEM.format(backend=backend, cluster=hostile.address))
    code, out, err = run_cli(capsys, "check", prob)
    assert code == 0, err
    assert "not used" in out
    code, out, err = run_cli(capsys, "run", prob, "--json", "--run-dir", tmp_path / "rd")
    assert code == 0, err
    rec = json.loads(out)
    # x + y over the unit square is 1 (by hand: 1/2 + 1/2)
    assert rec["status"] == "converged" and abs(rec["value"] - 1.0) < 1e-12
    assert "[method] cluster" in err and "not used" in err and "\n" not in err.strip().split("note: ", 1)[1][:10]
    # a run directory whose saved settings name the cluster: resume must not reconnect either
    info_path = tmp_path / "rd" / "ledger.json"
    info = json.loads(info_path.read_text())
    info.setdefault("overrides", {}).update({"cluster": hostile.address, "backend": "dask"})
    info_path.write_text(json.dumps(info))
    code, out, err = run_cli(capsys, "resume", tmp_path / "rd", "--json", "--rel-tol", "1e-10")
    assert code == 0, err
    assert "not reconnected" in err
    assert hostile.connections == 0


def test_text_ui_evaluator_ignores_an_untrusted_cluster(tmp_path, hostile):
    """issue 10 item 0: the UI prepares its run through the session (prepare_run, start_evaluator=True, as
    tui/run_view.py does); the file's cluster is not used."""
    from cubage.problem.problem_file import load_problem
    from cubage.session.prepare import Overrides, prepare_run
    prob = tmp_path / "p.toml"
    prob.write_text(PROBLEM.format(backend="dask", cluster=hostile.address))
    problem = load_problem(prob)
    assert problem.method.cluster is None and problem.method.cluster_ignored == hostile.address
    prep = prepare_run(problem, Overrides(workers=2), start_evaluator=True)
    try:
        assert "dask" not in prep.evaluation
        assert any("not used" in n for n in prep.notes)
    finally:
        prep.close()
    assert hostile.connections == 0


def test_cluster_named_on_the_command_line_is_tried(tmp_path, capsys, hostile):
    """issue 10 item 0 and 15b: the listener does see a connection when the user names it (so the
    tests above can see one), and a server that is not a dask scheduler is one line, exit 2."""
    prob = tmp_path / "p.toml"
    prob.write_text(PROBLEM.format(backend="auto", cluster="tcp://127.0.0.1:1"))
    code, out, err = run_cli(capsys, "run", prob, "--cluster", hostile.address)
    assert code == 2
    assert hostile.connections >= 1
    assert err.count("\n") == 1 and "not a dask scheduler" in err and "Traceback" not in err


def test_allow_python_trusts_the_file_cluster(tmp_path, capsys, hostile):
    """issue 10 item 0: --allow-python (the explicit trust flag) lets the file's cluster be used."""
    prob = tmp_path / "p.toml"
    prob.write_text(PROBLEM.format(backend="dask", cluster=hostile.address))
    code, out, err = run_cli(capsys, "run", prob, "--allow-python")
    assert code == 2 and hostile.connections >= 1
    assert "[method] cluster" in err and "not a dask scheduler" in err


@pytest.mark.parametrize("mode", ["close", "http"])
def test_not_a_scheduler_is_one_line_exit_2(tmp_path, capsys, mode):
    """issue 10 item 15b: a server that hangs up or speaks HTTP: one line, exit 2, no traceback."""
    lst = Listener(mode)
    try:
        prob = tmp_path / "p.toml"
        prob.write_text(PROBLEM.format(backend="auto", cluster="tcp://127.0.0.1:1"))
        code, out, err = run_cli(capsys, "run", prob, "--cluster", lst.address)
    finally:
        lst.close()
    assert code == 2 and err.count("\n") == 1 and "not a dask scheduler" in err, err
    assert lst.connections >= 1


@pytest.mark.parametrize("cluster, words", [
    ("http://127.0.0.1:1", "unsupported scheme"),
    ("udp://127.0.0.1:1", "unsupported scheme"),
    ("tcp://127.0.0.1:notaport", "not a scheduler address"),
])
def test_bad_cluster_addresses_are_one_line(tmp_path, capsys, cluster, words):
    """issue 10 item 15b: a bad scheme or address: one line, exit 2."""
    prob = tmp_path / "p.toml"
    prob.write_text(PROBLEM.format(backend="auto", cluster="tcp://127.0.0.1:1"))
    code, out, err = run_cli(capsys, "run", prob, "--cluster", cluster)
    assert code == 2 and err.count("\n") == 1 and words in err, err


@pytest.mark.parametrize("content", ["not json at all", "[1, 2]", '{"id": "x"}', '{"address": 5}'])
def test_scheduler_file_that_is_not_one(tmp_path, capsys, content):
    """issue 10 item 15b: a scheduler file that is not one: one line, exit 2."""
    sf = tmp_path / "scheduler.json"
    sf.write_text(content)
    prob = tmp_path / "p.toml"
    prob.write_text(PROBLEM.format(backend="auto", cluster="tcp://127.0.0.1:1"))
    code, out, err = run_cli(capsys, "run", prob, "--cluster", sf)
    assert code == 2 and err.count("\n") == 1 and "not a dask scheduler file" in err, err


def test_workers_from_a_file_are_capped_at_the_cores(tmp_path, capsys):
    """issue 10 item 15d: workers = 100000 in a file is capped at the machine's cores (with a note)."""
    import os

    from cubage.problem.problem_file import load_problem
    prob = tmp_path / "p.toml"
    prob.write_text(PROBLEM.format(backend="threads", cluster="x").replace('cluster = "x"\n', "")
                    .replace("workers = 2", "workers = 100000"))
    problem = load_problem(prob)
    cores = os.cpu_count() or 1
    assert problem.method.workers == cores and problem.method.workers_asked == 100000
    code, out, err = run_cli(capsys, "run", prob, "--json")
    assert code == 0, err
    assert "capped" in err
    assert np.isclose(json.loads(out)["value"], 1.0, rtol=1e-12)  # x + y over the unit square: 1 (by hand)


# ---------------------------------------------------------------------------
# issue 10 item 15b: a worker lost mid-run
# ---------------------------------------------------------------------------

_LOST = threading.Event()


def losing_a_worker(X):
    """Closes the dask worker it runs on, once, in the middle of a task (module level: pickled by name)."""
    if not _LOST.is_set() and X.shape[0] >= 64:
        import time

        import distributed
        try:
            worker = distributed.get_worker()
        except ValueError:
            worker = None                       # in-process: not in a worker
        if worker is not None and not _LOST.is_set():
            _LOST.set()
            worker.loop.add_callback(worker.close)
            time.sleep(0.5)
    return 1.0 / (1e-4 + (X[:, 0] - 0.3) ** 2 + (X[:, 1] - 0.6) ** 2)


def test_a_lost_dask_worker_is_retried_on_the_others():
    """issue 10 item 15b: a dask worker lost in the middle of a task: the task runs again on the remaining
    worker and the run ends as if nothing happened (the same bits as in-process)."""
    import cubage
    from cubage.engine.parallel import make_evaluator
    distributed = pytest.importorskip("distributed")
    box = cubage.Box([0.0, 0.0], [1.0, 1.0])
    ref = cubage.integrate(losing_a_worker, box, rel_tol=1e-6)
    _LOST.clear()
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp",
                                  host="127.0.0.1", dashboard_address=None) as lc:
        with make_evaluator(2, "dask", lc.scheduler_address, chunk_points=128) as ev:
            res = cubage.integrate(losing_a_worker, box, rel_tol=1e-6, evaluator=ev)
            left = len(ev._client.nthreads())
    assert _LOST.is_set() and left == 1        # a worker was lost
    assert res.status == "converged" and np.array_equal(res.values, ref.values)


def test_a_cluster_left_without_workers_ends_the_run(monkeypatch):
    """issue 10 item 15b: when every worker is gone the run ends with a clear one-line failure
    instead of blocking; the state is the last complete step's."""
    import time

    import cubage
    from cubage.engine import parallel
    distributed = pytest.importorskip("distributed")
    monkeypatch.setattr(parallel, "DASK_NO_WORKER_SECONDS", 1.0)

    def slow(X):
        time.sleep(0.05)
        return 1.0 / (1e-4 + (X[:, 0] - 0.3) ** 2 + (X[:, 1] - 0.6) ** 2)

    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tcp",
                                  host="127.0.0.1", dashboard_address=None) as lc:
        ev = parallel.make_evaluator(1, "dask", lc.scheduler_address, chunk_points=64)
        run = cubage.Run(slow, cubage.Box([0.0, 0.0], [1.0, 1.0]), rel_tol=1e-13, evaluator=ev)
        for _ in range(3):
            run.step()
        before = run.evaluations
        lc.scale(0)
        with pytest.raises(cubage.IntegrandError) as info:
            run.run()
        ev.close()
    assert "no worker" in str(info.value) and "\n" not in str(info.value)
    assert run.status == "failed" and run.evaluations >= before


SCAN = PROBLEM.replace('expr = "x + y"', 'expr = "a * (x + y)"\nconstants = {{ a = 1.0 }}') + "[scan]\na = [1.0, 2.0]\n"


def test_scans_follow_the_same_cluster_rule_as_runs(tmp_path, capsys, hostile):
    """Cleanup item 1: a scan's file cluster is treated like a run's (one rule, session.prepare.choose_cluster):
    untrusted, it is ignored with the same note and nothing connects (the scan used to be refused); trusted with
    --allow-python, or named with --cluster, it is contacted (here: not a scheduler, one line, exit 2)."""
    prob = tmp_path / "s.toml"
    prob.write_text(SCAN.format(backend="auto", cluster=hostile.address))
    code, out, err = run_cli(capsys, "run", prob, "--json", "--run-dir", tmp_path / "rd")
    assert code == 0, err
    rec = json.loads(out)
    # a (x + y) over the unit square is a (by hand: a/2 + a/2)
    assert [round(p["value"], 10) for p in rec["points"]] == [1.0, 2.0]
    assert err.count("\n") == 1 and "[method] cluster" in err and "not used" in err
    # resume of the scan: the copy's cluster is not contacted either
    code, out, err = run_cli(capsys, "resume", tmp_path / "rd", "--json")
    assert code == 0, err
    assert hostile.connections == 0
    code, out, err = run_cli(capsys, "run", prob, "--allow-python")
    assert code == 2 and hostile.connections >= 1
    assert err.count("\n") == 1 and "[method] cluster" in err and "not a dask scheduler" in err
    seen = hostile.connections
    code, out, err = run_cli(capsys, "run", prob, "--cluster", hostile.address)
    assert code == 2 and hostile.connections > seen
    assert err.count("\n") == 1 and "--cluster" in err and "not a dask scheduler" in err


def test_run_and_scan_notes_about_a_file_cluster_are_the_same(tmp_path):
    """Cleanup item 1: runs and scans take the cluster and its note from one session function."""
    from cubage.problem.problem_file import load_problem
    from cubage.session.prepare import Overrides, choose_cluster, prepare_run, prepare_scan
    run_file, scan_file = tmp_path / "p.toml", tmp_path / "s.toml"
    run_file.write_text(PROBLEM.format(backend="auto", cluster="tcp://127.0.0.1:9"))
    scan_file.write_text(SCAN.format(backend="auto", cluster="tcp://127.0.0.1:9"))
    run_p, scan_p = load_problem(run_file), load_problem(scan_file)
    plan = prepare_scan(scan_p)
    prep = prepare_run(run_p, start_evaluator=True)
    try:
        assert plan.cluster is None and "dask" not in prep.evaluation
        assert [n.split(" not used")[1] for n in plan.notes] == [n.split(" not used")[1] for n in prep.notes]
    finally:
        prep.close()
    assert choose_cluster(scan_p, "tcp://elsewhere:8786") == ("tcp://elsewhere:8786", None)
    trusted = load_problem(scan_file, allow_python=True)
    assert prepare_scan(trusted).cluster == "tcp://127.0.0.1:9" and prepare_scan(trusted).notes == []
    assert prepare_scan(trusted, Overrides(cluster="tcp://other:1")).cluster == "tcp://other:1"


def test_text_ui_scans_and_runs_follow_the_same_cluster_rule(tmp_path, hostile):
    """Cleanup item 1: the UI's scan view prepares its scan through the session (prepare_scan) like cubage run:
    an untrusted file's cluster is not contacted (a note says so; the points are right); and the UI started with
    --allow-python trusts an expression file's cluster as the command line does (it used to ignore it)."""
    import asyncio

    from textual.app import App

    from cubage.problem.problem_file import load_problem
    from cubage.tui.app import CubageApp
    from cubage.tui.run_view import RunView
    from cubage.tui.scan_view import ScanView, open_scan

    scan_file = tmp_path / "s.toml"
    scan_file.write_text(SCAN.format(backend="auto", cluster=hostile.address))
    prob = load_problem(scan_file)
    notes = []

    class Host(App):
        def on_mount(self):
            open_scan(self, prob, can_go_back=False)

        def notify(self, message, **kw):
            notes.append(message)

    async def wait(pilot, cond, seconds=30.0):
        for _ in range(int(seconds / 0.1)):
            if cond():
                return True
            await pilot.pause(0.1)
        return bool(cond())

    async def scan_view():
        app = Host()
        async with app.run_test(size=(80, 24)) as pilot:
            assert await wait(pilot, lambda: isinstance(app.screen, ScanView))
            view = app.screen
            assert await wait(pilot, lambda: view.state.over)
            assert not view.state.note, view.state.note
            # a (x + y) over the unit square is a (by hand)
            assert sorted(round(float(p.value), 10) for p in view.state.points.values()) == [1.0, 2.0]
            await pilot.press("q")
    asyncio.run(scan_view())
    assert hostile.connections == 0 and any("[method] cluster" in n and "not used" in n for n in notes)

    run_file = tmp_path / "p.toml"
    run_file.write_text(PROBLEM.format(backend="dask", cluster=hostile.address))

    async def trusted_run():
        app = CubageApp([run_file], allow_python=True)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause(0.3)
            await pilot.press("enter")
            assert await wait(pilot, lambda: isinstance(app.screen, RunView))
            await pilot.press("g")
            assert await wait(pilot, lambda: hostile.connections >= 1, 15.0)
            await pilot.press("q")
            await pilot.pause(0.2)
            if app.is_running:
                await pilot.press("y")
    asyncio.run(trusted_run())
