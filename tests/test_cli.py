"""The ``cubage`` command line, run as a user would: a subprocess per call.

Every expected integral below comes from a closed form named beside it; the
exit codes and message shapes are the command line's documented contract.
"""

from __future__ import annotations

import importlib.util
import json
import math
import os
import re
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
from conftest import as_from_a_terminal

from cubage.session.forecast import time_to_goal

ROOT = Path(__file__).resolve().parents[1]


def write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


XY = """
title = "x times y on the unit square"
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 1]]
[integrand]
expr = "x*y"
[reference]
value = 0.25
source = "product formula: (1/2)*(1/2)"
"""

# a slow-ish smooth 3-D integrand, so that a tiny budget stops it short of the goal
PEAK3 = """
[domain]
variables = ["x", "y", "z"]
box = [[-1, 1], [-1, 1], [-1, 1]]
[integrand]
expr = "1 / (1e-3 + x*x + y*y + z*z)"
[goal]
rel_tol = 1e-10
"""


# --------------------------------------------------------------------------
# help and version
# --------------------------------------------------------------------------

@pytest.mark.parametrize("sub", [["run"], ["check"], ["resume"], ["list"], ["tui"], ["watch"]])
def test_help_of_every_command_exits_zero(sub, cli):
    p = cli(*sub, "--help")
    assert p.returncode == 0, p.stderr
    assert p.stdout.startswith(f"usage: cubage {sub[0]}")   # argparse's help layout (common practice)
    assert p.stderr == ""


def test_top_level_help_in_a_real_process(cubage):
    p = cubage("--help")
    assert p.returncode == 0, p.stderr
    assert p.stdout.startswith("usage: cubage")
    for sub in ("run", "check", "resume", "list", "tui", "watch", "bench"):
        assert sub in p.stdout


def test_version_is_the_package_version(cubage):
    p = cubage("--version")
    # the version written in pyproject.toml
    version = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]
    assert p.returncode == 0
    assert p.stdout.strip() == f"cubage {version}"


def test_run_help_names_every_documented_option(cli):
    out = cli("run", "--help").stdout
    for opt in ("--json", "--run-dir", "--rel-tol", "--abs-tol", "--budget", "--time-limit", "--rule",
                "--workers", "--backend", "--cluster", "--checkpoint-every", "--allow-python", "--debug"):
        assert opt in out, opt


# --------------------------------------------------------------------------
# --json
# --------------------------------------------------------------------------

def _one_json(stdout: str) -> dict:
    lines = [ln for ln in stdout.splitlines() if ln.strip()]
    assert len(lines) == 1, stdout
    obj = json.loads(lines[0])
    assert isinstance(obj, dict)
    return obj


