"""Regression tests of the problem layer against hostile or surprising input (issue 10).

Every test names the issue item it pins down.  Expected integrals are closed
forms worked out by hand (named beside each check); messages are our own.
"""

from __future__ import annotations

import numpy as np
import pytest

from cubage.engine.domains import Box, DomainError, Simplex
from cubage.problem.expr import MAX_DEPTH, ExpressionError, compile_expression
from cubage.problem.problem_file import MAX_NESTING, ProblemError, parse_problem

SQUARE = '[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n'


def _problem(expr: str, domain: str = SQUARE, extra: str = "") -> str:
    return f'{domain}[integrand]\nexpr = """{expr}"""\n{extra}'


def _error(text: str) -> ProblemError:
    with pytest.raises(ProblemError) as info:
        parse_problem(text, path="bad.toml")
    err = info.value
    assert "\n" not in err.headline and err.headline.startswith("bad.toml")
    return err


# --- item 3: Unicode names are normalised as Python's parser does ------------

@pytest.mark.parametrize("name", ["ｅ", "ℯ", "ｐｉ"])
def test_variable_that_reads_as_a_builtin_constant_is_refused(name):
    """issue 10 item 3: a full-width or script 'e' or 'pi' must not silently become the constant."""
    domain = f'[domain]\nvariables = ["{name}", "y"]\nbox = [[0, 1], [0, 1]]\n'
    err = _error(_problem(name, domain))
    assert "[domain] variables" in err.headline and "NFKC" in err.headline and "constant" in err.headline


def test_two_variables_equal_after_normalisation_are_refused():
    """issue 10 item 3: 'x' and full-width 'ｘ' are one name for Python; refuse the pair."""
    domain = '[domain]\nvariables = ["x", "ｘ"]\nbox = [[0, 1], [0, 1]]\n'
    err = _error(_problem("x", domain))
    assert "'x' and 'ｘ'" in err.headline and "NFKC" in err.headline


def test_constant_equal_to_a_variable_after_normalisation_is_refused():
    """issue 10 item 3: a constant 'ｙ' would shadow the variable 'y'."""
    err = _error(_problem("x * y", extra='constants = { "ｙ" = 2.0 }\n'))
    assert "[integrand] constants" in err.headline and "variable" in err.headline


def test_normalised_variable_is_used_consistently():
    """issue 10 item 3: a lone full-width variable works and means itself (integral of x over the square = 1/2)."""
    domain = '[domain]\nvariables = ["ｘ", "y"]\nbox = [[0, 1], [0, 1]]\n'
    p = parse_problem(_problem("ｘ", domain))
    assert p.variables == ["x", "y"]
    pts = np.array([[0.25, 0.5], [0.75, 0.125]])
    np.testing.assert_array_equal(p.integrand(pts), [0.25, 0.75])   # f = x, by hand


def test_api_normalises_names_too():
    """issue 10 item 3: compile_expression refuses 'ｅ' as a variable and a pair that collides."""
    with pytest.raises(ExpressionError, match="constant e"):
        compile_expression("ｅ", ["ｅ"])
    with pytest.raises(ExpressionError, match="NFKC"):
        compile_expression("x", ["x", "ｘ"])


# --- item 4: comments in multi-line expressions ------------------------------

def test_comment_ends_at_the_end_of_its_line():
    """issue 10 item 4: 'x  # c' newline '+ 1' is x + 1 (the comment used to swallow '+ 1')."""
    p = parse_problem(_problem("x  # the first term\n+ 1  # and a constant\n"))
    np.testing.assert_array_equal(p.integrand(np.array([[0.25, 0.5]])), [1.25])   # 0.25 + 1, by hand
    f = compile_expression(["x  # c\n* 2", "y # only y"], ["x", "y"])
    np.testing.assert_array_equal(f(np.array([[0.25, 0.5]])), [[0.5, 0.5]])


