"""Tests of the expression compiler against numpy / scipy evaluated directly."""

import math
import pickle

import numpy as np
import pytest
import scipy.special as sc

from cubage.problem.expr import CompiledExpression, ExpressionError, compile_expression

RNG = np.random.default_rng(12345)
X3 = RNG.uniform(0.1, 2.0, size=(257, 3))
x, y, z = X3.T


def test_arithmetic_matches_numpy():
    f = compile_expression("x**2 - 3*y/z + (x % 0.7) + -z + +y", ["x", "y", "z"])
    # reference: the same formula written directly in numpy
    np.testing.assert_allclose(f(X3), x**2 - 3 * y / z + np.mod(x, 0.7) - z + y, rtol=1e-14)


def test_functions_match_numpy_and_scipy():
    src = "exp(-x) * sin(y) + log1p(z) + sqrt(x*y) + j0(x) + erf(y) + gamma(z) + hypot(x, y) + arctan2(y, x)"
    f = compile_expression(src, ["x", "y", "z"])
    # reference: numpy and scipy.special called directly
    want = (np.exp(-x) * np.sin(y) + np.log1p(z) + np.sqrt(x * y) + sc.j0(x) + sc.erf(y)
            + sc.gamma(z) + np.hypot(x, y) + np.arctan2(y, x))
    np.testing.assert_allclose(f(X3), want, rtol=1e-13)


def test_aliases_and_variadic_min_max():
    f = compile_expression("atan2(y, x) + asinh(z) + max(x, y, z) - min(x, y)", ["x", "y", "z"])
    # reference: numpy's own arctan2 / arcsinh / maximum / minimum
    want = np.arctan2(y, x) + np.arcsinh(z) + np.maximum(np.maximum(x, y), z) - np.minimum(x, y)
    np.testing.assert_allclose(f(X3), want, rtol=1e-14)


def test_known_values_at_a_point():
    f = compile_expression("sinc(x)", ["x"])
    # np.sinc is normalised: sinc(0.5) = sin(pi/2)/(pi/2) = 2/pi (definition, numpy docs)
    assert f(np.array([[0.5]]))[0] == pytest.approx(2 / math.pi, rel=1e-15)
    g = compile_expression("gamma(x)", ["x"])
    # Gamma(5) = 4! = 24 (definition of the Gamma function on integers)
    assert g(np.array([[5.0]]))[0] == pytest.approx(24.0, rel=1e-14)


def test_comparisons_give_zero_one_floats():
    f = compile_expression("0.5 < x < 1.5", ["x", "y", "z"])
    out = f(X3)
    # reference: numpy's elementwise logical_and of the two comparisons
    np.testing.assert_array_equal(out, ((0.5 < x) & (x < 1.5)).astype(float))
    assert out.dtype == np.float64
    g = compile_expression("(x < 1 and y > 1) or not z < 1", ["x", "y", "z"])
    np.testing.assert_array_equal(g(X3), (((x < 1) & (y > 1)) | ~(z < 1)).astype(float))
    h = compile_expression("(x**2 + y**2 <= 2) * exp(-z)", ["x", "y", "z"])
    np.testing.assert_allclose(h(X3), (x**2 + y**2 <= 2) * np.exp(-z), rtol=1e-15)


def test_constants_and_pi_e():
    f = compile_expression("k * x + pi - e", ["x", "y", "z"], {"k": 2.5})
    # reference: math.pi and math.e
    np.testing.assert_allclose(f(X3), 2.5 * x + math.pi - math.e, rtol=1e-15)


def test_vector_expression_shape():
    f = compile_expression(["x", "y*z", "1"], ["x", "y", "z"])
    out = f(X3)
    assert out.shape == (X3.shape[0], 3)
    assert f.components == 3
    np.testing.assert_allclose(out[:, 1], y * z, rtol=1e-15)
    np.testing.assert_array_equal(out[:, 2], np.ones(X3.shape[0]))


def test_constant_expression_broadcasts():
    f = compile_expression("2 * pi", ["x", "y", "z"])
    out = f(X3)
    assert out.shape == (X3.shape[0],)
    np.testing.assert_array_equal(out, np.full(X3.shape[0], 2 * math.pi))


def test_nonfinite_values_do_not_raise():
    f = compile_expression("1/x + 10**400 + log(x - 5)", ["x"])
    out = f(np.array([[0.0], [1.0]]))
    # IEEE-754: 1/0 = inf, 10**400 overflows to inf, log of a negative number is NaN
    assert not np.isfinite(out).any()


def test_pickle_round_trip():
    f = compile_expression("exp(-k*(x**2 + y**2)) * (z < 1)", ["x", "y", "z"], {"k": 1.25})
    g = pickle.loads(pickle.dumps(f))
    assert isinstance(g, CompiledExpression)
    np.testing.assert_array_equal(g(X3), f(X3))
    assert g.fingerprint == f.fingerprint


def test_fingerprint_stable_and_sensitive():
    a = compile_expression("x + k", ["x"], {"k": 1.0})
    b = compile_expression("x + k", ["x"], {"k": 1.0})
    c = compile_expression("x + k", ["x"], {"k": 2.0})
    assert a.fingerprint == b.fingerprint
    assert a.fingerprint != c.fingerprint
    assert len(a.fingerprint) == 64


