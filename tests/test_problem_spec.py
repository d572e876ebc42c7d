"""The two-phase problem model (issue 11 item 4) and the fingerprint of Python integrands (issue 10 item 15e).

Reading a problem file gives pure data (:class:`ProblemSpec`) and never imports
user code; binding gives the integrand, which pickles by reference.
"""

from __future__ import annotations

import pickle
import textwrap

import numpy as np
import pytest

from cubage.problem.expr import CompiledExpression
from cubage.problem.problem_file import (
    ProblemError,
    ProblemSpec,
    PythonIntegrand,
    bind_problem,
    integrand_from_spec,
    load_problem,
    load_problem_spec,
    read_problem_spec,
)

EXPR = """
title = "moments"
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 2]]
[integrand]
expr = ["x * y", "k"]
constants = { k = 3.0 }
[reference]
value = [1.0, 6.0]
source = "by hand: integral of x*y over [0,1]x[0,2] is 1/2 * 2 = 1; of 3 is 3 * area 2 = 6"
"""


def _python_problem(tmp_path, body: str, target: str = "mine.py:f", extra: str = "") -> tuple:
    (tmp_path / "mine.py").write_text(textwrap.dedent(body))
    f = tmp_path / "p.toml"
    f.write_text(f'[domain]\nvariables = ["x"]\nbox = [[0, 1]]\n[integrand]\npython = "{target}"\n{extra}')
    return f


def test_spec_is_pure_data_and_binds():
    """issue 11 item 4: the spec holds the checked data; binding gives the same integrand as parse_problem."""
    spec = read_problem_spec(EXPR, path="m.toml")
    assert isinstance(spec, ProblemSpec)
    assert spec.variables == ("x", "y") and spec.expr == ("x * y", "k") and spec.python is None
    assert spec.constants == {"k": 3.0} and spec.components == 2 and spec.kind == "expr"
    assert spec.line_of("integrand", "expr") == 7 and spec.line_of("reference") == 9
    with pytest.raises(AttributeError):
        spec.title = "changed"                   # frozen
    p = bind_problem(spec)
    assert p.spec is spec and p.components == 2
    out = p.integrand(np.array([[0.5, 2.0]]))
    np.testing.assert_array_equal(out, [[1.0, 3.0]])   # x*y = 1, k = 3, by hand
    rows = dict(spec.describe())
    assert rows["integrand"].startswith("x * y ; k")


def test_reading_never_imports_user_code(tmp_path):
    """issue 11 item 4: reading (and cubage list) never runs the module; binding does, when allowed."""
    marker = tmp_path / "imported"
    f = _python_problem(tmp_path, f"""
        open({str(marker)!r}, "w").close()
        def f(X):
            return X[:, 0]
        """)
    spec = load_problem_spec(f)
    assert spec.needs_python and spec.components is None and spec.python == "mine.py:f"
    assert not marker.exists()
    with pytest.raises(ProblemError, match="--allow-python"):
        bind_problem(spec)
    assert not marker.exists()
    p = bind_problem(spec, allow_python=True)
    assert marker.exists() and p.components == 1
    assert isinstance(p.integrand, PythonIntegrand)


def test_bound_integrands_pickle_by_reference(tmp_path):
    """issue 11 item 4: workers get a picklable integrand (expression by source, Python code by import path)."""
    e = bind_problem(read_problem_spec(EXPR)).integrand
    assert isinstance(e, CompiledExpression)
    X = np.array([[0.25, 0.5], [1.0, 2.0]])
    np.testing.assert_array_equal(pickle.loads(pickle.dumps(e))(X), e(X))
    f = _python_problem(tmp_path, """
        def f(X):
            return 2 * X[:, 0]
        """)
    py = load_problem(f, allow_python=True).integrand
    blob = pickle.dumps(py)
    assert b"def f" not in blob and b"mine.py:f" in blob        # travels as its import path, not its code
    back = pickle.loads(blob)
    np.testing.assert_array_equal(back(np.array([[0.25]])), [0.5])   # 2x at x = 1/4


def test_python_fingerprint_covers_the_imported_code(tmp_path):
    """issue 10 item 15e: editing the module (or a module it imports) changes the fingerprint."""
    (tmp_path / "helper_for_fp.py").write_text("def g(X):\n    return X[:, 0]\n")
    f = _python_problem(tmp_path, """
        from helper_for_fp import g
        def f(X):
            return g(X)
        """)
    first = load_problem(f, allow_python=True).fingerprint()
    assert load_problem(f, allow_python=True).fingerprint() == first          # stable
    (tmp_path / "helper_for_fp.py").write_text("def g(X):\n    return 2 * X[:, 0]\n")
    second = load_problem(f, allow_python=True).fingerprint()
    assert second != first
    (tmp_path / "mine.py").write_text((tmp_path / "mine.py").read_text() + "\n# edited\n")
    assert load_problem(f, allow_python=True).fingerprint() not in (first, second)


