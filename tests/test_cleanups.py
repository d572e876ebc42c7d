"""Regression tests of the cleanup pass (status styling, the scan view's accessor, old run directories, clusters).

Each test's docstring names the cleanup item it covers ("cleanup item N": the list of known items left from the
previous session, numbered as in the task that fixed them; "user pass": defects found trying the tool as a new user).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


# --------------------------------------------------------------------------
# cleanup item 2: status words styled from the one table
# --------------------------------------------------------------------------

def test_every_status_word_has_a_style():
    """Cleanup item 2: the UI styles status words by their tone, read from the session's table of words (engine
    words and session words); every word has a tone, and every tone a style of its own."""
    from cubage.engine.statuses import STATUSES
    from cubage.session.status import SESSION_WORDS, TONES, WORDS, tone
    from cubage.tui.widgets.readout import TONE_STYLE, status_style
    assert set(WORDS) == set(STATUSES) | set(SESSION_WORDS)
    for word in WORDS:
        assert tone(word) in TONES, word
        assert status_style(word) == TONE_STYLE[tone(word)], word
    assert set(TONE_STYLE) == set(TONES)
    assert len(set(TONE_STYLE.values())) == len(TONES)          # tones are told apart
    # what the tones mean (the module docstring of cubage.session.status)
    assert tone("converged") == "met" and tone("failed") == "fault" and tone("runner-gone") == "fault"
    assert tone("budget-spent") == "short" and tone("running") == "active" and tone("ready") == "idle"
    assert tone("no-such-word") == "" and status_style("no-such-word") == "bold"


def test_the_text_ui_keeps_no_table_of_status_words():
    """Cleanup item 2: no module of the text UI holds its own table (dict, set, list or tuple literal) of three or
    more status words; the words are listed in cubage.engine.statuses and cubage.session.status only."""
    from cubage.session.status import WORDS
    offenders = []
    for path in sorted((ROOT / "tui").rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            items = node.keys if isinstance(node, ast.Dict) else \
                node.elts if isinstance(node, (ast.Set, ast.List, ast.Tuple)) else []
            words = [k.value for k in items if isinstance(k, ast.Constant) and k.value in WORDS]
            if len(words) >= 3:
                offenders.append(f"{path.name}:{node.lineno} {words}")
    assert not offenders, offenders


# --------------------------------------------------------------------------
# cleanup item 3: the scan view reads a scan's files through a public session-layer class
# --------------------------------------------------------------------------

def test_front_ends_import_no_private_session_names():
    """Cleanup item 3: the front ends (tui/, cubature/cli/) import no private name (``_Name``) from the session
    layer; the scan view follows a run directory through ``cubage.session.scan_follower.ScanFollower``."""
    offenders = []
    for folder in ("tui", "cubature/cli"):
        for path in sorted((ROOT / folder).rglob("*.py")):
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("cubage.session"):
                    offenders += [f"{path.name}: {node.module}.{a.name}" for a in node.names if a.name.startswith("_")]
    assert not offenders, offenders


def test_scan_follower_reads_points_live_records_and_verdict(tmp_path):
    """Cleanup item 3: ScanFollower reads the finished points of a scan's run directory (checked against the closed
    form), new ones incrementally, skips a line torn by a crash until it is complete, lists live records of
    unfinished points only, and sees the verdict."""
    import json
    import math

    import numpy as np

    import cubage
    from cubage.session.scan import LIVE_FILE, POINTS_FILE
    from cubage.session.scan_follower import ScanFollower, read_scan_points

    def f(X, a):
        return np.exp(-a * X[:, 0])
    res = cubage.scan(f, cubage.Box([0.0, 0.0], [1.0, 1.0]), {"a": [0.5, 1.0, 2.0]}, rel_tol=1e-10,
                      run_dir=tmp_path)
    follower = ScanFollower(tmp_path)
    points = follower.poll()
    assert sorted(points) == [0, 1, 2] and read_scan_points(tmp_path).keys() == points.keys()
    for p in points.values():
        a = p.constants["a"]
        exact = (1 - math.exp(-a)) / a                  # the integral of exp(-a x) over [0, 1] (elementary)
        assert abs(float(np.atleast_1d(p.value)[0]) - exact) <= 1e-9 * exact
        assert p.value == res.points[p.index].value
    # a torn line (a crash mid-write) waits; once completed it is read, and nothing is read twice
    line = json.dumps(dict(json.loads((tmp_path / POINTS_FILE).read_text().splitlines()[0]), index=7))
    with open(tmp_path / POINTS_FILE, "a", encoding="utf-8") as fh:
        fh.write(line[:20])
    assert sorted(follower.poll()) == [0, 1, 2]
    with open(tmp_path / POINTS_FILE, "a", encoding="utf-8") as fh:
        fh.write(line[20:] + "\n")
    assert sorted(follower.poll()) == [0, 1, 2, 7]
    # live records: one of a finished point is left out
    (tmp_path / LIVE_FILE.format(chain=0)).write_text(json.dumps({"index": 1, "evaluations": 5}))
    (tmp_path / LIVE_FILE.format(chain=1)).write_text(json.dumps({"index": 9, "evaluations": 5}))
    assert [r["index"] for r in follower.live()] == [9]
    assert follower.verdict is None                       # cubage.scan() writes no verdict; the command does
    (tmp_path / "verdict.json").write_text(json.dumps({"converged": True}))
    assert follower.verdict == {"converged": True}


def test_plain_watch_of_a_scan_started_before_its_first_point_shows_the_constants(tmp_path, monkeypatch, capsys):
    """User pass: ``cubage watch DIR --plain`` started on a scan before its first point finished printed the rows
    without their constants' columns (the column names were taken, empty, from the first poll)."""
    import argparse
    import json

    import numpy as np

    import cubage
    from cubage.cli import scan_command
    from cubage.session.scan import POINTS_FILE

    def f(X, a):
        return np.exp(-a * X[:, 0])
    src = tmp_path / "done"
    cubage.scan(f, cubage.Box([0.0, 0.0], [1.0, 1.0]), {"a": [0.5, 1.0]}, rel_tol=1e-8, run_dir=src)
    lines = (src / POINTS_FILE).read_text()
    live = tmp_path / "live"
    live.mkdir()
    (live / "occupant.json").write_text(json.dumps({"pid": __import__("os").getpid()}))

    def later(_seconds):                       # the scan's process finishes its points while the watch sleeps
        (live / POINTS_FILE).write_text(lines)
        (live / "verdict.json").write_text(json.dumps({"converged": True, "points_done": 2, "points_total": 2}))
    monkeypatch.setattr(scan_command.time, "sleep", later)
    code = scan_command.watch_scan_plain(argparse.Namespace(dir=str(live), once=False, every=0.01))
    out = capsys.readouterr().out.splitlines()
    assert code == 0
    assert out[0].split()[:2] == ["#", "a"]                 # the header names the scanned constant
    assert [r.split()[1] for r in out[1:3]] == ["0.5", "1"]


