"""``cubage bench``: pure metrics on constructed numbers, and a tiny in-process run."""

from __future__ import annotations

import csv
import math

import numpy as np
import pytest

from cubage.bench import suite as bench


def test_reliability_share_on_constructed_case():
    # hand-counted: 3 of the 4 runs with a value have true <= reported; the nan run does not count
    true = [1e-9, 2e-9, 5e-9, 1e-9, math.nan]
    reported = [2e-9, 2e-9, 1e-9, 1e-8, 1e-3]
    assert bench.reliability(true, reported) == pytest.approx(0.75)
    assert math.isnan(bench.reliability([], []))


def test_median_ignores_nan():
    # by hand: median of 1, 3, 10 is 3
    assert bench.median([10.0, math.nan, 1.0, 3.0]) == 3.0
    assert math.isnan(bench.median([math.nan]))


def test_ratios_to_best():
    # by hand: best is 200; None (a method that missed the goal) has no ratio
    r = bench.ratios_to_best({"a": 400.0, "b": 200.0, "c": None, "d": 1000.0})
    assert r["a"] == 2.0 and r["b"] == 1.0 and r["d"] == 5.0 and math.isnan(r["c"])


def test_classify():
    # definitions of our table: wrong = converged but true error > 10x goal; budget = goal not reached
    assert bench.classify("converged", 5e-9, 1e-9) == "ok"
    assert bench.classify("converged", 2e-8, 1e-9) == "wrong"
    assert bench.classify("budget-spent", 2e-8, 1e-9) == "budget"
    assert bench.classify("failed", 0.0, 1e-9) == "failed"


def test_aggregate_rows_on_constructed_runs():
    def run(method, evals, true, rep, outcome="ok"):
        return {"group": "g", "d": 2, "tol": 1e-6, "method": method, "evaluations": evals, "seconds": 0.1,
                "true_error": true, "reported_error": rep, "scale": 2.0, "outcome": outcome}
    runs = [run("x", 100, 1e-7, 2e-7), run("x", 300, 4e-7, 2e-7), run("x", 200, 2e-7, 2e-7),
            run("y", 50, 1e-8, 1e-7), run("y", 70, 1e-8, 1e-7, "budget")]
    rows = {r["method"]: r for r in bench.aggregate(runs)}
    # by hand: x medians 200 evals, true 2e-7/2 = 1e-7 relative; 2 of 3 held
    assert rows["x"]["median_evals"] == 200 and rows["x"]["median_true_rel_err"] == pytest.approx(1e-7)
    assert rows["x"]["reliability"] == pytest.approx(2 / 3)
    # y missed the goal once, so it is not a candidate for best; x is then the best
    assert rows["y"]["budget_failures"] == 1 and math.isnan(rows["y"]["evals_vs_best"])
    assert rows["x"]["evals_vs_best"] == 1.0


def test_counter_counts_and_enforces_budget():
    c = bench.Counter(lambda X: X.sum(axis=1), limit=10)
    assert c(np.zeros((4, 2))).shape == (4,) and c.count == 4
    with pytest.raises(bench._Budget):
        c(np.zeros((7, 2)))