def test_wrong_point_shape_is_an_error():
    f = compile_expression("x + y", ["x", "y"])
    with pytest.raises(ValueError):
        f(np.zeros((4, 3)))


# (expression, words expected in the reason, column of the caret, caret width or None)
HOSTILE = [
    ("x.__class__", "attribute", 0, None),
    ("__import__('os')", "'_'", 0, 10),
    ("x[0]", "subscript", 0, None),
    ("lambda: 1", "lambda", 0, None),
    ("1 + exp([t for t in x])", "comprehension", 8, None),
    ("x + 'a'", "string", 4, 3),
    ("x + b'a'", "bytes", 4, 4),
    ("f'{x}'", "f-string", 0, None),
    ("exp(x=1)", "keyword", 4, 3),
    ("_x + 1", "'_'", 0, 2),
    ("(y := 1) + x", ":=", 1, None),
    ("open('f')", "unknown function", 0, 4),
    ("eval('1')", "unknown function", 0, 4),
    ("x + 1j", "complex", 4, 2),
    ("exp(*x)", "starred", 4, 2),
    ("sinn(x)", "did you mean 'sin'", 0, 4),
    ("2 * xx", "did you mean 'x'", 4, 2),
    ("exp(x, y)", "takes 1 argument", 0, None),
    ("x if y else 1", "where(", 0, None),
    ("x & y", "'and'", 0, None),
    ("x // y", "floor", 0, None),
    ("True + x", "number", 0, 4),
    ("sin + x", "call it", 0, 3),
    ("x(2)", "not a function", 0, 1),
    ("x in y", "comparison", 0, None),
    ("np.sin(x)", "attribute", 0, None),
]


@pytest.mark.parametrize("src,words,col,width", HOSTILE)
def test_hostile_expressions_rejected_with_caret(src, words, col, width):
    with pytest.raises(ExpressionError) as info:
        compile_expression(src, ["x", "y"])
    err = info.value
    assert words in err.reason
    assert err.source == src
    assert err.column == col
    lines = str(err).splitlines()
    assert lines[0] == err.reason
    assert lines[1].strip() == src
    caret = lines[2]
    # the caret sits under the offending node, at the same offset as in the expression line
    offset = lines[1].index(src)
    assert caret.index("^") - offset == col
    if width is not None:
        assert caret.count("^") == width


def test_syntax_error_and_empty():
    with pytest.raises(ExpressionError) as info:
        compile_expression("x +* 2", ["x"])
    assert "syntax" in info.value.reason and info.value.column == 3
    with pytest.raises(ExpressionError, match="empty"):
        compile_expression("   ", ["x"])
    with pytest.raises(ExpressionError, match="empty"):
        compile_expression([], ["x"])


def test_vector_error_names_component():
    with pytest.raises(ExpressionError) as info:
        compile_expression(["x", "y + nope"], ["x", "y"])
    assert info.value.index == 1 and info.value.column == 4


def test_bad_variable_names_rejected():
    for names in (["sin"], ["pi"], ["_a"], ["x", "x"], ["lambda"], ["1x"]):
        with pytest.raises(ExpressionError):
            compile_expression("1", names)
    with pytest.raises(ExpressionError):
        compile_expression("1", ["x"], {"x": 1.0})


def test_no_builtins_reachable():
    # even names the checker would allow cannot reach Python builtins at run time
    f = compile_expression("abs(x)", ["x"])
    assert "__builtins__" in f._base and f._base["__builtins__"] == {}


def test_huge_integer_power_is_not_computed_exactly():
    # 10**10**10 would take forever with Python integers; as floats it is inf at once
    f = compile_expression("10**10**10 * x", ["x"])
    assert np.isinf(f(np.array([[1.0]]))[0])


def test_reading_problems_does_not_import_scipy_special():
    """Start-up cleanup item 5: reading every bundled problem (and compiling its expression) no longer imports
    scipy.special (about 0.2 s); the first evaluation of an expression that calls one of its functions does, and
    gives the function's value (math.erf and math.gamma from the standard library as the reference)."""
    import subprocess
    import sys

    from conftest import cubage_env
    code = (
        "import sys, math, numpy as np\n"
        "from cubage.problem.problem_file import list_problems, load_problem_spec\n"
        "specs = [load_problem_spec(p) for p in list_problems()]\n"
        "from cubage.problem.expr import compile_expression\n"
        "f = compile_expression('erf(x) + gamma(y)', ['x', 'y'])\n"
        "print(len(specs), 'scipy.special' in sys.modules)\n"
        "v = f(np.array([[0.3, 2.5]]))[0]\n"
        "print('scipy.special' in sys.modules, abs(v - (math.erf(0.3) + math.gamma(2.5))) < 1e-14)\n")
    r = subprocess.run([sys.executable, "-c", code], env=cubage_env(), capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    first, second = r.stdout.split("\n")[:2]
    assert int(first.split()[0]) >= 5 and first.split()[1] == "False"
    assert second == "True True"