# --------------------------------------------------------------------------
# cleanup item 4: run directories of the first release with Python integrands
# --------------------------------------------------------------------------

def _as_first_release(rd: Path, integrand_file: Path, target: str) -> None:
    """Rewrite ``rd``'s checkpoint and ledger as the first release wrote them: checkpoint format 1 (digest over the
    arrays only) and the problem fingerprint of that release (import path + sha256 of the .py file's bytes,
    re-stated here from that release's source, not taken from cubage)."""
    import hashlib
    import json

    import numpy as np

    from cubage.engine.checkpoint import _digest
    with np.load(rd / "partition.npz", allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    meta = json.loads(arrays.pop("meta").tobytes().decode())
    old_spec = {"kind": "python", "target": target,
                "file_sha256": hashlib.sha256(integrand_file.read_bytes()).hexdigest()}
    old_fp = hashlib.sha256(json.dumps({"domain": meta["domain"], "integrand": old_spec}, sort_keys=True,
                                       separators=(",", ":")).encode()).hexdigest()
    meta.update(version=1, integrand=old_fp,
                fingerprint=hashlib.sha256((old_fp + json.dumps(meta["settings"], sort_keys=True)).encode())
                .hexdigest())
    meta.pop("digest")
    meta["digest"] = _digest(arrays, None)
    with open(rd / "partition.npz", "wb") as fh:
        np.savez(fh, meta=np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8), **arrays)
    ledger = json.loads((rd / "ledger.json").read_text())
    ledger["problem_fingerprint"] = old_fp
    (rd / "ledger.json").write_text(json.dumps(ledger))


PY_INTEGRAND = "import numpy as np\ndef f(X):\n    return np.exp(-X[:, 0]) * np.sqrt(X[:, 1])\n"
PY_PROBLEM = """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 1]]
[integrand]
python = "integrand.py:f"
[goal]
rel_tol = 1e-13
budget = 3000
"""