def test_json_prints_one_object_with_the_right_value(tmp_path, cubage):
    f = write(tmp_path, "xy.toml", XY)
    p = cubage("run", f, "--json", cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    obj = _one_json(p.stdout)
    for key in ("schema", "problem", "value", "error", "evaluations", "regions", "status", "seconds", "reference",
                "converged", "final", "settings"):
        assert key in obj, key
    # ∫_[0,1]^2 x y = 1/4 (product formula, common practice)
    assert obj["value"] == pytest.approx(0.25, rel=1e-12)
    assert obj["status"] == "converged"
    assert obj["reference"]["value"] == 0.25 and obj["problem"]["name"] == "xy"
    assert abs(obj["reference"]["true_error"]) < 1e-12
    assert obj["evaluations"] > 0 and obj["regions"] >= 1


def test_json_lists_for_a_vector_integrand(tmp_path, cli):
    f = write(tmp_path, "vec.toml", """
[domain]
variables = ["x", "y"]
box = [[0, 2], [0, 1]]
[integrand]
expr = ["1", "x", "y*y"]
""")
    p = cli("run", f, "--json", cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    obj = _one_json(p.stdout)
    assert isinstance(obj["value"], list) and isinstance(obj["error"], list)
    # over [0,2]x[0,1]: area 2, ∫x = 2, ∫y^2 = 2/3 (elementary antiderivatives, common practice)
    np.testing.assert_allclose(obj["value"], [2.0, 2.0, 2.0 / 3.0], rtol=1e-10)


def test_unbounded_gaussian_is_pi(tmp_path, cli):
    f = write(tmp_path, "g.toml", """
[domain]
variables = ["x", "y"]
box = [[-inf, inf], [-inf, inf]]
[integrand]
expr = "exp(-x*x - y*y)"
[goal]
rel_tol = 1e-8
""")
    p = cli("run", f, "--json", cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    # ∫_R^2 exp(-x^2-y^2) = pi (the Gaussian integral, common practice)
    assert _one_json(p.stdout)["value"] == pytest.approx(math.pi, rel=1e-7)


def test_simplex_area(tmp_path, cli):
    f = write(tmp_path, "tri.toml", """
[domain]
variables = ["x", "y"]
simplex = [[0, 0], [2, 0], [0, 3]]
[integrand]
expr = "x"
""")
    p = cli("run", f, "--json", cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    # ∫ x over a triangle = area * centroid_x = 3 * 2/3 = 2 (centroid formula, common practice)
    assert _one_json(p.stdout)["value"] == pytest.approx(2.0, rel=1e-10)


def test_bundled_problem_by_name_matches_its_reference(tmp_path, cli):
    p = cli("run", "gaussian-overlap", "--json", cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    obj = _one_json(p.stdout)
    # closed form via completing the square and erf (Abramowitz & Stegun 7.1.1), recomputed here
    from math import erf, exp, pi, sqrt
    a, b, total = 1.0, 2.0, 1.0
    for c in (0.8, -0.5, 0.3):
        m = b * c / (a + b)
        total *= exp(-a * b * c * c / (a + b)) * sqrt(pi / (a + b)) / 2 * (
            erf(sqrt(a + b) * (3 - m)) - erf(sqrt(a + b) * (-3 - m)))
    assert obj["value"] == pytest.approx(total, rel=1e-7)


def test_rule_option_changes_the_rule(tmp_path, cli):
    f = write(tmp_path, "xy.toml", XY)
    obj = _one_json(cli("run", f, "--json", "--rule", "genz-malik", cwd=tmp_path).stdout)
    assert obj["rule"] == "genz-malik"
    # x*y has degree 2, integrated exactly by a degree-7 rule (Genz & Malik 1980)
    assert obj["value"] == pytest.approx(0.25, rel=1e-13)


# --------------------------------------------------------------------------
# exit codes 3 and 1
# --------------------------------------------------------------------------

def test_tiny_budget_exits_3_with_the_estimate(tmp_path, cubage):
    f = write(tmp_path, "peak.toml", PEAK3)
    p = cubage("run", f, "--json", "--budget", "2000", cwd=tmp_path)
    assert p.returncode == 3, p.stderr
    obj = _one_json(p.stdout)
    assert obj["status"] == "budget-spent"
    assert 0 < obj["evaluations"] <= 2000
    # the integrand is positive, so any estimate is a positive number (common practice)
    assert isinstance(obj["value"], float) and obj["value"] > 0 and obj["error"] > 0
    assert "stopped short of the goal" in p.stderr


def test_time_limit_exits_3(tmp_path, cli):
    f = write(tmp_path, "peak.toml", PEAK3)
    # a goal below rounding level cannot be met, so the clock is what stops the run
    p = cli("run", f, "--json", "--time-limit", "0.3", "--rel-tol", "1e-16", "--budget", "1e9", cwd=tmp_path)
    assert p.returncode == 3, p.stderr
    assert _one_json(p.stdout)["status"] == "time-limit"


def test_summary_without_json_names_status_and_caution(tmp_path, cli):
    f = write(tmp_path, "peak.toml", PEAK3)
    p = cli("run", f, "--budget", "2000", cwd=tmp_path)
    assert p.returncode == 3
    assert "budget-spent: evaluation budget spent before the goal was met" in p.stdout
    assert "not a guaranteed bound" in p.stdout
    # not a terminal: the plain log line on stderr, not the live panel
    assert p.stderr.startswith("cubage| ")


def test_nan_integrand_exits_1_naming_the_point(tmp_path, cubage):
    f = write(tmp_path, "nan.toml", """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 1]]
[integrand]
expr = "log(x - 0.5)"
""")
    p = cubage("run", f, "--json", cwd=tmp_path)
    assert p.returncode == 1
    assert "Traceback" not in p.stderr
    # log of a negative number is NaN (IEEE 754, common practice): the message names the point
    assert "integrand failed" in p.stderr and "nan" in p.stderr and "x = (" in p.stderr
    assert _one_json(p.stdout)["status"] == "failed"


def test_python_integrand_that_raises_exits_1(tmp_path, cubage):
    write(tmp_path, "mine.py", "import numpy as np\n"
                               "def f(X):\n"
                               "    if X.shape[0] > 10:\n"
                               "        raise ValueError('detector table missing')\n"
                               "    return np.ones(X.shape[0])\n")
    f = write(tmp_path, "py.toml", """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 1]]
[integrand]
python = "mine.py:f"
""")
    p = cubage("run", f, "--allow-python", cwd=tmp_path)
    assert p.returncode == 1
    assert "detector table missing" in p.stderr and "Traceback" not in p.stderr


def test_python_integrand_runs_with_allow_python(tmp_path, cli):
    write(tmp_path, "mine.py", "import numpy as np\ndef f(X):\n    return X[:, 0] ** 2\n")
    f = write(tmp_path, "py.toml", """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 3]]
[integrand]
python = "mine.py:f"
""")
    p = cli("run", f, "--allow-python", "--json", cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    # ∫_0^1 x^2 dx * 3 = 1 (elementary antiderivative, common practice)
    assert _one_json(p.stdout)["value"] == pytest.approx(1.0, rel=1e-12)


# --------------------------------------------------------------------------
# bad input: exit 2, one line, no traceback
# --------------------------------------------------------------------------

def _bad_corpus():
    """The shared corpus tests/bad_inputs.py: (name, toml_text, [substrings of the first line])."""
    spec = importlib.util.spec_from_file_location("cubage_bad_inputs", ROOT / "tests" / "bad_inputs.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return list(mod.BAD_INPUTS)


BAD_CORPUS = _bad_corpus()


def _assert_bad(p, *needles, json_error: bool = False):
    assert p.returncode == 2, (p.returncode, p.stdout, p.stderr)
    assert "Traceback" not in p.stderr
    if json_error:     # --json: the error as one JSON object on stdout too (issue 10 item 20)
        obj = _one_json(p.stdout)
        assert obj["status"] == "error" and obj["exit_code"] == 2 and obj["message"] == p.stderr.splitlines()[0]
    else:
        assert p.stdout == ""
    lines = p.stderr.splitlines()
    assert lines, "no message"
    head = lines[0]
    # one line, except expression errors, which add the expression and a caret line
    if len(lines) > 1:
        assert len(lines) == 3 and "^" in lines[2], p.stderr
    for n in needles:
        assert n in head, (n, head)
    return head


def test_shared_bad_input_corpus_through_the_cli(tmp_path, cli):
    assert len(BAD_CORPUS) >= 40
    for name, text, expected in BAD_CORPUS:
        f = write(tmp_path, f"{name}.toml", text)
        for cmd in ("run", "check"):
            p = cli(cmd, f)
            try:
                _assert_bad(p, f"{name}.toml", *expected)
            except AssertionError as exc:
                raise AssertionError(f"{name} via cubage {cmd}: {exc}") from None


@pytest.mark.parametrize("case", BAD_CORPUS[::40], ids=lambda c: c[0])
def test_shared_bad_inputs_in_a_real_process(tmp_path, case, cubage):
    name, text, expected = case
    f = write(tmp_path, "bad.toml", text)
    _assert_bad(cubage("run", f, "--json", cwd=tmp_path), "bad.toml", *expected, json_error=True)


BAD_PROBLEMS = [
    # (name, file text, substring of the one-line message)
    ("unknown-key", "[domain]\nvariables=['x']\nbox=[[0,1]]\n[integrand]\nexpr='x'\nscale=2\n", "[integrand] scale"),
    ("toml-syntax", "[domain\nvariables=['x']\n", "TOML syntax error"),
    ("no-integrand", "[domain]\nvariables=['x']\nbox=[[0,1]]\n", "[integrand]"),
    ("bad-bounds", "[domain]\nvariables=['x']\nbox=[[1,0]]\n[integrand]\nexpr='x'\n", "[domain] box"),
    ("unknown-name", "[domain]\nvariables=['x']\nbox=[[0,1]]\n[integrand]\nexpr='sin(q)'\n", "[integrand] expr"),
    ("python-untrusted", "[domain]\nvariables=['x']\nbox=[[0,1]]\n[integrand]\npython='m.py:f'\n", "--allow-python"),
    ("zero-tolerances", "[domain]\nvariables=['x']\nbox=[[0,1]]\n[integrand]\nexpr='x'\n[goal]\nrel_tol=0\n",
     "[goal]"),
    ("gk-too-many-dims", "[domain]\nvariables=['a','b','c','d','g','h']\nbox=[[0,1],[0,1],[0,1],[0,1],[0,1],[0,1]]\n"
                         "[integrand]\nexpr='a'\n[method]\nrule='gauss-kronrod'\n", "rule"),
]


@pytest.mark.parametrize("name,text,needle", BAD_PROBLEMS, ids=[c[0] for c in BAD_PROBLEMS])
def test_bad_problem_files(tmp_path, cli, name, text, needle):
    f = write(tmp_path, "bad.toml", text)
    for cmd in ("run", "check"):
        head = _assert_bad(cli(cmd, f), needle)
        assert "bad.toml" in head        # the message names the file


BAD_OPTIONS = [
    (["--rel-tol", "-1"], "--rel-tol"),
    (["--rel-tol", "abc"], "--rel-tol"),
    (["--abs-tol", "nan"], "--abs-tol"),
    (["--budget", "0"], "--budget"),
    (["--budget", "1.5"], "--budget"),
    (["--time-limit", "0"], "--time-limit"),
    (["--checkpoint-every", "-2"], "--checkpoint-every"),
    (["--workers", "0"], "--workers"),
    (["--rule", "simpson"], "--rule"),
    (["--backend", "gpu"], "--backend"),
    (["--rule", "grundmann-moller"], "--rule"),
    (["--rel-tol", "0", "--abs-tol", "0"], "--rel-tol"),
    (["--frobnicate"], "--frobnicate"),
]


@pytest.mark.parametrize("opts,needle", BAD_OPTIONS, ids=[" ".join(o) for o, _ in BAD_OPTIONS])
def test_bad_options(tmp_path, cli, opts, needle):
    f = write(tmp_path, "xy.toml", XY)
    _assert_bad(cli("run", f, *opts), needle)


def test_bad_option_in_a_real_process(tmp_path, cubage):
    f = write(tmp_path, "xy.toml", XY)
    _assert_bad(cubage("run", f, "--budget", "lots", cwd=tmp_path), "--budget")


def test_missing_problem_names_it_and_suggests(tmp_path, cli):
    head = _assert_bad(cli("run", "gausian-overlap", cwd=tmp_path), "gausian-overlap")
    assert "gaussian-overlap" in head          # close match offered


def test_expression_error_shows_caret_after_one_headline(tmp_path, cli):
    f = write(tmp_path, "e.toml", "[domain]\nvariables=['x']\nbox=[[0,1]]\n[integrand]\nexpr='x + * 2'\n")
    p = cli("run", f, cwd=tmp_path)
    assert p.returncode == 2
    lines = p.stderr.splitlines()
    assert len(lines) == 3 and "[integrand] expr" in lines[0] and "x + * 2" in lines[1] and "^" in lines[2]


def test_list_of_a_missing_folder_is_bad_input(tmp_path, cli):
    _assert_bad(cli("list", tmp_path / "nowhere", cwd=tmp_path), "nowhere")


def test_resume_of_a_missing_dir_is_bad_input(tmp_path, cli):
    _assert_bad(cli("resume", tmp_path / "nowhere", cwd=tmp_path), "nowhere")


# --------------------------------------------------------------------------
# check and list
# --------------------------------------------------------------------------

def test_check_describes_rule_and_nodes(tmp_path, cli):
    f = write(tmp_path, "p3.toml", PEAK3)
    p = cli("check", f, cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    assert "dimension" in p.stdout and "3 (x, y, z)" in p.stdout
    # Genz-Malik degree-7 rule: 2^d + 2d^2 + 2d + 1 = 33 nodes at d = 3 (Genz & Malik 1980)
    assert "genz-malik" in p.stdout and "33 nodes per region" in p.stdout
    f2 = write(tmp_path, "xy.toml", XY)
    out = cli("check", f2, cwd=tmp_path).stdout
    # tensor 15-point Kronrod rule in 2-D: 15^2 = 225 nodes (Kronrod 1965)
    assert "gauss-kronrod" in out and "225 nodes per region" in out
    assert "product formula" in out            # the reference and its source


def test_check_simplex_rule(tmp_path, cli):
    f = write(tmp_path, "tri.toml", "[domain]\nvariables=['x','y']\nsimplex=[[0,0],[1,0],[0,1]]\n"
                                    "[integrand]\nexpr='x'\n")
    p = cli("check", f, cwd=tmp_path)
    assert p.returncode == 0
    assert "grundmann-moller" in p.stdout and "simplex" in p.stdout


def test_list_shows_name_dimension_kind_title(tmp_path, cli):
    d = tmp_path / "probs"
    d.mkdir()
    write(d, "xy.toml", XY)
    write(d, "tri.toml", "[domain]\nvariables=['x','y','z']\nsimplex=[[0,0,0],[1,0,0],[0,1,0],[0,0,1]]\n"
                         "[integrand]\nexpr='x'\n")
    write(d, "py.toml", "title='mine'\n[domain]\nvariables=['x']\nbox=[[0,1]]\n[integrand]\npython='m.py:f'\n")
    p = cli("list", d, cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    rows = {ln.split()[0]: ln.split() for ln in p.stdout.splitlines()[1:]}
    assert rows["xy"][1:3] == ["2", "box"] and "unit" in " ".join(rows["xy"])
    assert rows["tri"][1:3] == ["3", "simplex"]
    assert "--allow-python" in " ".join(rows["py"])


def test_list_default_includes_bundled_problems(tmp_path, cli):
    p = cli("list", cwd=tmp_path)
    assert p.returncode == 0
    assert "gaussian-overlap" in p.stdout


# --------------------------------------------------------------------------
# the terminal display
# --------------------------------------------------------------------------

def test_live_panel_on_a_terminal(tmp_path):
    import pty
    import select
    f = write(tmp_path, "xy.toml", XY)
    master, slave = pty.openpty()
    env = dict(os.environ, PYTHONPATH=str(ROOT), TERM="xterm-256color", COLUMNS="100", LINES="40")
    proc = subprocess.Popen([sys.executable, "-m", "cubage", "run", str(f)], cwd=tmp_path, env=env,
                            stdin=slave, stdout=slave, stderr=slave)
    os.close(slave)
    out = b""
    try:
        while True:
            r, _, _ = select.select([master], [], [], 30)
            if not r:
                break
            try:
                chunk = os.read(master, 65536)
            except OSError:
                break
            if not chunk:
                break
            out += chunk
    finally:
        proc.wait(timeout=30)
        os.close(master)
    text = out.decode("utf-8", "replace")
    assert proc.returncode == 0
    # the summary after the live panel
    assert "converged: total error estimate met the goal" in text
    assert "not a guaranteed bound" in text
    assert "cubage| " not in text               # no plain log lines on a terminal


# --------------------------------------------------------------------------
# time to the goal (live.time_to_goal)
# --------------------------------------------------------------------------

def _history(n, err):
    n = np.asarray(n, float)
    return np.column_stack([n, np.ones_like(n), np.ones_like(n), np.asarray(err, float)])


def test_time_to_goal_on_a_power_law():
    # error = C n^-2 exactly; the goal is met at n* = sqrt(C/goal) (algebra, common practice)
    C, goal, rate = 1e6, 1e-4, 1e5
    n = np.geomspace(1e3, 1e4, 30)
    t = time_to_goal(_history(n, C * n ** -2.0), np.array([goal]), rate)
    n_star = math.sqrt(C / goal)
    assert t == pytest.approx((n_star - n[-1]) / rate, rel=1e-6)


def test_time_to_goal_unknown_or_met():
    n = np.geomspace(1e3, 1e4, 30)
    assert time_to_goal(_history(n, np.full(30, 1.0)), np.array([0.1]), 1e5) is None      # error flat
    assert time_to_goal(_history(n[:3], [3, 2, 1]), np.array([0.1]), 1e5) is None          # too few points
    assert time_to_goal(_history(n, 1.0 / n), np.array([1.0]), 1e5) == 0.0                 # already met
    assert time_to_goal(_history(n, 1.0 / n), np.array([1e-9]), 0.0) is None               # no rate


# --------------------------------------------------------------------------
# second opinion
# --------------------------------------------------------------------------

GAUSS2 = """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 2]]
[integrand]
expr = "exp(-x*x - y*y)"
[goal]
rel_tol = 1e-9
"""

KINK3 = """
[domain]
variables = ["x", "y", "z"]
box = [[0, 1], [0, 1], [0, 1]]
[integrand]
expr = "abs(x + y + z - 1.4)"
[goal]
rel_tol = 1e-5
[method]
align = "off"   # the engine's own honesty on the kink; feature alignment would cut along it (issue 13)
"""


def _irwin_hall_abs(d, s):
    # E|S - s| for S a sum of d uniforms on [0, 1]: E(S - s) + 2 E(s - S)^+, with
    # E(s - S)^+ = sum_k (-1)^k C(d, k) (s - k)_+^(d+1) / (d+1)!  (Irwin-Hall distribution, common practice)
    pos = sum((-1) ** k * math.comb(d, k) * max(s - k, 0.0) ** (d + 1) for k in range(d + 1))
    return (d / 2 - s) + 2 * pos / math.factorial(d + 1)


def test_second_opinion_agrees_on_a_smooth_integrand(tmp_path, cli):
    f = write(tmp_path, "g.toml", GAUSS2)
    p = cli("run", f, "--json", "--second-opinion", cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    so = _one_json(p.stdout)["second_opinion"]
    # int_0^1 e^{-x^2} dx * int_0^2 e^{-y^2} dy = (pi/4) erf(1) erf(2)  (Abramowitz & Stegun 7.1.1)
    exact = math.pi / 4 * math.erf(1.0) * math.erf(2.0)
    assert so["method"] == "genz-malik" and so["agree"] is True   # 2-D default is gauss-kronrod
    assert abs(so["value"] - exact) < 1e-8


def test_second_opinion_on_a_kink_the_first_rule_used_to_miss(tmp_path, cli):
    """Issue 12: the kink along a generic plane that the degree-7 rule once claimed with a 500x too small error
    now converges honestly, and the Gauss-Kronrod second opinion agrees."""
    f = write(tmp_path, "k.toml", KINK3)
    p = cli("run", f, "--json", "--second-opinion", cwd=tmp_path)
    rec = _one_json(p.stdout)
    exact = _irwin_hall_abs(3, 1.4)
    so = rec["second_opinion"]
    assert rec["status"] == "converged" and abs(rec["value"] - exact) <= rec["error"]
    assert rec["trust"]["audit"] == "passed"
    assert so["method"] == "gauss-kronrod" and abs(so["value"] - exact) < 1e-5 * exact
    assert so["agree"] is True


DIVERGENT3 = """
[domain]
variables = ["x", "y", "z"]
box = [[0, 1], [0, 1], [0, 1]]
[integrand]
expr = "1/x + y*z"
[goal]
rel_tol = 1e-4
budget = 100_000
"""


def test_summary_says_why_a_run_stopped_short_and_where(tmp_path, cli):
    """issue 12 item 5 (the plain summary): a run that cannot meet its goal says why (the engine's message) and
    what its trust checks found, with the bounds of the worst non-smooth regions; the summary used to show
    only the status word.  The integral of 1/x over [0, 1] diverges (any calculus text), so the run must stop
    short, and the flagged regions must lie on the face x = 0."""
    f = write(tmp_path, "div.toml", DIVERGENT3)
    p = cli("run", f, cwd=tmp_path)
    assert p.returncode == 3, p.stderr
    out = p.stdout.splitlines()
    assert any(ln.startswith("status      budget-spent") for ln in out), p.stdout
    why = [ln for ln in out if ln.startswith("why ")]
    assert why and "not smooth" in " ".join(out), p.stdout
    assert any(ln.startswith("checks      no audit · non-smooth") for ln in out), p.stdout
    where = [ln for ln in out if ln.startswith("non-smooth ")]
    spans = [re.search(r"x∈\[([^,]+),([^\]]+)\] y∈\[", ln) for ln in where]
    assert where and all(m and float(m.group(2)) < 1e-9 for m in spans), p.stdout
    # bisected down to floating-point resolution, the region on the face still holds its error: the summary
    # says the integral may diverge (it used to suggest only loosening the goal)
    assert "may diverge" in " ".join(out), p.stdout


def test_summary_tells_the_ends_of_a_narrow_region_apart():
    """A region narrower than four significant digits is printed with enough digits to tell its ends apart
    (a jump at x = 0.3183 showed as x∈[0.3183,0.3183])."""
    from cubage.session.trust import trust_rows
    trust = {"audit": "passed", "smooth": False, "flagged_regions": 1, "flagged_error_share": 0.5,
             "worst": [{"lower": [0.31829999999999, 0.0], "upper": [0.31830000000002, 1.0], "error": 1e-15,
                        "signatures": ["rule differences not shrinking with degree"]}]}
    rows = dict(trust_rows(trust, ["x", "y"]))
    m = re.search(r"x∈\[([^,]+),([^\]]+)\]", rows["non-smooth"])
    assert m and float(m.group(1)) < float(m.group(2)) and "y∈[0,1]" in rows["non-smooth"]


def test_summary_of_a_converged_run_states_its_checks(tmp_path, cli):
    """issue 12 item 5: a converged run's summary says the audit passed and no region looked non-smooth.
    Closed form (pi/4) erf(1) erf(2) (Abramowitz & Stegun 7.1.1)."""
    f = write(tmp_path, "g.toml", GAUSS2)
    p = cli("run", f, "--json", cwd=tmp_path)
    rec = _one_json(p.stdout)
    assert abs(rec["value"] - math.pi / 4 * math.erf(1.0) * math.erf(2.0)) < 1e-8
    p = cli("run", f, cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    checks = [ln for ln in p.stdout.splitlines() if ln.startswith("checks ")]
    assert checks and checks[0].startswith("checks      audit ok · smooth: audit passed (1 audit"), p.stdout
    assert not any(ln.startswith(("why ", "non-smooth ")) for ln in p.stdout.splitlines()), p.stdout


# --------------------------------------------------------------------------
# issue 10 items 12, 15i, 20: start-up, Ctrl-C, closed output, no terminal
# --------------------------------------------------------------------------

def test_without_a_terminal_cubage_prints_the_help_and_exits_2(tmp_path, cubage):
    """issue 10 item 20: `cubage` with no TTY prints the help and exits 2 instead of starting the UI."""
    p = cubage(cwd=tmp_path, timeout=30)
    assert p.returncode == 2 and "usage: cubage" in p.stderr and "needs a terminal" in p.stderr
    assert p.stdout == "" and "Traceback" not in p.stderr


def test_parsing_imports_no_numerics():
    """issue 10 item 12: the command starts without numpy or the engine (they load where they are needed)."""
    code = ("import sys, cubage.cli.commands as c; c.build_parser(show_names=False).parse_args(['run', 'x']); "
            "print(sorted(m for m in ('numpy', 'cubage.engine.run', 'rich') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60,
                         env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[]"


# the console script's own two lines, after a mark that says the interpreter itself has started
ENTRY = ("import sys; sys.stderr.write('ready\\n'); sys.stderr.flush(); "
         "from cubage.cli import main; sys.exit(main())")


def test_the_loading_handler_works_while_signal_itself_is_half_imported(monkeypatch):
    """The handler in place while the command loads ran ``signal.Signals(signum)``; a Ctrl-C landing while
    ``signal`` was being imported (its enums half built) raised AttributeError instead of KeyboardInterrupt
    and printed a traceback (seen in CI at the 0.02 s delay of test_ctrl_c_at_any_moment_is_quiet)."""
    import types

    import cubage.cli as cli
    monkeypatch.setitem(sys.modules, "signal", types.ModuleType("signal"))    # partially initialised: no Signals
    with pytest.raises(KeyboardInterrupt):
        cli._interrupt(2, None)
    assert cli.interrupted_while_loading()


@pytest.mark.parametrize("delay", [0.02, 0.1, 0.3, 0.8])
def test_ctrl_c_at_any_moment_is_quiet(tmp_path, delay):
    """issue 10 item 12: Ctrl-C in the first moments (while imports run) or later prints no traceback."""
    import signal
    import time
    f = write(tmp_path, "peak.toml", PEAK3)
    # rel_tol 1e-14: the run must still be working at the last delay, however fast start-up has become
    p = subprocess.Popen([sys.executable, "-c", ENTRY, "run", str(f), "--budget", "1e9", "--rel-tol", "1e-14"],
                         cwd=tmp_path,
                         env={**os.environ, "PYTHONPATH": str(ROOT)}, stdin=subprocess.DEVNULL,
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                         preexec_fn=as_from_a_terminal)
    assert p.stderr.readline() == "ready\n"        # Python's own start-up is done; cubage's begins
    time.sleep(delay)
    p.send_signal(signal.SIGINT)
    out, err = p.communicate(timeout=60)
    assert "Traceback" not in err and "KeyboardInterrupt" not in err, err
    # interrupted during start-up (130) or stopped with the estimate (3)
    assert p.returncode in (130, 3), (p.returncode, err)


def test_an_interrupt_python_ignores_while_loading_still_ends_the_command(tmp_path, capsys, monkeypatch):
    """A Ctrl-C whose KeyboardInterrupt lands where Python ignores exceptions (an import lock's weakref
    callback: "Exception ignored in ... _get_module_lock ... cb") used to be lost: the run went on, here for
    ever (rel_tol 1e-14, budget 1e9), and stderr showed the ignored traceback (seen under load in
    test_ctrl_c_at_any_moment_is_quiet).  Simulated in-process: the handler in place while the command
    loads is called from a ``__del__``, where Python ignores what it raises."""
    import signal

    import cubage.cli as cli
    import cubage.session.driver as driver

    # as in an interpreter started from a terminal (a suite started in the background inherits SIGINT ignored)
    before = signal.signal(signal.SIGINT, signal.default_int_handler)
    class Dropped:
        def __del__(self):
            signal.getsignal(signal.SIGINT)(signal.SIGINT, None)

    class LoadingHit(driver.StopSignals):
        def __init__(self):
            Dropped()                  # the interrupt is raised and ignored here, while the command loads
            super().__init__()

    monkeypatch.setattr(driver, "StopSignals", LoadingHit)
    hook = sys.unraisablehook
    f = write(tmp_path, "peak.toml", PEAK3)
    try:
        code = cli.main(["run", str(f), "--budget", "1e9", "--rel-tol", "1e-14"])
    finally:
        signal.signal(signal.SIGINT, before)
    err = capsys.readouterr().err
    assert code == 130, err
    assert "interrupted" in err and "KeyboardInterrupt" not in err and "Traceback" not in err, err
    assert sys.unraisablehook is hook            # the command put Python's hook back
    assert not cli.interrupted_while_loading()   # and left no record behind


def test_a_closed_stdout_is_not_an_internal_error(tmp_path):
    """issue 10 item 15i: a stdout closed by the caller is not "internal error"."""
    f = write(tmp_path, "xy.toml", XY)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    argv = [sys.executable, "-m", "cubage", "run", str(f), "--json", "--run-dir", str(tmp_path / "rd")]
    closed = subprocess.run(argv, stdout=None, stderr=subprocess.PIPE, text=True, timeout=60, env=env,
                            preexec_fn=lambda: os.close(1))
    assert closed.returncode == 0 and "internal error" not in closed.stderr, closed.stderr
    assert json.loads((tmp_path / "rd" / "verdict.json").read_text())["status"] == "converged"
    # a pipe whose reader has gone
    r, w = os.pipe()
    os.close(r)
    try:
        gone = subprocess.run([sys.executable, "-m", "cubage", "run", str(f), "--json"], stdout=w,
                              stderr=subprocess.PIPE, text=True, timeout=60, env=env)
    finally:
        os.close(w)
    assert "internal error" not in gone.stderr and "Traceback" not in gone.stderr, gone.stderr
    assert gone.returncode in (0, 1)


def test_plain_log_lines_use_the_one_duration_format(tmp_path, cli):
    """issue 10 item 20: the ticker used raw seconds ("eta 107707s"); durations now read like "29 h 55 min"."""
    import re
    f = write(tmp_path, "peak.toml", PEAK3)
    p = cli("run", f, "--budget", "2000", cwd=tmp_path)
    line = p.stderr.splitlines()[0]
    assert line.startswith("cubage| ") and "eta " in line
    assert not re.search(r"\d+s\b", line), line            # never a bare "123s"
    assert re.search(r"cubage\|\s+\d+(\.\d)? (ms|s)\b", line), line


def test_continue_hint_asks_for_more_than_was_spent():
    """Found in the lead's kill -9 / resume pass: a run resumed with --budget below the evaluations it had
    already spent stopped at once and suggested twice that budget, still below them (constructed case)."""
    from types import SimpleNamespace

    from cubage.cli.commands import _continue_hint
    run = SimpleNamespace(settings=SimpleNamespace(budget=30_000_000))
    rundir = SimpleNamespace(path="R")
    spent = SimpleNamespace(status="budget-spent", evaluations=71_561_839)
    assert _continue_hint(spent, run, rundir) == "continue with: cubage resume R --budget 143_123_678"
    fresh = SimpleNamespace(status="budget-spent", evaluations=30_000_001)
    assert _continue_hint(fresh, run, rundir) == "continue with: cubage resume R --budget 60_000_002"
