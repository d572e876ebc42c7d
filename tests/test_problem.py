"""Tests of problem-file parsing and validation."""

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from bad_inputs import BAD_INPUTS  # noqa: E402

from cubage.engine.domains import Box, Simplex  # noqa: E402
from cubage.problem.expr import CompiledExpression  # noqa: E402
from cubage.problem.problem_file import (  # noqa: E402
    Goal,
    Method,
    ProblemError,
    bundled_problem_dir,
    find_problem,
    integrand_from_spec,
    list_problems,
    load_problem,
    parse_problem,
    problem_dirs,
)

GOOD = """
title = "A test cloud"
notes = "a note"
[domain]
variables = ["x", "y", "z"]
box = [[0, 1], [0, 1], [0, inf]]
[integrand]
expr = "exp(-k*(x**2 + y**2)) / (1 + z)**3"
constants = { k = 2.5 }
[goal]
rel_tol = 1e-6
abs_tol = 0.0
budget = 100_000_000
time_limit = 3600
[method]
rule = "genz-malik"
workers = "auto"
backend = "processes"
[reference]
value = 0.5
source = "made up for a parse test"
"""


def test_corpus_is_large():
    assert len(BAD_INPUTS) >= 40
    assert len({n for n, _, _ in BAD_INPUTS}) == len(BAD_INPUTS)


@pytest.mark.parametrize("name,text,expected", BAD_INPUTS, ids=[b[0] for b in BAD_INPUTS])
def test_bad_input_gives_one_line_problem_error(name, text, expected):
    with pytest.raises(ProblemError) as info:
        parse_problem(text, path="dir/bad.toml")
    err = info.value
    head = str(err).splitlines()[0]
    assert head == err.headline
    assert "\n" not in err.headline
    assert head.startswith("dir/bad.toml:")
    for s in expected:
        assert s in head, (s, head)
    # everything after the first line is the expression + caret lines, if anything
    rest = str(err).splitlines()[1:]
    assert len(rest) in (0, 1, 2)
    if len(rest) == 2:
        assert set(rest[1].strip()) == {"^"}


def test_expression_error_carries_caret():
    text = GOOD.replace("exp(-k*(x**2 + y**2))", "exp(-k*(x**2 + w**2))")
    with pytest.raises(ProblemError) as info:
        parse_problem(text, path="p.toml")
    lines = str(info.value).splitlines()
    assert lines[0].startswith("p.toml:8: [integrand] expr: unknown name 'w'")
    expr_line, caret = lines[1], lines[2]
    assert expr_line.index("w") == caret.index("^")


def test_good_file_parses():
    p = parse_problem(GOOD, path="good.toml")
    assert p.title == "A test cloud" and p.notes == "a note"
    assert p.variables == ["x", "y", "z"]
    assert isinstance(p.domain, Box) and p.domain.dim == 3 and np.isinf(p.domain.upper[2])
    assert isinstance(p.integrand, CompiledExpression)
    assert p.components == 1
    assert p.goal == Goal(rel_tol=1e-6, abs_tol=0.0, budget=100_000_000, time_limit=3600.0)
    assert p.method == Method(rule="genz-malik", degree=None, workers="auto", backend="processes")
    assert p.reference.value == 0.5
    assert p.integrand_spec == {"kind": "expr", "source": "exp(-k*(x**2 + y**2)) / (1 + z)**3",
                                "variables": ["x", "y", "z"], "constants": {"k": 2.5}}
    pts = np.array([[0.5, 0.25, 1.0]])
    # reference: the formula evaluated by hand with numpy
    want = np.exp(-2.5 * (0.25 + 0.0625)) / 8.0
    assert p.integrand(pts)[0] == pytest.approx(want, rel=1e-15)
    labels = [r[0] for r in p.describe()]
    assert labels == ["dimension", "domain", "integrand", "goal", "method", "reference"]


def test_defaults_and_simplex_and_vector():
    text = """
[domain]
variables = ["u", "v"]
simplex = [[0, 0], [2, 0], [0, 1]]
[integrand]
expr = ["1", "u", "v"]
[reference]
value = [1.0, 0.6666666666666666, 0.3333333333333333]
source = "area and first moments of a right triangle (centroid at a third of the legs)"
"""
    p = parse_problem(text)
    assert isinstance(p.domain, Simplex)
    assert p.components == 3
    assert p.goal == Goal()
    assert p.method == Method()
    out = p.integrand(np.array([[0.5, 0.25], [1.0, 0.0]]))
    assert out.shape == (2, 3)