@pytest.mark.parametrize("with_verdict", [True, False])
def test_resume_of_a_first_release_python_run_directory_says_what_to_do(tmp_path, cli, with_verdict):
    """Cleanup item 4: ``cubage resume DIR`` on a run directory written by the first release with a Python
    integrand (whose fingerprint format changed) says so in one line, with the command that starts it again,
    exit 2, no traceback; the directory is left as it was."""
    (tmp_path / "integrand.py").write_text(PY_INTEGRAND)
    prob = tmp_path / "p.toml"
    prob.write_text(PY_PROBLEM)
    rd = tmp_path / "rd"
    code, out, err = cli("run", prob, "--allow-python", "--run-dir", rd)
    assert code == 3, err                                  # budget spent: a run to continue
    _as_first_release(rd, tmp_path / "integrand.py", "integrand.py:f")
    if not with_verdict:                                   # as after kill -9
        (rd / "verdict.json").unlink()
    before = {p.name: p.read_bytes() for p in rd.iterdir()}
    code, out, err = cli("resume", rd, "--allow-python", "--budget", "1e5")
    assert code == 2 and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1, err
    assert "first release" in err and f"cubage run {prob}" in err and "--allow-python" in err
    assert ("verdict.json" in err) == with_verdict
    assert {p.name: p.read_bytes() for p in rd.iterdir() if p.name != "occupant.json"} == \
        {k: v for k, v in before.items() if k != "occupant.json"}
    code, out, err = cli("resume", rd, "--allow-python", "--json")
    import json
    rec = json.loads(out)
    assert code == 2 and rec["status"] == "error" and "first release" in rec["message"]


def test_resume_of_a_current_python_run_directory_still_works(tmp_path, cli):
    """Cleanup item 4 (the other side): a Python run directory written by this release resumes and converges to
    the closed form (integral of exp(-x) sqrt(y) over the unit square = (1 - 1/e) 2/3, elementary)."""
    import json
    import math
    (tmp_path / "integrand.py").write_text(PY_INTEGRAND)
    prob = tmp_path / "p.toml"
    prob.write_text(PY_PROBLEM.replace("1e-13", "1e-9"))
    rd = tmp_path / "rd"
    code, _, err = cli("run", prob, "--allow-python", "--run-dir", rd, "--budget", "1000")
    assert code == 3, err
    code, out, err = cli("resume", rd, "--allow-python", "--budget", "1e7", "--json")
    assert code == 0, err
    assert abs(json.loads(out)["value"] - (1 - math.exp(-1)) * 2 / 3) < 1e-8


# --------------------------------------------------------------------------
# user pass
# --------------------------------------------------------------------------

def test_overflowing_variable_map_is_one_line_without_numpy_warnings(tmp_path, cubage):
    """User pass: a problem whose infinite axis has a huge scale ended with the right one-line message, but numpy's
    RuntimeWarnings from the map's Jacobian and the engine's product printed four source lines before it."""
    f = tmp_path / "wide.toml"
    f.write_text('[domain]\nvariables = ["x", "y"]\nbox = [[0, inf], [0, 1]]\nscale = [1e308, 1]\n'
                 '[integrand]\nexpr = "exp(-x*y)"\n')
    r = cubage("run", f)
    assert r.returncode == 1, r.stderr
    assert "RuntimeWarning" not in r.stderr and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "overflows" in r.stderr


def test_text_ui_takes_problem_names_like_run(tmp_path, monkeypatch):
    """User pass: ``cubage tui oscillator-phase-6d`` said "no such file or folder" although ``cubage run`` takes
    the same name; the UI now resolves names as run does, and a misspelt one gets run's suggestion."""
    from cubage.tui.app import collect_files
    monkeypatch.chdir(tmp_path)                      # no ./problems here: the bundled examples
    (found,) = collect_files(["oscillator-phase-6d"])
    assert found.name == "oscillator-phase-6d.toml" and found.is_file()
    (tmp_path / "mine.toml").write_text("")
    assert collect_files(["mine"]) == [Path("mine.toml")]
    with pytest.raises(FileNotFoundError) as info:
        collect_files(["oscilator-phase-6d"])
    assert "did you mean 'oscillator-phase-6d'" in info.value.args[1]