def test_quick_two_families_writes_tables(tmp_path, capsys):
    out = tmp_path / "b"
    code = bench.main(["--quick", "--families", "gaussian", "corner-peak", "--dims", "2", "3", "--draws", "2",
                       "--budget", "20000", "--out", str(out), "--no-progress"])
    assert code == 0
    md = (out / "results.md").read_text()
    header = "| " + " | ".join(bench.COLUMNS) + " |"
    assert header in md
    with open(out / "results.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0].keys()) == bench.COLUMNS
    # 2 families x 2 dims x 1 tol x (2 strategies + 1 peer) = 12 rows, 2 runs each
    assert len(rows) == 12
    assert {(r["group"], r["d"]) for r in rows} == {(f, d) for f in ("gaussian", "corner-peak") for d in "23"}
    assert {r["method"] for r in rows} == {"gm", "gm/plain", "scipy-gm"}
    assert all(r["runs"] == "2" for r in rows)
    # the engine's runs have their true error from the closed form (Genz 1984) within 10x the goal
    for r in rows:
        if r["method"].startswith("gm") and r["budget_failures"] == "0":
            assert float(r["median_true_rel_err"]) <= 10 * 1e-6
    text = capsys.readouterr().out
    assert "heuristic" in text


def test_bad_options_exit_2(capsys):
    assert bench.main(["--strategies", "nope"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--strategies" in err[0]
    assert bench.main(["--dims", "1"]) == 2
    assert bench.main(["--no-such-option"]) == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 2


def test_problem_file_without_reference_is_skipped(tmp_path):
    p = tmp_path / "noref.toml"
    p.write_text('title = "t"\n[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n'
                 '[integrand]\nexpr = "x*y"\n')
    notes: list[str] = []
    assert bench.problem_cases([p], notes) == []
    assert notes and "no [reference]" in notes[0]


def test_problem_file_with_reference_runs(tmp_path):
    p = tmp_path / "xy.toml"
    # closed form: integral of x*y over the unit square is 1/4 (elementary)
    p.write_text('title = "t"\n[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n'
                 '[integrand]\nexpr = "x*y"\n[reference]\nvalue = 0.25\nsource = "elementary"\n')
    out = tmp_path / "o"
    assert bench.main(["--suite", str(p), "--strategies", "gm", "--out", str(out), "--no-progress",
                       "--no-chart"]) == 0
    with open(out / "runs.csv") as fh:
        runs = list(csv.DictReader(fh))
    assert len(runs) == 1 and runs[0]["group"] == "xy" and float(runs[0]["true_error"]) < 1e-12


def _constructed_runs():
    # constructed rows with the longest labels and every kind of miss; figures are arbitrary (layout only)
    out = []
    for m in ("gm", "gm/all-axes", "scipy-gm", "gm/local"):
        for d in (2, 6):
            for k, outcome in enumerate(("ok", "wrong", "budget")):
                out.append({"group": "discontinuous", "d": d, "tol": 1e-6, "method": m, "evaluations": 1234567 + k,
                            "seconds": 12.3456, "true_error": 1.5e-7 * (k + 1), "reported_error": 1e-7,
                            "scale": 1.0, "outcome": outcome})
    return out


def test_terminal_tables_fit_80_columns():
    """issue 10 item 19: the benchmark's table is readable at 80 columns (no cell cut to an ellipsis)."""
    from rich.console import Console
    rows = bench.aggregate(_constructed_runs())
    con = Console(width=80, record=True, file=open("/dev/null", "w"), color_system=None)
    for t in bench.terminal_tables(rows):
        con.print(t)
    text = con.export_text()
    lines = text.splitlines()
    assert max(len(x) for x in lines) <= 80
    assert "…" not in text
    for word in ("gm/all-axes", "scipy-gm", "gm/local", "1234568", "held", "1 wrong", "budget"):
        assert word in text


def test_chart_marks_each_series_with_its_own_marker():
    """issue 10 item 19: without colour, the chart's series are told apart by their markers."""
    import re
    runs = _constructed_runs()
    for k, r in enumerate(runs):   # spread the points so that they do not overlap
        r["evaluations"] = 10 ** (2 + k % 5) * (1 + k)
    text = re.sub(r"\x1b\[[0-9;]*m", "", bench.chart(runs, width=80, height=20))
    methods = list(dict.fromkeys(r["method"] for r in runs))
    marks = bench.MARKERS[:len(methods)]
    assert len(set(marks)) == len(methods)
    for m, mk in zip(methods, marks):
        assert f"{mk}{mk} {m}" in text          # the legend pairs each method with its marker
    plot = "\n".join(line[8:] for line in text.splitlines()[len(methods) + 1:])
    for mk in marks:
        assert mk in plot


def test_bench_dims_are_bounded(capsys):
    """issue 10 item 15i: ``cubage bench --dims 50`` is refused with one line (it grew without bound)."""
    assert bench.main(["--dims", "50"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--dims" in err[0] and "2..12" in err[0] and "50" in err[0]
    assert bench.main(["--dims", "13", "--no-progress"]) == 2