def test_python_module_target_fingerprint(tmp_path, monkeypatch):
    """issue 10 item 15e: for "module:function" the module's source file is fingerprinted, not only its name."""
    monkeypatch.syspath_prepend(str(tmp_path))
    (tmp_path / "fp_module_target.py").write_text("def f(X):\n    return X[:, 0]\n")
    f = tmp_path / "p.toml"
    f.write_text('[domain]\nvariables = ["x"]\nbox = [[0, 1]]\n[integrand]\npython = "fp_module_target:f"\n')
    first = load_problem(f, allow_python=True).fingerprint()
    (tmp_path / "fp_module_target.py").write_text("def f(X):\n    return X[:, 0] ** 2\n")
    assert load_problem(f, allow_python=True).fingerprint() != first


def test_worker_refuses_code_that_changed(tmp_path):
    """issue 10 item 15e: a worker re-creating the integrand refuses code edited since the run started."""
    f = _python_problem(tmp_path, """
        def f(X):
            return X[:, 0]
        """)
    p = load_problem(f, allow_python=True)
    spec = dict(p.integrand_spec)
    assert len(spec["code_sha256"]) == 64
    assert integrand_from_spec(spec) is not None
    blob = pickle.dumps(p.integrand)
    (tmp_path / "mine.py").write_text("def f(X):\n    return 0 * X[:, 0]\n")
    # a process that already holds the code the run started with keeps using it (it is the right code) ...
    assert pickle.loads(blob)(np.array([[0.5]]))[0] == 0.5
    # ... a fresh worker process would import the edited file: simulate it by forgetting the bound integrands
    from cubage.problem import python_integrand
    python_integrand._BOUND.clear()
    with pytest.raises(ProblemError, match="changed on disk"):
        integrand_from_spec(spec)
    with pytest.raises(python_integrand.PythonTargetError, match="changed on disk"):
        pickle.loads(blob)


def test_python_reference_count_checked_when_bound(tmp_path):
    """issue 11 item 4: a Python integrand's component count is known only once bound; then it is checked."""
    f = _python_problem(tmp_path, """
        def f(X):
            return X[:, 0]
        """, extra='[reference]\nvalue = [1.0, 2.0]\nsource = "s"\n')
    load_problem_spec(f)                           # fine as data
    with pytest.raises(ProblemError, match="one component"):
        load_problem(f, allow_python=True)


def test_spec_to_json_is_strict_json():
    """issue 10 item 20: the spec's JSON form has no bare inf (JSON cannot hold it)."""
    import json
    text = EXPR.replace("[[0, 1], [0, 2]]", "[[0, inf], [0, 2]]").replace("value = [1.0, 6.0]", "value = [inf, 6.0]")
    obj = read_problem_spec(text).to_json()
    s = json.dumps(obj, allow_nan=False)
    assert '"inf"' in s and obj["dimension"] == 2


def test_load_problem_spec_refuses_folders_and_huge_files(tmp_path):
    """issue 10 item 21: a folder given as a problem says what to give instead; oversized files are refused."""
    with pytest.raises(ProblemError, match="is a folder"):
        load_problem_spec(tmp_path)
    big = tmp_path / "big.toml"
    big.write_text("# " + "x" * 1_100_000 + "\n")
    with pytest.raises(ProblemError, match="larger than"):
        load_problem_spec(big)


def test_rebinding_after_an_edit_runs_the_new_code(tmp_path):
    """issue 10 item 15e: a long-lived process (the UI) that binds again after an edit runs the edited code,
    so the code run and the fingerprint always agree."""
    f = _python_problem(tmp_path, """
        def f(X):
            return X[:, 0]
        """)
    X = np.array([[0.5]])
    assert load_problem(f, allow_python=True).integrand(X)[0] == 0.5          # f = x
    (tmp_path / "mine.py").write_text("def f(X):\n    return 3 * X[:, 0]\n")
    assert load_problem(f, allow_python=True).integrand(X)[0] == 1.5          # f = 3x after the edit


def test_unpickled_expressions_are_compiled_once_per_process():
    """issue 11 item 4: an expression pickled to a worker is compiled once there, not once per task."""
    e = bind_problem(read_problem_spec(EXPR)).integrand
    a, b = pickle.loads(pickle.dumps(e)), pickle.loads(pickle.dumps(e))
    assert a is b
    X = np.array([[0.5, 2.0]])
    np.testing.assert_array_equal(a(X), [[1.0, 3.0]])     # x*y = 1, k = 3, by hand


def test_ui_reads_problems_through_the_spec(tmp_path):
    """issue 10 items 7 and 11: the UI's file reading goes through the problem layer's spec:
    a many-part dotted key is refused at once, and a Python problem is described without importing it."""
    from cubage.tui.problem_facts import ProblemFacts
    hostile = tmp_path / "hostile.toml"
    hostile.write_text("a" + ".a" * 100_000 + " = 1\n")      # the TOML parser alone would take minutes
    with pytest.raises(ProblemError, match="dotted parts"):
        ProblemFacts.from_file(hostile)
    marker = tmp_path / "imported"
    f = _python_problem(tmp_path, f"""
        open({str(marker)!r}, "w").close()
        def f(X):
            return X[:, 0]
        """)
    facts = ProblemFacts.from_file(f)
    assert facts.variables == ["x"] and facts.kind == "box" and not marker.exists()