def test_scan_on_an_unbounded_domain_records_infinite_trust_bounds(tmp_path):
    """User pass: ``cubage run orbital-overlap-scan --rel-tol 1e-8 --run-dir DIR`` ended with "internal error:
    Out of range float values are not JSON compliant": a point's trust report named the bounds of regions on an
    infinite axis (inf), which the points file refused; the record now follows the one JSON rule ("inf")."""
    import json
    import math

    import numpy as np

    import cubage
    from cubage.session.scan import POINTS_FILE
    from cubage.session.scan_follower import read_scan_points

    def f(X, a):
        return np.exp(-(X**2).sum(1)) * np.abs(X[:, 0] - a)
    res = cubage.scan(f, cubage.Box([-np.inf, -np.inf], [np.inf, np.inf]), {"a": [0.3, 0.5]}, rel_tol=1e-6,
                      run_dir=tmp_path)
    lines = (tmp_path / POINTS_FILE).read_text().splitlines()
    assert len(lines) == 2 and all(json.loads(line) for line in lines)
    assert '"-inf"' in lines[0] or '"inf"' in lines[0]              # a worst region reaching infinity
    json.dumps(res.to_json(), allow_nan=False)                     # what run --json prints
    for p in read_scan_points(tmp_path).values():
        a = p.constants["a"]
        # sqrt(pi) (exp(-a^2) + a sqrt(pi) erf(a)): the Gaussian times |x - a|, integrated by parts (by hand)
        exact = math.sqrt(math.pi) * (math.exp(-a * a) + a * math.sqrt(math.pi) * math.erf(a))
        assert abs(float(p.value) - exact) <= max(float(p.error), 1e-6 * exact)


def test_key_help_of_watch_lists_only_keys_that_work(tmp_path, cli):
    """User pass: in ``cubage watch DIR`` the ``?`` screen listed g (go), e (goal editor) and b (back), which do
    nothing there; the help now leaves out what the screen turns off, like the footer, and keeps h, w, a, v, q."""
    import asyncio

    from cubage.session.follower import RunFollower
    from cubage.tui.app import CubageApp
    from cubage.tui.key_help import KeyHelp, key_rows
    from cubage.tui.problem_facts import ProblemFacts
    from cubage.tui.run_view import RunView

    f = tmp_path / "p.toml"
    f.write_text('[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n[integrand]\nexpr = "x * y"\n')
    rd = tmp_path / "rd"
    assert cli("run", f, "--run-dir", rd).returncode == 0

    async def go():
        app = CubageApp(follow=(RunFollower(rd), ProblemFacts.from_file(rd / "source.toml")))
        async with app.run_test(size=(80, 24)) as pilot:
            for _ in range(50):
                if isinstance(app.screen, RunView):
                    break
                await pilot.pause(0.1)
            view = app.screen
            keys = {k for k, _ in key_rows(view)}
            assert {"g", "e", "b"}.isdisjoint(keys), keys
            assert {"w", "a", "v", "?, F1", "q"} <= keys, keys
            await pilot.press("question_mark")
            await pilot.pause(0.3)
            assert isinstance(app.screen, KeyHelp)
            await pilot.press("escape")
            await pilot.press("q")
    asyncio.run(go())


@pytest.mark.parametrize("text, words", [
    ('[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n[integrand]\nexpr = "x"\n[goal]\nrel_tol = 1e-6\n'
     '[goal]\n', ("8:", "table [goal] is declared twice")),
    ('[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n[integrand]\nexpr = "x"\n'
     'constants = { a = 1 }\nconstants.b = 2\n', ("7:", "[integrand.constants] was written inline")),
])
def test_toml_structure_errors_name_the_table_in_toml_words(tmp_path, cli, text, words):
    """User pass: a table declared twice gave "TOML syntax error: Cannot declare ('goal',) twice", a Python
    tuple in the message; it now names the table as the file writes it, with the line, in one line, exit 2."""
    f = tmp_path / "p.toml"
    f.write_text(text)
    code, out, err = cli("check", f)
    assert code == 2 and len((out + err).strip().splitlines()) == 1, out + err
    line, phrase = words
    assert f"p.toml:{line}" in out + err and phrase in out + err and "('" not in out + err


