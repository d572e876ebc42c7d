"""Scans seen by a person (issue 14 items 2, 5, 6, 7): the command line, the text UI's scan view, pictures.

Values are checked against closed forms named beside each check.
"""

from __future__ import annotations

import asyncio
import json
import math
import re
import sys
import time

import numpy as np
import pytest

from cubage.cli.commands import main
from cubage.session.run_directory import VERDICT

SCAN = """
title = "width scan"
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 1]]
[integrand]
expr = "exp(-a*(x*x + y*y))"
constants = {{ a = 1.0 }}
[goal]
rel_tol = 1e-9
{budget}
[scan]
a = {{ log = [0.5, 8], count = 5 }}
"""


def _exact(a: float) -> float:
    """(sqrt(pi/a)/2 erf(sqrt a))^2: the separable Gaussian over the unit square (A&S 7.1.1)."""
    return (math.sqrt(math.pi / a) / 2 * math.erf(math.sqrt(a))) ** 2


@pytest.fixture
def scanfile(tmp_path):
    f = tmp_path / "width.toml"
    f.write_text(SCAN.format(budget=""))
    return f


def test_cli_table_json_csv_and_exit_codes(scanfile, tmp_path, capsys):
    """issue 14 item 2: a row per point, --json one object, the CSV beside result.json, exit 0 / 3."""
    assert main(["run", str(scanfile)]) == 0
    out = capsys.readouterr().out
    rows = [ln for ln in out.splitlines() if re.match(r"\s+\d+\s", ln)]
    assert len(rows) == 5 and all("converged" in r for r in rows)
    rd = tmp_path / "rd"
    assert main(["run", str(scanfile), "--json", "--run-dir", str(rd)]) == 0
    rec = json.loads(capsys.readouterr().out)
    assert rec["points_done"] == 5 and rec["converged"] and len(rec["points"]) == 5
    for p in rec["points"]:
        assert {"constants", "value", "error", "evaluations", "status"} <= set(p)
        assert abs(p["value"] - _exact(p["constants"]["a"])) <= 10 * 1e-9 * _exact(p["constants"]["a"])
    csv = (rd / "scan.csv").read_text().splitlines()
    assert csv[0].startswith("index,a,value,error") and len(csv) == 6
    assert (rd / VERDICT).is_file()
    # a budget too small for the goal: every point stops short -> exit 3, one line on stderr
    short = tmp_path / "short.toml"
    short.write_text(SCAN.format(budget="budget = 500").replace("exp(-a*(x*x + y*y))", "sqrt(a*x*x + y*y)"))
    assert main(["run", str(short), "--json"]) == 3
    cap = capsys.readouterr()
    rec = json.loads(cap.out)
    assert not rec["converged"] and {p["status"] for p in rec["points"]} == {"budget-spent"}
    assert len(cap.err.strip().splitlines()) == 1


def test_cli_cold_switch_and_resume_of_finished_scan(scanfile, tmp_path, capsys):
    """issue 14 item 3 (the switch) and item 5: resume of a finished scan reprints the same table."""
    rd = tmp_path / "rd"
    assert main(["run", str(scanfile), "--cold", "--json", "--run-dir", str(rd)]) == 0
    first = json.loads(capsys.readouterr().out)
    assert all(p["warm_from"] is None for p in first["points"]) and first["warm_start"] is False
    assert main(["resume", str(rd), "--json"]) == 0
    again = json.loads(capsys.readouterr().out)
    strip = lambda r: [{k: v for k, v in p.items() if k != "seconds"} for p in r["points"]]
    assert strip(again) == strip(first)


