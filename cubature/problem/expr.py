"""A small, safe compiler for integrand expressions written in problem files.

An expression such as ``"exp(-k*(x**2 + y**2)) / (1 + z)**3"`` is parsed with
:mod:`ast`, checked against a whitelist (numbers, the declared variables and
constants, ``pi``, ``e``, arithmetic, comparisons, ``and``/``or``/``not`` and
calls to a fixed table of numpy / scipy.special functions), rewritten so that
every operation is elementwise on arrays, and compiled once to a code object.

Evaluation takes the points as an ``(n, d)`` float64 array and returns ``(n,)``
values (or ``(n, m)`` for a list of ``m`` expressions).  Nothing outside the
function table is reachable: the code runs with empty builtins, and attribute
access, subscripts, strings, lambdas and the like are refused before anything
is compiled.

Comparisons give ``1.0`` (true) or ``0.0`` (false), so indicator integrands can
be written directly: ``(x**2 + y**2 < 1) * exp(-x)``.  ``and``, ``or`` and
``not`` combine such values elementwise (any nonzero value counts as true) and
also give ``0.0`` / ``1.0``.
"""

from __future__ import annotations

import ast
import difflib
import functools
import hashlib
import json
import keyword
import math
import unicodedata

import numpy as np

__all__ = ["ExpressionError", "CompiledExpression", "compile_expression", "FUNCTIONS",
           "RESERVED_NAMES", "function_names", "normalise_name", "declared_name", "MAX_DEPTH"]


#: Longest part of an expression shown under an error message.
_SHOWN = 100