def test_expression_that_is_only_a_comment_is_empty():
    """issue 10 item 4: nothing left after the comments is an empty expression, said in one line."""
    err = _error(_problem("# nothing here\n"))
    assert "[integrand] expr" in err.headline and "empty" in err.headline


# --- item 7: error messages are linear in the file size ----------------------

def test_hostile_lines_do_not_backtrack():
    """issue 10 item 7: a line '[' + 20 000 spaces (no ']') once took hours in the line-finding regex."""
    text = ('[domain]\nvariables = [\n[' + " " * 20_000 + '"x",\n]]\nbox = [[0, 1]]\n'
            '[integrand]\nexpr = "x"\n')
    err = _error(text)
    assert err.line == 2 and "[domain] variables" in err.headline


def test_line_numbers_survive_multiline_values():
    """issue 10 item 7: the linear scanner still skips arrays and strings that span lines."""
    text = ('title = "t"\nnotes = """\n[goal]\nrel_tol = 1\n"""\n[domain]\nvariables = ["x"]\nbox = [\n'
            '  [0, 1],\n]\n[integrand]\nexpr = "x"\n[goal]\nrel_tol = -1\n')
    err = _error(text)
    assert err.line == 14 and "[goal] rel_tol" in err.headline


# --- item 11 and 15i: deep nesting and huge numbers ----------------------------

def test_deeply_nested_toml():
    """issue 10 item 11: 3000 nested arrays gave RecursionError; now a one-line error."""
    err = _error(SQUARE + '[integrand]\nexpr = "x"\nnotes = ' + "[" * 3000 + "]" * 3000 + "\n")
    assert "nest" in err.headline


def test_moderately_nested_toml_names_the_key():
    """issue 10 item 11: nesting that TOML accepts but no problem needs is refused with its key."""
    deep = "[" * (MAX_NESTING + 2) + "1" + "]" * (MAX_NESTING + 2)
    err = _error(SQUARE + f'[integrand]\nexpr = "x"\n[reference]\nvalue = {deep}\nsource = "s"\n')
    assert "[reference] value" in err.headline and "nest" in err.headline


@pytest.mark.parametrize("expr", ["-" * 330 + "x", "+".join(["x"] * 300), "(" * 250 + "x" + ")" * 250,
                                  "sin(" * 400 + "x" + ")" * 400], ids=["unary", "sum", "parens", "calls"])
def test_deeply_nested_expression(expr):
    """issue 10 item 11: ~330 unary operators raised RecursionError; now a one-line expression error."""
    err = _error(_problem(expr))
    # Python's own parser stops at 200 nested parentheses ("too many nested parentheses")
    assert "[integrand] expr" in err.headline and "nested" in err.headline


def test_nesting_within_the_limit_still_works():
    """issue 10 item 11: the limit leaves room for real expressions (- applied 150 times to x is x)."""
    f = compile_expression("-" * 150 + "x", ["x"])
    assert MAX_DEPTH > 150
    np.testing.assert_array_equal(f(np.array([[0.5]])), [0.5])


def test_huge_integer_literal_in_an_expression():
    """issue 10 item 11: a 400-digit literal raised OverflowError."""
    err = _error(_problem("x + " + "9" * 400))
    assert "[integrand] expr" in err.headline and "400 digits" in err.headline


@pytest.mark.parametrize("where", ["[goal]\nrel_tol = {n}\n", "[goal]\nbudget = {n}\n",
                                   "[reference]\nvalue = {n}\nsource = \"s\"\n",
                                   "[integrand]\nexpr = \"x\"\nconstants = {{ k = {n} }}\n"])
def test_toml_number_too_large_for_a_float(where):
    """issue 10 item 15i: a 401-digit TOML number gave 'internal error' (OverflowError) in any field."""
    n = "9" * 401
    integrand = "" if where.startswith("[integrand]") else '[integrand]\nexpr = "x"\n'
    err = _error(SQUARE + integrand + where.format(n=n))
    assert "401 digits" in err.headline and "too large" in err.headline


# --- item 14: domains beyond double precision ----------------------------------