def test_pictures_of_a_scan_and_of_a_benchmark(scanfile, tmp_path, capsys):
    """issue 14 item 7: PNG and SVG of I(p), and of the benchmark's error-vs-evaluations chart."""
    pytest.importorskip("matplotlib")
    rd = tmp_path / "rd"
    assert main(["run", str(scanfile), "--run-dir", str(rd)]) == 0
    assert f"cubage plot {rd}" in capsys.readouterr().out
    assert main(["plot", str(rd)]) == 0
    for ext in ("png", "svg"):
        assert (rd / f"scan.{ext}").stat().st_size > 1000
    assert (rd / "scan.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (rd / "scan.svg").read_text().lstrip().startswith(("<?xml", "<svg"))
    bench = tmp_path / "bench"
    bench.mkdir()
    (bench / "runs.csv").write_text("group,d,tol,method,draw,evaluations,seconds,status,outcome,value,exact,"
                                    "true_error,reported_error,goal\n"
                                    "g,2,1e-6,a,0,1000,0.1,converged,ok,1.0,1.0,1e-7,1e-6,1e-6\n"
                                    "g,2,1e-6,b,0,5000,0.1,converged,ok,1.0,1.0,1e-9,1e-6,1e-6\n")
    assert main(["plot", str(bench)]) == 0
    assert (bench / "error-vs-evaluations.png").is_file() and (bench / "error-vs-evaluations.svg").is_file()
    capsys.readouterr()
    assert main(["plot", str(tmp_path)]) == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 1


def test_pictures_without_matplotlib_say_which_extra(tmp_path, capsys, monkeypatch):
    """issue 14 item 7: without matplotlib, one line naming the extra."""
    monkeypatch.setitem(sys.modules, "matplotlib", None)      # import matplotlib -> ImportError
    bench = tmp_path / "bench"
    bench.mkdir()
    (bench / "runs.csv").write_text("method,evaluations,true_error,exact\na,10,1e-3,1\n")
    assert main(["plot", str(bench)]) == 1
    cap = capsys.readouterr()
    err = cap.err.strip().splitlines()                           # a message, so on stderr (tests/test_cleanups.py)
    assert cap.out == "" and len(err) == 1 and "cubage[plot]" in err[0]


# --------------------------------------------------------------------------
# the text UI
# --------------------------------------------------------------------------

async def _wait(pilot, cond, timeout=20.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if cond():
            return True
        await pilot.pause(0.1)
    return bool(cond())


def test_scan_view_runs_a_scan_and_fills_the_table(scanfile):
    """issue 14 item 6: the view opened on a [scan] problem runs it; the table and the curve fill in."""
    from textual.app import App
    from textual.widgets import DataTable

    from cubage.problem.problem_file import load_problem
    from cubage.tui.scan_view import ScanView, open_scan

    prob = load_problem(scanfile)

    class Host(App):
        def on_mount(self):
            open_scan(self, prob, can_go_back=False)

    async def go():
        app = Host()
        async with app.run_test(size=(120, 36)) as pilot:
            assert await _wait(pilot, lambda: isinstance(app.screen, ScanView))
            view = app.screen
            assert await _wait(pilot, lambda: view.state.over and len(view.state.points) == 5)
            await pilot.pause(0.8)
            table = view.query_one("#scan-table", DataTable)
            assert table.row_count == 5
            for p in view.state.points.values():
                assert abs(p.value - _exact(p.constants["a"])) <= 10 * 1e-9 * _exact(p.constants["a"])
            await pilot.press("q")
    asyncio.run(go())


def test_scan_view_follows_a_run_directory_heat_map(tmp_path, capsys):
    """issue 14 items 5-6: cubage watch on a scan's run directory shows its points (a 2-D grid as a heat map)."""
    from conftest import screen_host
    from textual.widgets import DataTable

    from cubage.tui.scan_view import follow_view, is_scan_dir
    f = tmp_path / "grid.toml"
    f.write_text(SCAN.format(budget="").replace("a = { log = [0.5, 8], count = 5 }",
                                                 "a = [1.0, 2.0]\nb = [0.0, 1.0, 2.0]")
                 .replace("constants = { a = 1.0 }", "constants = { a = 1.0, b = 0.0 }")
                 .replace("exp(-a*(x*x + y*y))", "exp(-a*(x*x + y*y)) * (1 + b*x)"))
    rd = tmp_path / "rd"
    assert main(["run", str(f), "--run-dir", str(rd), "--json"]) == 0
    capsys.readouterr()
    assert is_scan_dir(rd)
    view = follow_view(rd)

    async def go():
        app = screen_host(view)
        async with app.run_test(size=(120, 36)) as pilot:
            assert await _wait(pilot, lambda: len(view.state.points) == 6)
            await pilot.pause(0.6)
            assert view.query_one("#scan-table", DataTable).row_count == 6
            assert view.state.over and "done" in str(view.query_one("#scan-status").render())
            assert not np.isnan([p.value for p in view.state.points.values()]).any()
            await pilot.press("q")
    asyncio.run(go())


def test_watch_plain_and_second_run_into_the_same_folder(scanfile, tmp_path, capsys):
    """issue 14 item 5: cubage watch --plain lists a scan's points; a second run into its folder points to resume."""
    rd = tmp_path / "rd"
    assert main(["run", str(scanfile), "--run-dir", str(rd), "--json"]) == 0
    capsys.readouterr()
    assert main(["watch", str(rd), "--plain"]) == 0
    out = capsys.readouterr().out
    assert len([ln for ln in out.splitlines() if "converged" in ln]) == 5 and "every point met its goal" in out
    assert main(["run", str(scanfile), "--run-dir", str(rd)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and f"cubage resume {rd}" in err[0]