class ExpressionError(ValueError):
    """An expression that cannot be compiled.

    Attributes
    ----------
    reason : str
        What is wrong, one line.
    source : str
        The expression as it was read (newlines flattened to spaces).
    column : int or None
        0-based character column of the offending part, if known.
    end_column : int or None
        End column (exclusive) of the offending part, if known.
    index : int or None
        For a list of expressions, the position of the faulty one.
    """

    def __init__(self, reason: str, source: str = "", column: int | None = None,
                 end_column: int | None = None, index: int | None = None):
        self.reason = reason
        self.source = source
        self.column = column
        self.end_column = end_column
        self.index = index
        super().__init__(self._render())

    def caret_lines(self) -> list[str]:
        """The expression and, when the column is known, a ``^^^`` line under the culprit."""
        if not self.source:
            return []
        text, shift = self.source, 0
        if len(text) > _SHOWN:     # a long expression: a window around the culprit, not the whole text
            col0 = self.column or 0
            start = max(0, min(col0 - _SHOWN // 2, len(text) - _SHOWN))
            text = ("..." if start else "") + text[start:start + _SHOWN] + (
                "..." if start + _SHOWN < len(self.source) else "")
            shift = start - (3 if start else 0)
        lines = ["    " + text]
        if self.column is not None:
            col = max(0, min(self.column - shift, len(text)))
            end = (self.end_column - shift) if self.end_column is not None else col + 1
            width = max(1, min(end, len(text) + 1, col + _SHOWN) - col)
            lines.append("    " + " " * col + "^" * width)
        return lines

    def _render(self) -> str:
        return "\n".join([self.reason, *self.caret_lines()])


# --------------------------------------------------------------------------
# the function table
# --------------------------------------------------------------------------

def _heaviside(x, h0=0.5):
    return np.heaviside(x, h0)


def _where(cond, a, b):
    return np.where(np.asarray(cond) != 0, a, b)


def _min(*args):
    return functools.reduce(np.minimum, args)


def _max(*args):
    return functools.reduce(np.maximum, args)


class _Special:
    """A scipy.special function imported on first use.

    Importing :mod:`scipy.special` takes about 0.2 s, which every ``cubage`` command paid at start-up when this
    module imported it eagerly; most expressions need none of its functions.  A compiled expression puts the real
    function in its namespace (:meth:`resolve`), so evaluation pays nothing for the indirection.
    """

    __slots__ = ("name", "_fn")

    def __init__(self, name: str):
        self.name = name
        self._fn = None

    def resolve(self):
        if self._fn is None:
            import scipy.special
            self._fn = getattr(scipy.special, self.name)
        return self._fn

    def __call__(self, *args):
        return self.resolve()(*args)

    def __repr__(self) -> str:
        return f"<scipy.special.{self.name}, imported on first use>"


class _SpecialNames:
    """``sc.erf`` and the like, as :class:`_Special` placeholders (the table below reads as before)."""

    def __getattr__(self, name: str) -> _Special:
        return _Special(name)


sc = _SpecialNames()


# name -> (callable, min args, max args or None for "any number")
FUNCTIONS: dict[str, tuple[object, int, int | None]] = {}


_SAME = object()


def _add(names, fn, lo, hi=_SAME):
    hi = lo if hi is _SAME else hi
    for n in names.split():
        FUNCTIONS[n] = (fn, lo, hi)


_add("sin", np.sin, 1)
_add("cos", np.cos, 1)
_add("tan", np.tan, 1)
_add("arcsin asin", np.arcsin, 1)
_add("arccos acos", np.arccos, 1)
_add("arctan atan", np.arctan, 1)
_add("arctan2 atan2", np.arctan2, 2)
_add("sinh", np.sinh, 1)
_add("cosh", np.cosh, 1)
_add("tanh", np.tanh, 1)
_add("arcsinh asinh", np.arcsinh, 1)
_add("arccosh acosh", np.arccosh, 1)
_add("arctanh atanh", np.arctanh, 1)
_add("exp", np.exp, 1)
_add("exp2", np.exp2, 1)
_add("expm1", np.expm1, 1)
_add("log ln", np.log, 1)
_add("log1p", np.log1p, 1)
_add("log2", np.log2, 1)
_add("log10", np.log10, 1)
_add("sqrt", np.sqrt, 1)
_add("cbrt", np.cbrt, 1)
_add("square", np.square, 1)
_add("abs", np.abs, 1)
_add("fabs", np.fabs, 1)
_add("hypot", np.hypot, 2)
_add("minimum", np.minimum, 2)
_add("maximum", np.maximum, 2)
_add("min", _min, 2, None)
_add("max", _max, 2, None)
_add("where", _where, 3)
_add("clip", np.clip, 3)
_add("floor", np.floor, 1)
_add("ceil", np.ceil, 1)
_add("trunc", np.trunc, 1)
_add("sign", np.sign, 1)
_add("copysign", np.copysign, 2)
_add("heaviside", _heaviside, 1, 2)
_add("erf", sc.erf, 1)
_add("erfc", sc.erfc, 1)
_add("erfcx", sc.erfcx, 1)
_add("erfinv", sc.erfinv, 1)
_add("dawsn", sc.dawsn, 1)
_add("expit", sc.expit, 1)
_add("gamma", sc.gamma, 1)
_add("gammaln", sc.gammaln, 1)
_add("loggamma", sc.gammaln, 1)   # real log|Gamma| for real arguments
_add("digamma psi", sc.digamma, 1)
_add("beta", sc.beta, 2)
_add("j0", sc.j0, 1)
_add("j1", sc.j1, 1)
_add("jv", sc.jv, 2)
_add("y0", sc.y0, 1)
_add("y1", sc.y1, 1)
_add("yv", sc.yv, 2)
_add("i0", sc.i0, 1)
_add("i1", sc.i1, 1)
_add("iv", sc.iv, 2)
_add("i0e", sc.i0e, 1)
_add("i1e", sc.i1e, 1)
_add("k0", sc.k0, 1)
_add("k1", sc.k1, 1)
_add("kv", sc.kv, 2)
_add("k0e", sc.k0e, 1)
_add("k1e", sc.k1e, 1)
_add("sinc", np.sinc, 1)          # normalised: sin(pi x) / (pi x)


def _sin_over_x(x):
    """sin(x)/x with its limit 1 at x = 0 (a removable singularity never evaluates as 0/0)."""
    return np.sinc(np.asarray(x, dtype=np.float64) / np.pi)


_add("sin_over_x", _sin_over_x, 1)   # unnormalised: sin(x) / x, 1 at x = 0
_add("logaddexp", np.logaddexp, 2)

#: Names with a fixed meaning that variables and constants may not take.
RESERVED_NAMES = frozenset({"pi", "e"})
_MAX_INT = int(np.finfo(np.float64).max)
_BUILTIN_CONSTANTS = {"pi": np.float64(math.pi), "e": np.float64(math.e)}


def function_names() -> list[str]:
    """All callable names, sorted."""
    return sorted(FUNCTIONS)


# elementwise helpers the rewritten tree calls; their names start with "_",
# which user expressions may never use, so they cannot be reached directly.
def _truth(a):
    return np.asarray(a) != 0


def _all(*args):
    out = _truth(args[0])
    for a in args[1:]:
        out = np.logical_and(out, _truth(a))
    return out.astype(np.float64)


def _any(*args):
    out = _truth(args[0])
    for a in args[1:]:
        out = np.logical_or(out, _truth(a))
    return out.astype(np.float64)


def _not(a):
    return np.logical_not(_truth(a)).astype(np.float64)


def _f(op):
    return lambda a, b: np.asarray(op(a, b)).astype(np.float64)


_CMP = {
    ast.Lt: ("_lt", _f(np.less)),
    ast.LtE: ("_le", _f(np.less_equal)),
    ast.Gt: ("_gt", _f(np.greater)),
    ast.GtE: ("_ge", _f(np.greater_equal)),
    ast.Eq: ("_eq", _f(np.equal)),
    ast.NotEq: ("_ne", _f(np.not_equal)),
}
_HELPERS = {"_all": _all, "_any": _any, "_not": _not, **{n: fn for n, fn in _CMP.values()}}

_BINOPS = (ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow, ast.Mod)
_BINOP_HINTS = {
    ast.FloorDiv: "floor division '//' is not supported; write floor(a / b)",
    ast.MatMult: "matrix product '@' is not supported",
    ast.BitAnd: "'&' is not supported; write 'and' to combine conditions",
    ast.BitOr: "'|' is not supported; write 'or' to combine conditions",
    ast.BitXor: "'^' is not supported; powers are written '**'",
    ast.LShift: "'<<' is not supported",
    ast.RShift: "'>>' is not supported",
}


# --------------------------------------------------------------------------
# validation
# --------------------------------------------------------------------------

class _Checker:
    """Walks a parsed expression and raises ExpressionError on anything not allowed."""

    def __init__(self, source: str, variables: list[str], constants: dict[str, float]):
        self.source = source
        self.variables = set(variables)
        self.declared_variables = list(variables)
        self.constants = set(constants)
        self._encoded = source.encode("utf-8")

    def _col(self, byte_offset):
        if byte_offset is None:
            return None
        return len(self._encoded[:byte_offset].decode("utf-8", errors="replace"))

    def fail(self, reason, node=None):
        col = end = None
        if node is not None and getattr(node, "col_offset", None) is not None:
            col = self._col(node.col_offset)
            if getattr(node, "end_lineno", None) == getattr(node, "lineno", None):
                end = self._col(node.end_col_offset)
        raise ExpressionError(reason, self.source, col, end)

    def check(self, node):
        meth = getattr(self, "visit_" + type(node).__name__, None)
        if meth is None:
            self.fail(_describe_forbidden(node), node)
        meth(node)

    def visit_Expression(self, node):
        self.check(node.body)

    def visit_Constant(self, node):
        v = node.value
        if isinstance(v, bool):
            self.fail(f"{v} is not a number here; write 1 or 0", node)
        if isinstance(v, complex):
            self.fail("complex numbers are not supported", node)
        if isinstance(v, str):
            self.fail("strings are not allowed in an expression", node)
        if isinstance(v, bytes):
            self.fail("bytes literals are not allowed in an expression", node)
        if not isinstance(v, (int, float)):
            self.fail(f"{type(v).__name__} is not allowed in an expression", node)
        if isinstance(v, int) and abs(v) > _MAX_INT:
            self.fail(f"the number has {len(str(abs(v)))} digits, too large for a double-precision float "
                      "(at most about 1.8e308)", node)

    def visit_Name(self, node):
        name = node.id
        if name.startswith("_"):
            self.fail(f"names starting with '_' are not allowed: {name}", node)
        if name in self.variables or name in self.constants or name in RESERVED_NAMES:
            return
        if name in FUNCTIONS:
            self.fail(f"{name} is a function; call it, as in {name}(x)", node)
        # suggest among the names a bare word can mean, never a look-alike function (issue 10 item 21)
        names = sorted(self.variables | self.constants | RESERVED_NAMES)
        listed = f"; the variables are {_some(self.declared_variables)}"
        if self.constants:
            listed += f", the constants {_some(sorted(self.constants))}"
        self.fail(f"unknown name '{name}'{_suggest(name, names)}{listed}", node)

    def visit_BinOp(self, node):
        if not isinstance(node.op, _BINOPS):
            hint = _BINOP_HINTS.get(type(node.op), f"operator {type(node.op).__name__} is not supported")
            self.fail(hint, node)
        self.check(node.left)
        self.check(node.right)

    def visit_UnaryOp(self, node):
        if isinstance(node.op, ast.Invert):
            self.fail("'~' is not supported; write 'not' to negate a condition", node)
        self.check(node.operand)

    def visit_BoolOp(self, node):
        for v in node.values:
            self.check(v)

    def visit_Compare(self, node):
        for op in node.ops:
            if type(op) not in _CMP:
                word = {ast.In: "in", ast.NotIn: "not in", ast.Is: "is", ast.IsNot: "is not"}.get(type(op), "?")
                self.fail(f"comparison '{word}' is not supported; use < <= > >= == !=", node)
        self.check(node.left)
        for c in node.comparators:
            self.check(c)

    def visit_Call(self, node):
        func = node.func
        if not isinstance(func, ast.Name):
            if isinstance(func, ast.Attribute):
                self.fail(f"attribute access ('.{func.attr}') is not allowed; call functions by their plain name",
                          func)
            self.fail("only named functions can be called", func)
        name = func.id
        if name.startswith("_"):
            self.fail(f"names starting with '_' are not allowed: {name}", func)
        if name not in FUNCTIONS:
            if name in self.variables or name in self.constants or name in RESERVED_NAMES:
                self.fail(f"'{name}' is not a function", func)
            self.fail(f"unknown function '{name}'{_suggest(name, function_names())}", func)
        if node.keywords:
            kw = node.keywords[0]
            self.fail(f"keyword arguments are not allowed in {name}(); pass arguments by position", kw)
        for a in node.args:
            if isinstance(a, ast.Starred):
                self.fail(f"starred arguments are not allowed in {name}()", a)
        _, lo, hi = FUNCTIONS[name]
        n = len(node.args)
        if n < lo or (hi is not None and n > hi):
            if hi is None:
                want = f"at least {lo} arguments"
            elif lo == hi:
                want = f"{lo} argument" + ("s" if lo != 1 else "")
            else:
                want = f"{lo} to {hi} arguments"
            self.fail(f"{name}() takes {want}, got {n}", node)
        for a in node.args:
            self.check(a)


def _some(names: list[str], most: int = 12) -> str:
    """The names joined with commas, at most ``most`` of them (then how many more)."""
    shown = ", ".join(names[:most])
    return shown if len(names) <= most else f"{shown} and {len(names) - most} more"


def _describe_forbidden(node) -> str:
    kind = type(node).__name__
    table = {
        "Attribute": f"attribute access ('.{getattr(node, 'attr', '')}') is not allowed",
        "Subscript": "subscripts ('[...]') are not allowed",
        "Lambda": "lambda is not allowed",
        "ListComp": "comprehensions are not allowed",
        "SetComp": "comprehensions are not allowed",
        "DictComp": "comprehensions are not allowed",
        "GeneratorExp": "comprehensions are not allowed",
        "JoinedStr": "f-strings are not allowed",
        "FormattedValue": "f-strings are not allowed",
        "NamedExpr": "assignment expressions (':=') are not allowed",
        "IfExp": "'a if cond else b' is not supported; write where(cond, a, b)",
        "Tuple": "tuples are not allowed; for several components give a list of expressions",
        "List": "lists are not allowed inside an expression; for several components give a list of expressions",
        "Set": "sets are not allowed",
        "Dict": "dictionaries are not allowed",
        "Starred": "starred expressions are not allowed",
        "Slice": "slices are not allowed",
        "Await": "await is not allowed",
        "Yield": "yield is not allowed",
        "YieldFrom": "yield is not allowed",
    }
    return table.get(kind, f"{kind} is not allowed in an expression")


def _suggest(name: str, candidates) -> str:
    if len(name) > 40:   # difflib is quadratic in the length; no name to suggest is that long
        return ""
    close = difflib.get_close_matches(name, list(candidates), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


# --------------------------------------------------------------------------
# rewriting to elementwise code
# --------------------------------------------------------------------------

class _Rewriter(ast.NodeTransformer):
    """Makes every literal an np.float64 and every logical operation elementwise."""

    def __init__(self):
        self.literals: dict[str, np.float64] = {}

    def _name(self, ident, node):
        return ast.copy_location(ast.Name(id=ident, ctx=ast.Load()), node)

    def _call(self, ident, args, node):
        return ast.copy_location(ast.Call(func=self._name(ident, node), args=args, keywords=[]), node)

    def visit_Constant(self, node):
        # np.float64 literals keep constant sub-expressions in numpy arithmetic:
        # 1/0 gives inf and 10**400 overflows to inf instead of raising, and
        # huge integer powers are never computed exactly.
        ident = f"_c{len(self.literals)}"
        self.literals[ident] = np.float64(node.value)
        return self._name(ident, node)

    def visit_Compare(self, node):
        self.generic_visit(node)
        operands = [node.left, *node.comparators]
        parts = [self._call(_CMP[type(op)][0], [a, b], node)
                 for op, a, b in zip(node.ops, operands[:-1], operands[1:])]
        return parts[0] if len(parts) == 1 else self._call("_all", parts, node)

    def visit_BoolOp(self, node):
        self.generic_visit(node)
        return self._call("_all" if isinstance(node.op, ast.And) else "_any", node.values, node)

    def visit_UnaryOp(self, node):
        self.generic_visit(node)
        if isinstance(node.op, ast.Not):
            return self._call("_not", [node.operand], node)
        return node


# --------------------------------------------------------------------------
# the compiled object
# --------------------------------------------------------------------------

#: Deepest nesting of operators, calls and parentheses an expression may have.
#: Python's own compiler gives up near 1000 levels on some inputs and the
#: checks here walk the tree recursively, so the limit is set well below.
MAX_DEPTH = 200


def _flatten(source: str) -> str:
    """One line: every ``# comment`` removed, the lines joined with a space.

    A comment runs to the end of its line, as in Python, so
    ``"x  # c\\n+ 1"`` is ``x + 1`` (issue 10 item 4).  Expressions hold no
    strings, so a ``#`` always starts a comment.
    """
    return " ".join(line.partition("#")[0] for line in source.splitlines()).strip()


def _depth(tree: ast.AST) -> int:
    """Depth of the tree, measured without recursion."""
    deepest = 0
    stack = [(tree, 1)]
    while stack:
        node, d = stack.pop()
        deepest = max(deepest, d)
        if d > MAX_DEPTH:
            break
        stack.extend((child, d + 1) for child in ast.iter_child_nodes(node))
    return deepest


def normalise_name(name: str) -> str:
    """``name`` as Python's parser reads it: identifiers are NFKC-normalised (PEP 3131).

    So ``"ｘ"`` (full width) is ``"x"``, and ``"ℯ"`` (script e) and ``"ｅ"``
    are ``"e"``.
    """
    return unicodedata.normalize("NFKC", name)


def declared_name(name, what: str = "variable") -> str:
    """Check a declared variable or constant name; return it NFKC-normalised.

    The expression compiler (Python's parser) normalises every identifier
    with NFKC, so a declared name is compared in that form too: a name that
    normalises to a function, to ``pi`` or ``e``, to a keyword or to a name
    starting with ``_`` is refused (issue 10 item 3).

    Parameters
    ----------
    name : str
        The name as written.
    what : str
        ``"variable"`` or ``"constant"`` (for the message).

    Returns
    -------
    str
        The normalised name.

    Raises
    ------
    ExpressionError
        With a one-line reason.
    """
    if not isinstance(name, str):
        raise ExpressionError(f"{what} names must be strings, got {type(name).__name__}")
    shown = name if len(name) <= 40 else name[:37] + "..."
    if not name.isidentifier():
        raise ExpressionError(f"{what} name {shown!r} is not a valid name "
                              "(letters, digits and '_', not starting with a digit)")
    norm = normalise_name(name)
    reads = "" if norm == name else f" (it reads as '{norm}': Python normalises Unicode names, NFKC)"
    if not norm.isidentifier() or keyword.iskeyword(norm):
        raise ExpressionError(f"{what} name {shown!r} is not a valid name{reads}")
    if norm.startswith("_"):
        raise ExpressionError(f"{what} name '{shown}' may not start with '_'{reads}")
    if norm in FUNCTIONS:
        raise ExpressionError(f"{what} name '{shown}' is taken by the function {norm}(){reads}")
    if norm in RESERVED_NAMES:
        raise ExpressionError(f"{what} name '{shown}' is taken by the constant {norm}{reads}")
    return norm


def _check_names(variables, constants) -> tuple[list[str], dict[str, float]]:
    """Normalised variables and constants; refuses invalid names and names that collide."""
    seen: dict[str, str] = {}
    out = []
    for kind, names in (("variable", variables), ("constant", list(constants))):
        for v in names:
            n = declared_name(v, kind)
            if n in seen:
                first = seen[n]
                if first == v:
                    raise ExpressionError(f"name '{v}' is declared twice")
                raise ExpressionError(f"names '{first}' and '{v}' are the same name once Unicode is "
                                      f"normalised (NFKC, as Python reads them): '{n}'")
            seen[n] = v
            out.append(n)
    nv = len(list(variables))
    return out[:nv], {n: float(constants[k]) for n, k in zip(out[nv:], constants)}


def _compile_one(source, variables, constants, index=None):
    if not isinstance(source, str):
        raise ExpressionError(f"expression must be a string, got {type(source).__name__}", index=index)
    text = _flatten(source)
    if not text:
        raise ExpressionError("the expression is empty", text, index=index)
    try:
        tree = ast.parse(text, mode="eval")
    except SyntaxError as exc:
        col = (exc.offset - 1) if exc.offset else None
        end = (exc.end_offset - 1) if getattr(exc, "end_offset", None) and exc.end_offset > (exc.offset or 0) else None
        if col is not None:
            # SyntaxError offsets count characters on the (single) line
            col = min(col, len(text))
        raise ExpressionError(f"syntax error: {exc.msg}", text, col, end, index=index) from None
    except (RecursionError, MemoryError):
        raise ExpressionError(_TOO_DEEP, text, index=index) from None
    except ValueError as exc:
        raise ExpressionError(f"cannot parse the expression: {' '.join(str(exc).split())}", text,
                              index=index) from None
    if _depth(tree) > MAX_DEPTH:
        raise ExpressionError(_TOO_DEEP, text, index=index)
    try:
        _Checker(text, variables, constants).check(tree)
        rw = _Rewriter()
        tree = ast.fix_missing_locations(rw.visit(tree))
        code = compile(tree, "<expression>", "eval")
    except ExpressionError as exc:
        exc.index = index
        raise
    except (RecursionError, MemoryError):   # a caller with a deep stack of its own
        raise ExpressionError(_TOO_DEEP, text, index=index) from None
    return text, code, rw.literals


_TOO_DEEP = (f"the expression is nested too deeply (more than {MAX_DEPTH} levels of operators, "
             "calls or parentheses)")


class CompiledExpression:
    """A checked, compiled integrand expression.

    Call it with an ``(n, d)`` array of points (``d`` = number of variables);
    it returns an ``(n,)`` array for a single expression or ``(n, m)`` for a
    list of ``m`` expressions.
    """

    def __init__(self, source, variables, constants=None):
        constants = {k: float(v) for k, v in (constants or {}).items()}
        variables, constants = _check_names(list(variables), constants)
        self.source = list(source) if isinstance(source, (list, tuple)) else source
        self.variables = variables
        self.constants = constants
        self.vector = isinstance(self.source, list)
        items = self.source if self.vector else [self.source]
        if self.vector and not items:
            raise ExpressionError("the list of expressions is empty")
        compiled = [_compile_one(s, variables, constants, i if self.vector else None)
                    for i, s in enumerate(items)]
        self.components = len(compiled)
        self._codes = [c for _, c, _ in compiled]
        ns = {"__builtins__": {}}
        ns.update({n: fn for n, (fn, _, _) in FUNCTIONS.items()})     # scipy.special ones: placeholders
        ns.update(_HELPERS)
        ns.update(_BUILTIN_CONSTANTS)
        ns.update({k: np.float64(v) for k, v in constants.items()})
        self._literal_sets = [lits for _, _, lits in compiled]
        self._base = ns
        self._namespaces = []
        for lits in self._literal_sets:
            d = dict(ns)
            d.update(lits)
            self._namespaces.append(d)
        self._resolved = False

    def _resolve(self) -> None:
        """Import the scipy.special functions the expressions call, once, before the first evaluation."""
        for ns in self._namespaces:
            for name in set().union(*(c.co_names for c in self._codes)):
                fn = ns.get(name)
                if isinstance(fn, _Special):
                    ns[name] = fn.resolve()
        self._resolved = True

    @property
    def dim(self) -> int:
        return len(self.variables)

    @property
    def fingerprint(self) -> str:
        """A stable sha256 hex digest of source, variables and constants."""
        payload = json.dumps(
            {"source": self.source, "variables": self.variables,
             "constants": {k: float(v).hex() for k, v in sorted(self.constants.items())}},
            sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(payload.encode("utf-8")).hexdigest()

    def __call__(self, X):
        X = np.asarray(X, dtype=np.float64)
        d = len(self.variables)
        if X.ndim == 1 and d == 1:
            X = X[:, None]
        if X.ndim != 2 or X.shape[1] != d:
            raise ValueError(f"expected points of shape (n, {d}), got {X.shape}")
        n = X.shape[0]
        if not self._resolved:
            self._resolve()
        cols = np.ascontiguousarray(X.T)
        out = []
        with np.errstate(all="ignore"):
            for code, base in zip(self._codes, self._namespaces):
                ns = dict(base)
                ns.update(zip(self.variables, cols))
                r = np.asarray(eval(code, ns), dtype=np.float64)  # noqa: S307 - checked AST, no builtins
                if r.shape != (n,):
                    r = np.broadcast_to(r, (n,)).copy()
                out.append(r)
        if not self.vector:
            return out[0]
        return np.stack(out, axis=1)

    def __reduce__(self):
        # travels as its source; a process compiles each distinct expression once (see _rebuild)
        return (_rebuild, (self.source, self.variables, self.constants))

    def __repr__(self):
        return f"CompiledExpression({self.source!r}, variables={self.variables!r})"


_REBUILT: dict[str, CompiledExpression] = {}


def _rebuild(source, variables, constants) -> CompiledExpression:
    """Unpickle an expression: compiled once per process and kept (a few dozen at most).

    A compiled expression is never modified after it is built, so sharing one
    between tasks (and threads) is safe.
    """
    key = json.dumps([source, list(variables), {k: float(v).hex() for k, v in constants.items()}], sort_keys=True)
    hit = _REBUILT.get(key)
    if hit is None:
        hit = CompiledExpression(source, variables, constants)
        if len(_REBUILT) >= 64:
            _REBUILT.clear()
        _REBUILT[key] = hit
    return hit


def compile_expression(source: str | list[str], variables: list[str],
                       constants: dict[str, float] | None = None) -> CompiledExpression:
    """Check and compile ``source`` (one expression or a list of them).

    Raises
    ------
    ExpressionError
        With a one-line reason, the expression and a caret line under the
        offending part.
    """
    return CompiledExpression(source, variables, constants)