def test_integrand_from_spec_recreates():
    p = parse_problem(GOOD)
    f = integrand_from_spec(p.integrand_spec)
    X = np.random.default_rng(1).uniform(0, 1, (50, 3))
    np.testing.assert_array_equal(f(X), p.integrand(X))


def test_fingerprint_stable_and_sensitive():
    a = parse_problem(GOOD).fingerprint()
    b = parse_problem(GOOD.replace("rel_tol = 1e-6", "rel_tol = 1e-3")).fingerprint()
    assert a == b  # goal does not count
    c = parse_problem(GOOD.replace("k = 2.5", "k = 2.6")).fingerprint()
    d = parse_problem(GOOD.replace("(1 + z)**3", "(1 + z)**4")).fingerprint()
    e = parse_problem(GOOD.replace("[0, inf]]", "[0, 9]]")).fingerprint()
    assert len({a, c, d, e}) == 4
    assert len(a) == 64 and int(a, 16) >= 0


def test_fingerprint_is_stable_across_processes(tmp_path):
    import subprocess
    f = tmp_path / "p.toml"
    f.write_text(GOOD)
    code = ("import sys; from cubage.problem.problem_file import load_problem; "
            "print(load_problem(sys.argv[1]).fingerprint())")
    out = subprocess.run([sys.executable, "-c", code, str(f)], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == load_problem(f).fingerprint()


def test_unreadable_file(tmp_path):
    with pytest.raises(ProblemError) as info:
        load_problem(tmp_path / "missing.toml")
    assert "missing.toml" in str(info.value) and "\n" not in str(info.value)
    bad = tmp_path / "latin1.toml"
    bad.write_bytes(b"title = \"caf\xe9\"\n")
    with pytest.raises(ProblemError, match="UTF-8"):
        load_problem(bad)


def test_find_problem_bundled():
    p = find_problem("gaussian-overlap")
    assert p.name == "gaussian-overlap.toml" and p.is_file()
    assert find_problem("gaussian-overlap.toml") == p
    assert find_problem(str(p)) == p
    prob = load_problem(p)
    assert prob.dim == 3 and prob.reference is not None
    assert (bundled_problem_dir() / "gaussian-overlap.toml").is_file()


def test_find_problem_unknown_lists_names():
    with pytest.raises(ProblemError) as info:
        find_problem("gaussian-overlapp")
    msg = str(info.value)
    assert "gaussian-overlap" in msg and "available" in msg and "\n" not in msg


def test_problem_dirs_prefers_local(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert problem_dirs() == [bundled_problem_dir()]
    (tmp_path / "problems").mkdir()
    (tmp_path / "problems" / "mine.toml").write_text(GOOD)
    monkeypatch.chdir(tmp_path)
    assert problem_dirs() == [tmp_path / "problems"]
    assert [p.name for p in list_problems()] == ["mine.toml"]
    assert find_problem("mine") == tmp_path / "problems" / "mine.toml"
    # the bundled ones stay reachable by name
    assert find_problem("gaussian-overlap").parent == bundled_problem_dir()


def test_all_bundled_problems_parse():
    files = list_problems([bundled_problem_dir()])
    assert 8 <= len(files) <= 10
    for f in files:
        p = load_problem(f)
        assert p.title and p.notes and p.reference is not None and p.reference.source


PY_INTEGRAND = """
import numpy as np

def f(X):
    return np.exp(-X[:, 0]) * X[:, 1]

def vec(X):
    return np.stack([X[:, 0], X[:, 1] ** 2], axis=1)

def broken(X):
    raise RuntimeError("oops")

def wrong_shape(X):
    return np.zeros(3)
"""


def _py_problem(target):
    return f"""
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 2]]
[integrand]
python = "{target}"
"""


def test_python_integrand_needs_trust(tmp_path):
    (tmp_path / "mine.py").write_text(PY_INTEGRAND)
    prob = tmp_path / "p.toml"
    prob.write_text(_py_problem("mine.py:f"))
    with pytest.raises(ProblemError) as info:
        load_problem(prob)
    msg = str(info.value)
    assert "[integrand] python" in msg and "--allow-python" in msg and str(prob) in msg
    assert "\n" not in msg
    p = load_problem(prob, allow_python=True)
    X = np.array([[0.5, 1.5]])
    # reference: exp(-0.5) * 1.5 computed with numpy
    assert p.integrand(X)[0] == pytest.approx(np.exp(-0.5) * 1.5, rel=1e-15)
    assert p.integrand_spec["kind"] == "python" and p.components == 1
    again = integrand_from_spec(p.integrand_spec)
    assert again(X)[0] == p.integrand(X)[0]
    fp = p.fingerprint()
    (tmp_path / "mine.py").write_text(PY_INTEGRAND + "\n# edited\n")
    assert load_problem(prob, allow_python=True).fingerprint() != fp


def test_python_integrand_vector_and_module(tmp_path, monkeypatch):
    (tmp_path / "mine.py").write_text(PY_INTEGRAND)
    prob = tmp_path / "p.toml"
    prob.write_text(_py_problem("mine.py:vec"))
    assert load_problem(prob, allow_python=True).components == 2
    (tmp_path / "pkg_for_cubage_test.py").write_text(PY_INTEGRAND)
    prob.write_text(_py_problem("pkg_for_cubage_test:f"))
    p = load_problem(prob, allow_python=True)
    assert p.components == 1


@pytest.mark.parametrize("target,words", [
    ("mine.py:nothere", "no function"),
    ("missing.py:f", "cannot find"),
    ("no_such_module_for_cubage:f", "cannot import"),
    ("mine.py:broken", "RuntimeError"),
    ("mine.py:wrong_shape", "shape"),
    ("syntaxerr.py:f", "SyntaxError"),
])
def test_python_integrand_failures(tmp_path, target, words):
    (tmp_path / "mine.py").write_text(PY_INTEGRAND)
    (tmp_path / "syntaxerr.py").write_text("def f(:\n")
    prob = tmp_path / "p.toml"
    prob.write_text(_py_problem(target))
    with pytest.raises(ProblemError) as info:
        load_problem(prob, allow_python=True)
    msg = str(info.value)
    assert "\n" not in msg and "[integrand] python" in msg and words in msg
    assert msg.startswith(str(prob))


def test_mutated_problem_files_never_crash():
    # random small edits of the shipped files must give a Problem or a ProblemError, nothing else
    import random
    rng = random.Random(7)
    texts = [f.read_text() for f in list_problems([bundled_problem_dir()])]
    alphabet = '[]{}="01.-x,_ e#\n*('
    for _ in range(400):
        s = list(rng.choice(texts))
        for _ in range(rng.randint(1, 3)):
            j = rng.randrange(len(s))
            op = rng.random()
            if op < 0.4:
                del s[j]
            elif op < 0.8:
                s[j] = rng.choice(alphabet)
            else:
                s.insert(j, rng.choice(alphabet))
        try:
            parse_problem("".join(s), path="fuzz.toml")
        except ProblemError as exc:
            assert "\n" not in exc.headline and exc.headline.startswith("fuzz.toml")


def test_domain_scale_key(tmp_path):
    # a scale per variable reaches the Box; bad scales are one-line errors naming the key
    from cubage.problem.problem_file import ProblemError, parse_problem
    good = ('[domain]\nvariables = ["x", "y"]\nbox = [[0, inf], [-inf, inf]]\nscale = [20, 3]\n'
            '[integrand]\nexpr = "exp(-x/20 - y*y/9)"\n')
    p = parse_problem(good, path=tmp_path / "s.toml")
    assert list(p.domain.scale) == [20.0, 3.0]
    for bad, what in (("scale = [20]", "2 positive numbers"), ("scale = [20, -1]", "positive"),
                      ('scale = [20, "a"]', "positive")):
        with pytest.raises(ProblemError) as exc:
            parse_problem(good.replace("scale = [20, 3]", bad), path=tmp_path / "s.toml")
        msg = str(exc.value)
        assert "\n" not in msg and "[domain] scale" in msg and what in msg