@pytest.mark.parametrize("box", ["[[0, 1e308], [0, 1e308]]", "[[-1e308, 1e308], [0, 1]]"])
def test_box_volume_overflow(box):
    """issue 10 item 14: [0, 1e308]^2 ended as 'stalled' with numpy warnings."""
    err = _error(_problem("x", f'[domain]\nvariables = ["x", "y"]\nbox = {box}\n'))
    assert "[domain] box" in err.headline and "the domain's volume overflows double precision" in err.headline


def test_domain_objects_refuse_overflow_and_underflow():
    """issue 10 item 14: the engine's domains refuse volumes a double cannot hold, in the API too."""
    with pytest.raises(DomainError, match="overflows double precision"):
        Box([0, 0], [1e308, 1e308])
    with pytest.raises(DomainError, match="underflows"):
        Box([0, 0], [1e-200, 1e-200])
    with pytest.raises(DomainError, match="overflows double precision"):
        Simplex([[0, 0], [1e200, 0], [0, 1e200]])
    # an unbounded box is fine: its infinite axes are mapped to finite ones
    assert Box([0, -np.inf], [1e300, np.inf]).volume() == np.inf
    # a 171-D simplex: d! is beyond a double, the volume check must not overflow (it underflows: 1/171!)
    with pytest.raises(DomainError, match="underflows"):
        Simplex(np.vstack([np.zeros(171), np.eye(171)]))


# --- item 6 and 8: dimension and degree limits per rule ------------------------

def _box(d: int) -> str:
    names = ", ".join(f'"x{i}"' for i in range(d))
    return f"[domain]\nvariables = [{names}]\nbox = [{', '.join(['[0, 1]'] * d)}]\n"


def test_fifty_dimensions_are_refused_with_the_reason():
    """issue 10 item 6: a 50-variable box grew to 24 GB (Genz-Malik has 2^d nodes); refuse and say why."""
    err = _error(_problem("x0", _box(50)))
    assert "[domain] variables" in err.headline
    assert "genz-malik supports 2 to 15 dimensions" in err.headline and "2^d" in err.headline


def test_gauss_kronrod_dimension_limit():
    """issue 10 item 6: the tensor Gauss-Kronrod rule says it stops at 5 dimensions (15^d nodes)."""
    err = _error(_problem("x0", _box(6), '[method]\nrule = "gauss-kronrod"\n'))
    assert "[method] rule" in err.headline and "1 to 5 dimensions" in err.headline and "15^d" in err.headline


def test_simplex_dimension_limit():
    """issue 10 item 6: the Grundmann-Moller rule says it stops at 20 dimensions."""
    d = 25
    names = ", ".join(f'"x{i}"' for i in range(d))
    verts = ", ".join(["[" + ", ".join("1" if j == i else "0" for j in range(d)) + "]" for i in range(-1, d)])
    err = _error(_problem("x0", f"[domain]\nvariables = [{names}]\nsimplex = [{verts}]\n"))
    assert "[domain] variables" in err.headline and "1 to 20 dimensions" in err.headline


def test_python_api_refuses_unsupported_dimensions():
    """issue 10 item 6: integrate() raises ValueError with the same clear message."""
    from cubage import integrate
    with pytest.raises(ValueError, match="genz-malik supports 2 to 15 dimensions"):
        integrate(lambda X: X[:, 0], Box(np.zeros(50), np.ones(50)))
    with pytest.raises(ValueError, match="gauss-kronrod supports 1 to 5"):
        integrate(lambda X: X[:, 0], Box(np.zeros(6), np.ones(6)), rule="gauss-kronrod")


TRIANGLE = '[domain]\nvariables = ["x", "y"]\nsimplex = [[0, 0], [1, 0], [0, 1]]\n'


@pytest.mark.parametrize("degree", [10001, 17])
def test_simplex_degree_is_bounded(degree):
    """issue 10 item 8: degree 10001 built the rule with exact fractions for minutes; bound it and say why."""
    err = _error(_problem("x", TRIANGLE, f"[method]\ndegree = {degree}\n"))
    assert "[method] degree" in err.headline and "3 to 15" in err.headline and "alternate in sign" in err.headline