def test_run_view_ready_line_shows_the_key_at_80_columns(tmp_path):
    """User pass: at 80x24 the run view's ready line was cut before its last words, "press g to go", without a
    sign that it was cut; the key now comes first and a cut line ends in an ellipsis."""
    import asyncio
    import html
    import re

    from cubage.tui.app import CubageApp
    from cubage.tui.run_view import RunView

    f = tmp_path / "p.toml"
    f.write_text('[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n[integrand]\nexpr = "x * y"\n'
                 '[goal]\nbudget = 123_456_789\n')

    async def go():
        app = CubageApp([f])
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause(0.3)
            await pilot.press("enter")
            for _ in range(50):
                if isinstance(app.screen, RunView):
                    break
                await pilot.pause(0.1)
            await pilot.pause(0.3)
            text = html.unescape(re.sub(r"<[^>]+>", "", re.sub(r"<style.*?</style>", "", app.export_screenshot(),
                                                                 flags=re.S))).replace("\xa0", " ")
            assert "ready, press g to go" in text
            app.screen.say("x" * 200)
            await pilot.pause(0.2)
            ticker = app.screen.query_one("#ticker")
            line = "".join(seg.text for seg in ticker.render_line(0))
            assert ticker.size.height == 1 and line.rstrip().endswith("x…"), line
            await pilot.press("q")
    asyncio.run(go())


def test_plot_without_the_extra_says_so_on_stderr(tmp_path, cli, monkeypatch):
    """User pass: ``cubage plot DIR`` in an installation without matplotlib printed its one-line reason on stdout
    (where a script reading the command's output would take it for output); it goes to stderr."""
    from cubage.cli import pictures

    def missing():
        raise pictures.PicturesUnavailable(pictures.EXTRA_HINT)
    monkeypatch.setattr(pictures, "require", missing)
    code, out, err = cli("plot", tmp_path)
    assert code != 0 and out == ""
    assert err.strip() == f"cubage: {pictures.EXTRA_HINT}"


@pytest.mark.parametrize("argv", [("run", "gaussian-overlap", "--workers", "99999999999"),
                                  ("run", "gaussian-overlap", "--workers", "1025", "--backend", "processes")])
def test_an_absurd_worker_count_is_refused_before_any_pool(cli, argv):
    """User pass: ``--workers 99999999999`` was accepted (the command line's count is not capped at the cores),
    so a problem costly enough for a pool would have tried to start that many processes; counts above
    MAX_WORKERS are one line, exit 2."""
    from cubage.session.prepare import MAX_WORKERS, check_workers
    code, out, err = cli(*argv)
    assert code == 2 and len(err.strip().splitlines()) == 1 and "--workers" in err and "at most" in err, err
    assert check_workers(MAX_WORKERS) == MAX_WORKERS and check_workers("auto") == "auto"


def test_watch_of_a_folder_that_is_not_a_run_directory(tmp_path, cli):
    """User pass: ``cubage watch DIR --once`` on a folder of problem files said "waiting: no progress line yet" and
    exited 0; a folder holding other files and no ledger is now one line, exit 2 (an empty one may be a run about
    to start and is still waited for).  Errors of watch and list no longer say "cubage: cubage watch:"."""
    (tmp_path / "notes.toml").write_text("")
    code, out, err = cli("watch", tmp_path, "--once")
    assert code == 2 and out == "" and err.count("\n") == 1
    assert "not a run directory" in err and "cubage run FILE --run-dir DIR" in err
    empty = tmp_path / "empty"
    empty.mkdir()
    code, out, err = cli("watch", empty, "--once")
    assert code == 0 and "waiting" in out
    for argv in (("watch", tmp_path / "nope"), ("list", tmp_path / "nope")):
        code, out, err = cli(*argv)
        assert code == 2 and err.startswith("cubage: ") and "cubage: cubage" not in err, err


def test_scan_view_shows_progress_while_points_are_quick():
    """User pass: the UI's scan view said "no point running" for the whole of the bundled scan, because each point
    finished within the view's refresh and cleared its progress; the newest progress now stays until the next
    point's replaces it (and is cleared when the scan is over)."""
    import time

    from cubage.problem.problem_file import find_problem, load_problem
    from cubage.tui.scan_view import ScanState, ScanThreadSource

    src = ScanThreadSource(load_problem(find_problem("orbital-overlap-scan")))
    st = ScanState()
    for _ in range(600):
        src.poll(st)
        if st.over:
            break
        time.sleep(0.05)
    assert st.over and len(st.points) == 21 and not st.note
    assert st.live == []                                   # over: nothing is "current"
    # a point finishing keeps the newest progress shown (it used to blank the panel until the next step)
    rec = {"index": 3, "constants": {"R": 0.6}, "history": [[100, 1.0, 1e-3]]}
    src._over, src._live = False, rec
    src._on_point(st.points[3], 4, 21)
    src.poll(st)
    assert st.live == [rec]
    # S(R) = (pi/(a+b))^(3/2) exp(-a b R^2/(a+b)), a = 1, b = 0.6 (Gaussian product theorem, Boys 1950)
    import math
    for p in st.points.values():
        exact = (math.pi / 1.6) ** 1.5 * math.exp(-0.6 * p.constants["R"] ** 2 / 1.6)
        assert abs(float(p.value) - exact) <= max(float(p.error), 1e-6 * exact) * 2


