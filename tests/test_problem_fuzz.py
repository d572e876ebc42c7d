"""Fuzzing ``cubage check`` with malformed problem files and expressions (issue 10, "done when").

For random malformed input, ``cubage check`` (the in-process entry point, to
keep the test fast) must exit 0 or 2 and never print a traceback or an
"internal error".  The number of examples is bounded so the test stays fast.
"""

from __future__ import annotations

import atexit
import contextlib
import io
import json
import shutil
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cubage.cli.commands import main

FUZZ = settings(max_examples=50, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

_DIR = Path(tempfile.mkdtemp(prefix="cubage-fuzz-"))
atexit.register(shutil.rmtree, _DIR, True)      # every run used to leave its folder behind in the temp dir


def _check(text: str, *extra: str) -> tuple[int, str, str]:
    f = _DIR / "fuzz.toml"
    f.write_text(text, encoding="utf-8", errors="surrogatepass")
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["check", str(f), *extra])
    return code, out.getvalue(), err.getvalue()


def _assert_clean(text: str) -> None:
    code, out, err = _check(text)
    assert code in (0, 2), (code, err[-500:])
    assert "Traceback" not in err and "internal error" not in err, err[-500:]
    if code == 2:
        assert err.strip(), "a bad problem must say why"
    code_j, out_j, err_j = _check(text, "--json")
    assert code_j == code
    assert "Traceback" not in err_j
    obj = json.loads(out_j)          # exactly one JSON object, also for bad input
    assert obj["ok"] is (code == 0)


HEADERS = ["[domain]", "[integrand]", "[goal]", "[method]", "[reference]", "[scan]", "[[domain]]", "[domain.box]",
           "[integrand.constants]", "[ goal ]", "["]
KEYS = ["variables", "box", "simplex", "scale", "expr", "python", "constants", "rel_tol", "abs_tol", "budget",
        "time_limit", "rule", "degree", "workers", "backend", "cluster", "value", "source", "title", "notes",
        "k", "\"quoted key\"", "a.b", "ｅ"]
NAMES = ["x", "y", "z", "ｅ", "ℯ", "ｐｉ", "ｘ", "e", "pi", "sin", "_x", "x1", "lambda", "", "1x", "é"]

toml_scalar = st.one_of(
    st.integers(min_value=-10 ** 6, max_value=10 ** 6).map(str),
    st.integers(min_value=300, max_value=500).map(lambda n: "9" * n),
    st.floats(allow_nan=True, allow_infinity=True).map(lambda x: "nan" if x != x else (
        "inf" if x == float("inf") else "-inf" if x == float("-inf") else repr(x))),
    st.sampled_from(["true", "false", "1e308", "-1e308", "1e-320", "0x10", "1_000"]),
    st.text(max_size=20).map(json.dumps),
    st.sampled_from(NAMES).map(json.dumps),
)
toml_value = st.recursive(toml_scalar, lambda inner: st.one_of(
    st.lists(inner, max_size=4).map(lambda xs: "[" + ", ".join(xs) + "]"),
    st.lists(st.tuples(st.sampled_from(NAMES[:4]), inner), max_size=3).map(
        lambda kv: "{ " + ", ".join(f"{k} = {v}" for k, v in dict(kv).items()) + " }"),
), max_leaves=12)
deep = st.integers(min_value=5, max_value=3000).map(lambda n: "[" * n + "]" * n)
line = st.one_of(
    st.sampled_from(HEADERS),
    st.builds(lambda k, v: f"{k} = {v}", st.sampled_from(KEYS), st.one_of(toml_value, deep)),
    st.text(alphabet="[]{}=\"'#.,\\ \tabcxyz019\n", max_size=30),
)


@FUZZ
@given(st.lists(line, max_size=14).map("\n".join))
def test_random_problem_files_never_crash_check(text):
    """issue 10 item 11 and done-when: random TOML-ish files give exit 0 or 2, never a traceback."""
    _assert_clean(text)


GOOD_HEAD = '[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n[integrand]\nconstants = { k = 2.0 }\n'
TOKENS = ["x", "y", "k", "e", "pi", "ｅ", "ｘ", "1", "2.5", "1e308", "9" * 400, "(", ")", "+", "-", "*", "/", "**",
          "%", "<", "==", " and ", " not ", "sin(", "exp(", "where(", "min(", ",", "#", "\n", " ", "x.y", "[0]",
          "lambda", "__import__", "'s'", "j", "1j", ";", "abs(", "-" * 50, "(" * 60, ")" * 60]


@FUZZ
@given(st.lists(st.sampled_from(TOKENS), max_size=60).map("".join))
def test_random_expressions_never_crash_check(expr):
    """issue 10 items 4, 11 and done-when: random expressions give exit 0 or 2, never a traceback."""
    _assert_clean(GOOD_HEAD + "expr = " + json.dumps(expr) + "\n")


@FUZZ
@given(st.data())
def test_mutated_bundled_problems_never_crash_check(data):
    """issue 10 done-when: small random edits of the bundled examples give exit 0 or 2, never a traceback."""
    from cubage.problem.problem_file import bundled_problem_dir, list_problems
    files = list_problems([bundled_problem_dir()])
    text = data.draw(st.sampled_from(files)).read_text(encoding="utf-8")
    for _ in range(data.draw(st.integers(1, 4))):
        i = data.draw(st.integers(0, len(text)))
        edit = data.draw(st.sampled_from(["delete", "insert", "replace"]))
        piece = data.draw(st.sampled_from(['[', ']', '{', '}', '=', '"', '#', '\n', 'x', '0', '9' * 400, 'ｅ',
                                           '[' * 500, '.', '-', '*']))
        if edit == "delete":
            text = text[:i] + text[i + 1:]
        elif edit == "insert":
            text = text[:i] + piece + text[i:]
        else:
            text = text[:i] + piece + text[i + len(piece):]
    _assert_clean(text)