def test_simplex_rules_are_cached_and_node_count_is_bounded():
    """issue 10 item 8: a built rule is shared (cached); too many nodes are refused before building."""
    from cubage.engine.rules import rule_limit_error, simplex_rule
    assert simplex_rule("grundmann-moller", 3, 9) is simplex_rule("grundmann-moller", 3, 9)
    assert "nodes per region" in rule_limit_error("grundmann-moller", 20, 11)
    assert rule_limit_error("grundmann-moller", 3, 15) is None
    with pytest.raises(ValueError, match="3 to 15"):
        simplex_rule("grundmann-moller", 2, 10001)


# --- item 21: an unknown name lists the declared ones --------------------------

def test_unknown_variable_lists_the_declared_variables():
    """issue 10 item 21: 'unknown name' suggested a Bessel function; now it lists the variables."""
    err = _error(_problem("x * j", extra="constants = { k = 2.0 }\n"))
    assert "unknown name 'j'" in err.headline and "the variables are x, y" in err.headline
    assert "constants k" in err.headline and "j0" not in err.headline and "j1" not in err.headline
    err = _error(_problem("xx + y"))
    assert "did you mean 'x'" in err.headline


# --- item 7 and 11: what would make the TOML parser itself slow or deep --------

def test_dotted_key_with_many_parts_is_refused_before_parsing():
    """issue 10 item 7: tomllib is quadratic in the parts of a dotted key (200 KB of 'a.a.a' ran for minutes)."""
    err = _error("a" + ".a" * 100_000 + " = 1\n")
    assert "dotted parts" in err.headline and err.line == 1


def test_nested_inline_tables_are_refused_before_parsing():
    """issue 10 item 11: 5000 nested inline tables would recurse in the TOML parser."""
    err = _error(SQUARE + "[integrand]\nexpr = \"x\"\nnotes = " + "{ b = " * 5000 + "1" + " }" * 5000 + "\n")
    assert "nest" in err.headline


def test_ordinary_dots_and_brackets_pass_the_prescan():
    """issue 10 item 7: floats, dotted strings, multi-line arrays and [[...]] do not trip the pre-scan."""
    text = ('title = "a.b.c.d.e.f.g.h.i.j.k.l.m.n.o.p.q.r.s"\n[domain]\nvariables = ["x", "y"]\n'
            'box = [\n  [0.5, 1.5],  # a comment with . . . . . . . . . . . . . . . . . . dots\n  [0.25, 2.5],\n]\n'
            '[integrand]\nexpr = """\nx * y  # 1.0.0.0.0.0.0.0.0.0.0.0.0.0.0.0.0.0\n"""\n')
    p = parse_problem(text)
    assert p.dim == 2


def test_many_variables_refused_before_building_anything():
    """issue 10 item 6: a 300-D simplex is refused by its dimension before its vertices are checked."""
    d = 300
    names = ", ".join(f'"v{i}"' for i in range(d))
    verts = ", ".join(["[" + ", ".join("1" if j == i else "0" for j in range(d)) + "]" for i in range(-1, d)])
    err = _error(_problem("v0", f"[domain]\nvariables = [{names}]\nsimplex = [{verts}]\n"))
    assert "[domain] variables" in err.headline and "1 to 20 dimensions" in err.headline


def test_long_expressions_and_many_constants_keep_messages_short():
    """issue 10 items 7 and 21: the caret line shows a window of a long expression and the list of names is cut."""
    consts = "constants = { " + ", ".join(f"c{i} = 1.0" for i in range(500)) + " }\n"
    err = _error(_problem("x + " * 150 + "qq", extra=consts))
    assert "unknown name 'qq'" in err.headline and "and 488 more" in err.headline
    expr_line, caret = str(err).splitlines()[1:3]
    assert len(expr_line) < 120 and expr_line[caret.index("^"):].startswith("qq")