def test_a_file_that_is_not_utf8_names_the_line(tmp_path, cli):
    """User pass: a problem file saved in Latin-1 gave "not UTF-8 text (byte 57)" without a line; the message now
    names the line of the first bad byte, like every other problem-file error (one line, exit 2)."""
    f = tmp_path / "latin1.toml"
    f.write_bytes(b'title = "ok"\n[domain]\nvariables = ["x", "y"]\nnotes = "caf\xe9"\n')
    code, out, err = cli("check", f)
    assert code == 2 and len((out + err).strip().splitlines()) == 1
    assert f"{f}:4: not UTF-8 text" in out + err


def test_scan_description_never_shows_an_unordered_list_as_a_range():
    """User pass: ``a = [2.0, 1.5, 0.5, 3.0]`` was described as "4 values 2 .. 3", a range that leaves out 0.5;
    an unordered list now shows its values, a monotone axis its first and last."""
    from cubage.problem.scan_table import parse_scan_table
    assert parse_scan_table({"a": [2.0, 1.5, 0.5, 3.0]}, {"a": 1.0}).describe() == \
        "a: 4 values 2, 1.5, 0.5, ... (4 points)"
    assert parse_scan_table({"a": {"lin": [0, 1], "count": 11}}, {"a": 1.0}).describe() == \
        "a: 11 values 0 .. 1 (11 points)"
    assert parse_scan_table({"a": [3.0, 2.0, 1.0]}, {"a": 1.0}).describe() == "a: 3 values 3 .. 1 (3 points)"


def test_plain_lines_word_a_goal_beyond_the_budget_and_a_final_status():
    """User pass: log lines of a run whose goal lay far beyond its budget read "eta 5659.0 days (beyond the budget)",
    and the last line of a run that had ended still gave one ("eta 10370.4 days ... [budget-spent]"); they now say
    how many evaluations the goal needs, and "-" once the run has ended (the UI's words)."""
    import math

    from cubage.session.forecast import Forecast, eta_text
    assert eta_text(Forecast(2.1e9, 5e8, True), "running") == "beyond the budget (~2.1e+09 evaluations)"
    assert eta_text(Forecast(2.1e9, 5e8, True), "budget-spent") == "-"
    assert eta_text(Forecast(math.inf, math.inf, True), "running") == "out of reach"
    assert eta_text(Forecast(1e6, 31.0, False), "running") == "31.0 s"
    assert eta_text(Forecast(), "running") == "-"


def test_scan_view_of_a_stopped_scan_says_stopped_and_offers_no_halt(tmp_path, cli):
    """User pass: after ``h`` in ``cubage watch`` on a scan, the scan stopped but the view kept saying "halting",
    offered h again, and its status line was cut mid-sentence; it now says "stopped" with the command that
    continues it, h is off, and a cut line ends in an ellipsis."""
    import asyncio

    from conftest import screen_host

    from cubage.tui.scan_view import follow_view

    f = tmp_path / "s.toml"
    f.write_text('[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n[integrand]\nexpr = "a * x * y"\n'
                 'constants = { a = 1.0 }\n[scan]\na = [1.0, 2.0, 3.0]\n')
    rd = tmp_path / "a-rather-long-folder-name-for-the-scan-run-directory"
    assert cli("run", f, "--run-dir", rd).returncode == 0
    (rd / "verdict.json").unlink()                      # as a halted (or killed) scan leaves it: no verdict
    view = follow_view(rd)

    async def go():
        app = screen_host(view)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause(1.0)
            assert view.state.gone and not view.state.over
            line = view._status_line()
            assert "stopped" in line and "halting" not in line and f"cubage resume {rd}" in line
            assert view.check_action("halt", ()) is False
            status = view.query_one("#scan-status")
            shown = "".join(seg.text for seg in status.render_line(0)).rstrip()
            assert shown.endswith("…"), shown
            # a (x y) over the unit square is a/4 (by hand)
            assert sorted(round(float(p.value), 12) for p in view.state.points.values()) == [0.25, 0.5, 0.75]
            await pilot.press("q")
    asyncio.run(go())
