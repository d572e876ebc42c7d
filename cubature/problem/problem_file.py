"""Problem files: a small TOML format describing one integral.

A problem names its variables and domain, the integrand (an expression, or a
vectorised Python function when the user trusts it), the accuracy goal, an
optional choice of method and an optional reference value::

    title = "Two overlapping Gaussian clouds"
    [domain]
    variables = ["x", "y", "z"]
    box = [[-inf, inf], [-inf, inf], [-inf, inf]]
    [integrand]
    expr = "exp(-a*(x**2 + y**2 + z**2))"
    constants = { a = 1.5 }
    [goal]
    rel_tol = 1e-8
    [reference]
    value = 2.5734...
    source = "closed form (pi/a)**1.5"

Everything is checked strictly; every problem is reported as a
:class:`ProblemError` whose text is one line of the form
``<file>:<line>: [table] key: message`` (for expression errors, the expression
and a caret line follow).
"""

from __future__ import annotations

import difflib
import hashlib
import importlib
import importlib.resources
import importlib.util
import json
import math
import reprlib
import sys
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from cubage.engine.domains import Box, DomainError, Simplex
from cubage.engine.rules import default_rule, rule_limit_error
from cubage.problem.expr import ExpressionError, compile_expression, declared_name
from cubage.problem.scan_table import ScanGrid, ScanTableError, parse_scan_table

__all__ = [
    "ProblemError", "Goal", "Method", "Reference", "Problem",
    "parse_problem", "load_problem", "integrand_from_spec",
    "bundled_problem_dir", "problem_dirs", "find_problem", "list_problems",
    "RULES", "BACKENDS",
]

RULES = ("genz-malik", "gauss-kronrod", "grundmann-moller")
BACKENDS = ("auto", "serial", "processes", "threads", "dask")

_TOP_KEYS = ("title", "notes", "domain", "integrand", "goal", "method", "reference", "scan")
_TABLE_KEYS = {
    "domain": ("variables", "box", "simplex", "scale"),
    "integrand": ("expr", "constants", "python"),
    "goal": ("rel_tol", "abs_tol", "budget", "time_limit"),
    "method": ("rule", "degree", "workers", "backend", "cluster"),
    "reference": ("value", "source"),
}
# keys of earlier releases, refused with the name that replaced them
_RENAMED_KEYS = {("goal", "max_evals"): "budget"}


class ProblemError(Exception):
    """A problem file that cannot be used.

    ``str(err)`` is one line, ``<file>:<line>: [table] key: message`` (parts
    that are unknown are left out); for an expression error the expression
    and a caret line follow on further lines.
    """

    def __init__(self, message: str, *, path: str | None = None, line: int | None = None,
                 table: str | None = None, key: str | None = None, detail: list[str] | None = None):
        self.message = " ".join(str(message).split("\n"))
        self.path = path
        self.line = line
        self.table = table
        self.key = key
        self.detail = list(detail or [])
        super().__init__(self._render())

    @property
    def headline(self) -> str:
        """The first (one-line) part of the message."""
        head = ""
        if self.path is not None:
            head = f"{self.path}:{self.line}: " if self.line else f"{self.path}: "
        where = ""
        if self.table:
            where += f"[{self.table}] "
        if self.key:
            where += f"{self.key}: "
        return head + where + self.message

    def _render(self) -> str:
        return "\n".join([self.headline, *self.detail])


@dataclass
class Goal:
    rel_tol: float = 1e-6
    abs_tol: float = 0.0
    budget: int | None = None
    time_limit: float | None = None


@dataclass
class Method:
    rule: str | None = None
    degree: int | None = None
    workers: int | str = 1
    backend: str = "auto"
    cluster: str | None = None


@dataclass
class Reference:
    value: float | list[float]
    source: str


@dataclass
class Problem:
    path: Path | None
    text: str
    title: str
    notes: str
    variables: list[str]
    domain: Box | Simplex
    integrand: Callable
    integrand_spec: dict
    components: int
    goal: Goal = field(default_factory=Goal)
    method: Method = field(default_factory=Method)
    reference: Reference | None = None
    scan: ScanGrid | None = None       # the [scan] grid (cubage.problem.scan_table), if any

    @property
    def dim(self) -> int:
        return len(self.variables)

    def fingerprint(self) -> str:
        """sha256 of the domain and the integrand (not goal or method); stable across runs."""
        spec = dict(self.integrand_spec)
        if spec.get("kind") == "python":
            spec = _python_fingerprint_spec(spec)
        else:
            spec = {"kind": "expr", "source": spec["source"], "variables": list(spec["variables"]),
                    "constants": {k: float(v).hex() for k, v in sorted(spec.get("constants", {}).items())}}
        dom = self.domain.to_json()
        payload = json.dumps({"domain": dom, "integrand": spec}, sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(payload.encode("utf-8")).hexdigest()

    def describe(self) -> list[tuple[str, str]]:
        """Rows (label, text) summarising the problem, for ``cubage check`` and the UI."""
        rows: list[tuple[str, str]] = []
        rows.append(("dimension", f"{self.dim} ({', '.join(self.variables)})"))
        rows.append(("domain", self.domain.describe()))
        spec = self.integrand_spec
        if spec["kind"] == "expr":
            src = spec["source"]
            text = " ; ".join(src) if isinstance(src, list) else src
            if spec.get("constants"):
                text += "   with " + ", ".join(f"{k} = {v:g}" for k, v in spec["constants"].items())
        else:
            text = f"python {spec['target']}"
        if self.components > 1:
            text += f"   [{self.components} components]"
        rows.append(("integrand", text))
        g = self.goal
        goal = f"rel_tol {g.rel_tol:g}, abs_tol {g.abs_tol:g}"
        goal += f", budget {g.budget:,}" if g.budget is not None else ", budget unlimited"
        if g.time_limit is not None:
            goal += f", time_limit {g.time_limit:g} s"
        rows.append(("goal", goal))
        m = self.method
        meth = f"rule {m.rule or 'default'}"
        if m.degree is not None:
            meth += f" (degree {m.degree})"
        meth += f", workers {m.workers}, backend {m.backend}"
        if m.cluster:
            meth += f", cluster {m.cluster}"
        rows.append(("method", meth))
        if self.reference is not None:
            v = self.reference.value
            vt = "[" + ", ".join(f"{x:.15g}" for x in v) + "]" if isinstance(v, list) else f"{v:.15g}"
            rows.append(("reference", f"{vt}  ({self.reference.source})"))
        else:
            rows.append(("reference", "none"))
        if self.scan is not None:
            rows.append(("scan", self.scan.describe()))
        return rows


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------

def _tname(v) -> str:
    if isinstance(v, bool):
        return "a boolean"
    if isinstance(v, int):
        return "an integer"
    if isinstance(v, float):
        return "a number"
    if isinstance(v, str):
        return "a string"
    if isinstance(v, list):
        return "a list"
    if isinstance(v, dict):
        return "a table"
    return f"a {type(v).__name__}"


_REPR = reprlib.Repr()
_REPR.maxstring = _REPR.maxother = 40
_REPR.maxlist = 6
_REPR.maxlevel = 3


def _short(v) -> str:
    """``repr(v)`` cut to a readable length (bounded cost, whatever ``v`` holds)."""
    return _REPR.repr(v)


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _suggest(name: str, options) -> str:
    if len(name) > 40:   # difflib is quadratic in the length; no valid name is that long
        return ""
    close = difflib.get_close_matches(name, list(options), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


_BARE_KEY_CHARS = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")


def _skip_ws(s: str, i: int) -> int:
    n = len(s)
    while i < n and s[i] in " \t":
        i += 1
    return i


def _read_key(s: str, i: int) -> tuple[list[str], int] | None:
    """A (dotted) TOML key starting at ``s[i]``: its parts and the index after it, or None.

    One pass over the characters (no regular expression), so it is linear in
    the line length whatever the line holds.
    """
    n = len(s)
    parts: list[str] = []
    while True:
        i = _skip_ws(s, i)
        if i >= n:
            return None
        q = s[i]
        if q in "\"'":
            j = i + 1
            while j < n and s[j] != q:
                j += 2 if (q == '"' and s[j] == "\\") else 1
            if j >= n:
                return None
            parts.append(s[i + 1:j])
            i = j + 1
        else:
            j = i
            while j < n and s[j] in _BARE_KEY_CHARS:
                j += 1
            if j == i:
                return None
            parts.append(s[i:j])
            i = j
        i = _skip_ws(s, i)
        if i < n and s[i] == ".":
            i += 1
            continue
        return parts, i


class _ValueScan:
    """Tracks, across lines, whether we are inside a multi-line array/table or string."""

    def __init__(self):
        self.depth = 0          # open [ and { of values
        self.ml: str | None = None  # open multi-line string delimiter

    @property
    def inside(self) -> bool:
        return self.depth > 0 or self.ml is not None

    def scan(self, s: str, i: int = 0) -> None:
        n = len(s)
        while i < n:
            if self.ml is not None:
                if self.ml == '"""' and s[i] == "\\":
                    i += 2
                    continue
                if s.startswith(self.ml, i):
                    i += 3
                    self.ml = None
                    continue
                i += 1
                continue
            c = s[i]
            if c == "#":
                return
            if c in "\"'":
                if s.startswith(c * 3, i):
                    self.ml = c * 3
                    i += 3
                    continue
                j = i + 1
                while j < n and s[j] != c:
                    j += 2 if (c == '"' and s[j] == "\\") else 1
                i = j + 1
                continue
            if c in "[{":
                self.depth += 1
            elif c in "]}":
                self.depth = max(0, self.depth - 1)
            i += 1


def _header_key(s: str) -> list[str] | None:
    """The key of a ``[table]`` / ``[[array]]`` header line, or None when the line is not one."""
    i = _skip_ws(s, 0)
    if i >= len(s) or s[i] != "[":
        return None
    double = s.startswith("[[", i)
    got = _read_key(s, i + (2 if double else 1))
    if got is None:
        return None
    parts, j = got
    close = "]]" if double else "]"
    if not s.startswith(close, j):
        return None
    j = _skip_ws(s, j + len(close))
    if j < len(s) and s[j] != "#":
        return None
    return parts


def _locate(text: str, table: str | None, key: str | None = None) -> int | None:
    """1-based line of ``key =`` in ``[table]`` (or of the ``[table]`` header), if found.

    tomllib reports no positions for valid documents, so this scans the text
    once, character by character (linear in the size of the file, issue 10
    item 7); it understands ``[table]`` headers, (dotted) ``key = ...`` lines
    and values that span lines (arrays, inline tables, multi-line strings).
    """
    want = ([table] if table else []) + ([key] if key else [])
    current: list[str] = []
    header_line = None
    values = _ValueScan()
    for i, line in enumerate(text.splitlines(), 1):
        if values.inside:
            values.scan(line)
            continue
        head = _header_key(line)
        if head is not None:
            current = head
            if table and current == [table] and header_line is None:
                header_line = i
                if key is None:
                    return i
            continue
        got = _read_key(line, 0)
        if got is None or got[1] >= len(line) or line[got[1]] != "=":
            continue
        full = current + got[0]
        if key is not None and full == want:
            return i
        if key is None and table and full[:1] == [table] and header_line is None:
            header_line = i
        values.scan(line, got[1] + 1)
    return header_line


class _Ctx:
    """Carries the file name and text for building errors."""

    def __init__(self, text: str, path: str | None):
        self.text = text
        self.path = path if path is not None else "<problem>"

    def error(self, table, key, message, detail=None, line=None):
        if line is None:
            line = _locate(self.text, table, key) if (table or key) else None
            if line is None and table and key:
                line = _locate(self.text, table, None)
        return ProblemError(message, path=self.path, line=line, table=table, key=key, detail=detail)


# --------------------------------------------------------------------------
# parsing
# --------------------------------------------------------------------------

def _toml_position(msg: str, text: str) -> tuple[str, int | None]:
    """Split tomllib's "... (at line L, column C)" suffix off its message (no regular expression)."""
    k = msg.rfind(" (at line ")
    if k >= 0 and msg.endswith(")"):
        line_s, _, col_s = msg[k + len(" (at line "):-1].partition(", column ")
        if line_s.isdigit() and col_s.isdigit():
            return msg[:k] + f" (column {col_s})", int(line_s)
    if msg.endswith(" (at end of document)"):
        return msg[:-len(" (at end of document)")] + " (at end of file)", max(1, len(text.splitlines()))
    return msg, None


#: How deeply tables and arrays may nest in a problem file (a problem needs 3).
MAX_NESTING = 8
#: Largest integer a problem file may hold: beyond it, no double can represent it.
_MAX_INT = int(np.finfo(np.float64).max)


def _check_values(ctx: _Ctx, data: dict) -> None:
    """Refuse nesting deeper than :data:`MAX_NESTING` and integers too large for a double.

    An iterative walk (no recursion), so a hostile file cannot exhaust the
    stack here (issue 10 items 11 and 15i).
    """
    stack = [(v, (k,), 1) for k, v in data.items()]
    while stack:
        v, where, depth = stack.pop()
        table, key = (where[0], where[1]) if len(where) > 1 else (None, where[0])
        if depth > MAX_NESTING:
            raise ctx.error(table, key, f"values nest more than {MAX_NESTING} levels deep; "
                                        "a problem file needs at most 3")
        if isinstance(v, dict):
            stack.extend((x, where + (k,), depth + 1) for k, x in v.items())
        elif isinstance(v, list):
            stack.extend((x, where, depth + 1) for x in v)
        elif isinstance(v, int) and not isinstance(v, bool) and abs(v) > _MAX_INT:
            raise ctx.error(table, key, f"a whole number of {len(str(abs(v)))} digits is too large for a "
                                        "double-precision float (at most about 1.8e308)")


def parse_problem(text: str, *, path: Path | str | None = None, allow_python: bool = False) -> Problem:
    """Parse and validate the text of a problem file.

    Parameters
    ----------
    text : str
        The TOML text.
    path : path, optional
        Where it came from (used in messages and to resolve ``file.py:func``).
    allow_python : bool
        Allow ``[integrand] python = ...`` (runs the user's own code).

    Raises
    ------
    ProblemError
    """
    pstr = str(path) if path is not None else None
    ctx = _Ctx(text, pstr)
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg, line = _toml_position(str(exc), text)
        raise ProblemError(f"TOML syntax error: {msg}", path=ctx.path, line=line) from None
    except RecursionError:
        raise ProblemError(f"TOML: arrays or tables nest too deeply (a problem file needs at most "
                           f"{MAX_NESTING} levels)", path=ctx.path) from None
    except ValueError as exc:   # e.g. an integer beyond Python's digit limit for str -> int
        raise ProblemError(f"TOML: {' '.join(str(exc).split())}", path=ctx.path) from None
    _check_values(ctx, data)

    for k in data:
        if k not in _TOP_KEYS:
            kind = "table" if isinstance(data[k], dict) else "key"
            raise ctx.error(None, k, f"unknown top-level {kind}{_suggest(k, _TOP_KEYS)} "
                                     f"(allowed: {', '.join(_TOP_KEYS)})",
                            line=_locate(text, k) or _locate(text, None, k))
    title = _opt_str(ctx, data, None, "title", "")
    notes = _opt_str(ctx, data, None, "notes", "")

    tables = {}
    for t in _TABLE_KEYS:
        if t in data:
            if not isinstance(data[t], dict):
                raise ctx.error(None, t, f"must be a table ([{t}]), got {_tname(data[t])}",
                                line=_locate(text, None, t))
            tables[t] = data[t]
            for k in data[t]:
                if (t, k) in _RENAMED_KEYS:
                    raise ctx.error(t, k, f"this key is now called '{_RENAMED_KEYS[t, k]}'; rename it")
                if k not in _TABLE_KEYS[t]:
                    raise ctx.error(t, k, f"unknown key{_suggest(k, _TABLE_KEYS[t])} "
                                          f"(allowed: {', '.join(_TABLE_KEYS[t])})")
    for t in ("domain", "integrand"):
        if t not in tables:
            raise ctx.error(t, None, f"missing table; every problem needs a [{t}] section")

    variables, domain = _parse_domain(ctx, tables["domain"])
    base_dir = str(Path(pstr).resolve().parent) if pstr is not None else str(Path.cwd())
    integrand, spec, components = _parse_integrand(ctx, tables["integrand"], variables, domain,
                                                   base_dir, allow_python)
    goal = _parse_goal(ctx, tables.get("goal", {}))
    method = _parse_method(ctx, tables.get("method", {}), domain)
    reference = _parse_reference(ctx, tables["reference"], components) if "reference" in tables else None
    scan = _parse_scan(ctx, data["scan"], spec) if "scan" in data else None
    return Problem(path=Path(pstr) if pstr is not None else None, text=text, title=title, notes=notes,
                   variables=variables, domain=domain, integrand=integrand, integrand_spec=spec,
                   components=components, goal=goal, method=method, reference=reference, scan=scan)


def _parse_scan(ctx, tbl, spec) -> ScanGrid:
    """The [scan] table (format and checks in cubage.problem.scan_table)."""
    if spec.get("kind") != "expr":
        raise ctx.error("scan", None, "a scan varies [integrand] constants, which only an expr integrand has")
    try:
        return parse_scan_table(tbl, spec.get("constants") or {})
    except ScanTableError as exc:
        raise ctx.error("scan", exc.key, str(exc)) from None


def _opt_str(ctx, tbl, table, key, default):
    if key not in tbl:
        return default
    v = tbl[key]
    if not isinstance(v, str):
        raise ctx.error(table, key, f"must be a string, got {_tname(v)}")
    return v


def _check_identifier(ctx, table, key, name, what) -> str:
    """The declared ``name`` NFKC-normalised as Python reads it (issue 10 item 3), or a ProblemError."""
    try:
        return declared_name(name, what)
    except ExpressionError as exc:
        if not isinstance(name, str):
            raise ctx.error(table, key, f"{what} names must be strings, got {_tname(name)} {_short(name)}") from None
        raise ctx.error(table, key, exc.reason) from None


def _same_name(first: str, second: str, norm: str) -> str:
    if first == second:
        return f"'{first}' is listed twice"
    return (f"'{first}' and '{second}' are the same name once Unicode is normalised "
            f"(NFKC, as Python reads them): '{norm}'")


def _parse_domain(ctx, tbl):
    if "variables" not in tbl:
        raise ctx.error("domain", "variables", 'missing; name the variables, e.g. variables = ["x", "y"]')
    vs = tbl["variables"]
    if not isinstance(vs, list) or not vs:
        got = "an empty list" if isinstance(vs, list) else _tname(vs)
        raise ctx.error("domain", "variables", f"must be a non-empty list of names, got {got}")
    seen: dict[str, str] = {}
    for v in vs:
        n = _check_identifier(ctx, "domain", "variables", v, "variable")
        if n in seen:
            raise ctx.error("domain", "variables", "variable " + _same_name(seen[n], v, n))
        seen[n] = v
    vs = list(seen)
    d = len(vs)
    has_box, has_simplex = "box" in tbl, "simplex" in tbl
    if has_box and has_simplex:
        raise ctx.error("domain", "simplex", "give either box or simplex, not both")
    if not has_box and not has_simplex:
        raise ctx.error("domain", None, "needs a box = [[low, high], ...] or a simplex = [[...], ...] (vertices)")
    if has_box:
        rows = tbl["box"]
        if not isinstance(rows, list):
            raise ctx.error("domain", "box", f"must be a list of [low, high] rows, got {_tname(rows)}")
        if len(rows) != d:
            raise ctx.error("domain", "box", f"has {len(rows)} row(s) but there are {d} variable(s) "
                                             f"({', '.join(vs)}); give one [low, high] per variable")
        lo, hi = [], []
        for i, row in enumerate(rows):
            label = f"row {i + 1} (variable {vs[i]})"
            if not isinstance(row, list) or len(row) != 2:
                raise ctx.error("domain", "box", f"{label} must be [low, high], got {_short(row)}")
            for b in row:
                if not _is_number(b):
                    raise ctx.error("domain", "box", f"{label}: bounds must be numbers, got {_tname(b)} {_short(b)}")
                if isinstance(b, float) and math.isnan(b):
                    raise ctx.error("domain", "box", f"{label}: bound is NaN")
            a, b = float(row[0]), float(row[1])
            if not a < b:
                raise ctx.error("domain", "box", f"{label}: low {a:g} is not below high {b:g}")
            lo.append(a)
            hi.append(b)
        scale = None
        if "scale" in tbl:
            sc = tbl["scale"]
            if not isinstance(sc, list) or len(sc) != d:
                raise ctx.error("domain", "scale", f"must be a list of {d} positive numbers (one per variable), "
                                                   f"got {_short(sc)}")
            for i, c in enumerate(sc):
                if not _is_number(c) or not (math.isfinite(float(c)) and float(c) > 0):
                    raise ctx.error("domain", "scale", f"entry {i + 1} (variable {vs[i]}) must be a positive "
                                                       f"finite number, got {_short(c)}")
            scale = [float(c) for c in sc]
        try:
            dom = Box(lo, hi, scale=scale)
        except DomainError as exc:
            raise ctx.error("domain", "box", str(exc)) from None
        return list(vs), dom
    if "scale" in tbl:
        raise ctx.error("domain", "scale", "applies to the infinite axes of a box; a simplex has none")
    verts = tbl["simplex"]
    if not isinstance(verts, list):
        raise ctx.error("domain", "simplex", f"must be a list of vertices, got {_tname(verts)}")
    if len(verts) != d + 1:
        raise ctx.error("domain", "simplex", f"has {len(verts)} vertices; {d} variable(s) need {d + 1}")
    for i, row in enumerate(verts):
        if not isinstance(row, list) or len(row) != d:
            raise ctx.error("domain", "simplex", f"vertex {i + 1} must be a list of {d} coordinates, got {_short(row)}")
        for c in row:
            if not _is_number(c):
                raise ctx.error("domain", "simplex", f"vertex {i + 1}: coordinates must be numbers, "
                                                     f"got {_tname(c)} {_short(c)}")
            if not math.isfinite(float(c)):
                raise ctx.error("domain", "simplex", f"vertex {i + 1}: coordinates must be finite, got {_short(c)}")
    try:
        dom = Simplex([[float(c) for c in row] for row in verts])
    except DomainError as exc:
        raise ctx.error("domain", "simplex", str(exc)) from None
    return list(vs), dom


def _parse_integrand(ctx, tbl, variables, domain, base_dir, allow_python):
    has_expr, has_py = "expr" in tbl, "python" in tbl
    if has_expr and has_py:
        raise ctx.error("integrand", "python", "give either expr or python, not both")
    if not has_expr and not has_py:
        raise ctx.error("integrand", None, 'needs expr = "..." (or python = "module:function")')
    constants: dict[str, float] = {}
    if "constants" in tbl:
        cs = tbl["constants"]
        if has_py:
            raise ctx.error("integrand", "constants", "constants only apply to expr; "
                                                      "a python integrand sets its own")
        if not isinstance(cs, dict):
            raise ctx.error("integrand", "constants", f"must be a table like {{ k = 2.5 }}, got {_tname(cs)}")
        written: dict[str, str] = {}
        for k0, v in cs.items():
            k = _check_identifier(ctx, "integrand", "constants", k0, "constant")
            if k in variables:
                also = "" if k == k0 else f" once Unicode is normalised (NFKC, as Python reads it): '{k}'"
                raise ctx.error("integrand", "constants", f"constant '{k0}' has the name of a variable{also}")
            if k in written:
                raise ctx.error("integrand", "constants", "constant " + _same_name(written[k], k0, k))
            written[k] = k0
            if not _is_number(v):
                raise ctx.error("integrand", "constants", f"constant '{k}' must be a number, got {_tname(v)}")
            if not math.isfinite(float(v)):
                raise ctx.error("integrand", "constants", f"constant '{k}' must be finite, got {v}")
            constants[k] = float(v)
    if has_expr:
        src = tbl["expr"]
        if isinstance(src, list):
            if not src:
                raise ctx.error("integrand", "expr", "the list of expressions is empty")
            for i, s in enumerate(src):
                if not isinstance(s, str):
                    raise ctx.error("integrand", "expr", f"item {i + 1} must be a string, got {_tname(s)}")
        elif not isinstance(src, str):
            raise ctx.error("integrand", "expr", f"must be a string or a list of strings, got {_tname(src)}")
        if isinstance(src, str) and not src.strip():
            raise ctx.error("integrand", "expr", "the expression is empty")
        if isinstance(src, list):
            for i, s in enumerate(src):
                if not s.strip():
                    raise ctx.error("integrand", "expr", f"item {i + 1} is an empty expression")
        try:
            f = compile_expression(src, variables, constants)
        except ExpressionError as exc:
            where = f" (item {exc.index + 1})" if exc.index is not None else ""
            raise ctx.error("integrand", "expr", exc.reason + where, detail=exc.caret_lines()) from None
        spec = {"kind": "expr", "source": src, "variables": list(variables), "constants": constants}
        return f, spec, f.components
    target = tbl["python"]
    if not isinstance(target, str):
        raise ctx.error("integrand", "python", f'must be a string "module:function" or "file.py:function", '
                                               f"got {_tname(target)}")
    if ":" not in target or not target.rsplit(":", 1)[1].strip() or not target.rsplit(":", 1)[0].strip():
        raise ctx.error("integrand", "python",
                        f'{_short(target)} must look like "module:function" or "file.py:function"')
    if not allow_python:
        raise ctx.error("integrand", "python", "this problem runs your own Python code; rerun with --allow-python "
                                               f"if you trust {ctx.path}")
    spec = {"kind": "python", "target": target, "base_dir": base_dir}
    try:
        f = _import_target(target, base_dir)
    except ProblemError as exc:
        raise ctx.error("integrand", "python", exc.message) from None
    components = _probe_components(ctx, f, domain, target)
    return f, spec, components


def _import_target(target: str, base_dir: str):
    modname, _, funcname = target.rpartition(":")
    modname, funcname = modname.strip(), funcname.strip()
    try:
        if modname.endswith(".py"):
            file = Path(modname)
            if not file.is_absolute():
                file = Path(base_dir) / file
            if not file.is_file():
                raise ProblemError(f"cannot find the file {file}")
            digest = hashlib.sha256(str(file.resolve()).encode()).hexdigest()[:16]
            name = f"cubage_user_{file.stem}_{digest}"
            mod = sys.modules.get(name)
            if mod is None:
                spec = importlib.util.spec_from_file_location(name, file)
                if spec is None or spec.loader is None:
                    raise ProblemError(f"cannot load {file} as Python")
                mod = importlib.util.module_from_spec(spec)
                sys.modules[name] = mod
                try:
                    spec.loader.exec_module(mod)
                except BaseException:
                    sys.modules.pop(name, None)
                    raise
        else:
            added = base_dir not in sys.path
            if added:
                sys.path.insert(0, base_dir)
            try:
                mod = importlib.import_module(modname)
            finally:
                if added:
                    try:
                        sys.path.remove(base_dir)
                    except ValueError:
                        pass
    except ProblemError:
        raise
    except (Exception, SystemExit) as exc:  # user code may raise anything while importing
        msg = " ".join(str(exc).split())
        raise ProblemError(f"cannot import {modname}: {type(exc).__name__}: {msg}") from None
    if not funcname.isidentifier() or not hasattr(mod, funcname):
        raise ProblemError(f"{modname} has no function '{funcname}'")
    fn = getattr(mod, funcname)
    if not callable(fn):
        raise ProblemError(f"{modname}:{funcname} is not callable")
    return fn


def _sample_points(domain) -> np.ndarray:
    if isinstance(domain, Simplex):
        v = domain.vertices
        c = v.mean(axis=0)
        return np.stack([c, 0.5 * (c + v[0])])
    pts = []
    for a, b in zip(domain.lower, domain.upper):
        if np.isfinite(a) and np.isfinite(b):
            m = 0.5 * (a + b)
            pts.append((m, a + 0.3 * (b - a)))
        elif np.isfinite(a):
            pts.append((a + 1.0, a + 0.5))
        elif np.isfinite(b):
            pts.append((b - 1.0, b - 0.5))
        else:
            pts.append((0.1, -0.3))
    return np.array(pts, dtype=float).T.copy()


def _probe_components(ctx, f, domain, target) -> int:
    X = _sample_points(domain)
    try:
        with np.errstate(all="ignore"):
            y = np.asarray(f(X), dtype=float)
    except Exception as exc:  # noqa: BLE001 - user code
        msg = " ".join(str(exc).split())
        raise ctx.error("integrand", "python", f"calling {target} on two test points of shape {X.shape} failed: "
                                               f"{type(exc).__name__}: {msg}") from None
    if y.shape == (X.shape[0],):
        return 1
    if y.ndim == 2 and y.shape[0] == X.shape[0] and y.shape[1] >= 1:
        return int(y.shape[1])
    raise ctx.error("integrand", "python", f"{target} returned shape {y.shape} for {X.shape[0]} points; "
                                           f"it must return (n,) or (n, m)")


def _python_fingerprint_spec(spec: dict) -> dict:
    target = spec["target"]
    modname = target.rpartition(":")[0].strip()
    out = {"kind": "python", "target": target}
    if modname.endswith(".py"):
        file = Path(modname)
        if not file.is_absolute():
            file = Path(spec.get("base_dir", ".")) / file
        try:
            out["file_sha256"] = hashlib.sha256(file.read_bytes()).hexdigest()
        except OSError:
            out["base_dir"] = spec.get("base_dir")
    return out


def _num(ctx, table, key, v, *, positive=False, nonneg=False):
    if not _is_number(v):
        raise ctx.error(table, key, f"must be a number, got {_tname(v)} {_short(v)}")
    x = float(v)
    if math.isnan(x):
        raise ctx.error(table, key, "must be a number, got NaN")
    if nonneg and not x >= 0:
        raise ctx.error(table, key, f"must not be negative, got {v}")
    if positive and not x > 0:
        raise ctx.error(table, key, f"must be positive, got {v}")
    return x


def _parse_goal(ctx, tbl) -> Goal:
    g = Goal()
    if "rel_tol" in tbl:
        g.rel_tol = _num(ctx, "goal", "rel_tol", tbl["rel_tol"], nonneg=True)
        if math.isinf(g.rel_tol):
            raise ctx.error("goal", "rel_tol", "must be finite")
    if "abs_tol" in tbl:
        g.abs_tol = _num(ctx, "goal", "abs_tol", tbl["abs_tol"], nonneg=True)
        if math.isinf(g.abs_tol):
            raise ctx.error("goal", "abs_tol", "must be finite")
    if g.rel_tol == 0 and g.abs_tol == 0:
        key = "abs_tol" if "abs_tol" in tbl else "rel_tol"
        raise ctx.error("goal", key, "rel_tol and abs_tol are both zero; the goal could never be met")
    if "budget" in tbl:
        v = tbl["budget"]
        if not isinstance(v, int) or isinstance(v, bool):
            raise ctx.error("goal", "budget", f"must be a whole number like 10_000_000, got {_tname(v)} {_short(v)}")
        if v <= 0:
            raise ctx.error("goal", "budget", f"must be positive, got {v}")
        g.budget = v
    if "time_limit" in tbl:
        g.time_limit = _num(ctx, "goal", "time_limit", tbl["time_limit"], positive=True)
    return g


def _choice(ctx, key: str, v, choices) -> str:
    """A [method] string that must be one of ``choices`` (one-line error with a suggestion otherwise)."""
    if not isinstance(v, str):
        raise ctx.error("method", key, f"must be a string, got {_tname(v)}")
    if v not in choices:
        raise ctx.error("method", key, f"unknown {key} '{v}'{_suggest(v, choices)} (valid: {', '.join(choices)})")
    return v


def _parse_method(ctx, tbl, domain) -> Method:
    m = Method()
    d = domain.dim
    if "rule" in tbl:
        r = _choice(ctx, "rule", tbl["rule"], RULES)
        if isinstance(domain, Simplex) and r != "grundmann-moller":
            raise ctx.error("method", "rule", f"{r} is a rule for boxes; for a simplex use grundmann-moller")
        if isinstance(domain, Box) and r == "grundmann-moller":
            raise ctx.error("method", "rule", "grundmann-moller is a rule for simplices; for a box use "
                                              "genz-malik or gauss-kronrod")
        m.rule = r
    if "degree" in tbl:
        v = tbl["degree"]
        if not isinstance(v, int) or isinstance(v, bool):
            raise ctx.error("method", "degree", f"must be an odd whole number >= 3, got {_tname(v)} {_short(v)}")
        if v < 3 or v % 2 == 0:
            raise ctx.error("method", "degree", f"must be odd and at least 3, got {v}")
        m.degree = v
    # every rule family has a supported range of dimensions (and degrees): say which and why
    rule = m.rule or default_rule(domain.kind, d)
    problem = rule_limit_error(rule, d, m.degree)
    if problem:
        if m.degree is not None and rule_limit_error(rule, d) is None:
            raise ctx.error("method", "degree", problem)
        if m.rule is not None:
            raise ctx.error("method", "rule", problem)
        raise ctx.error("domain", "variables", f"{d} variables: {problem}")
    if "workers" in tbl:
        v = tbl["workers"]
        if isinstance(v, str):
            if v != "auto":
                raise ctx.error("method", "workers", f'must be a whole number >= 1 or "auto", got {_short(v)}')
        elif not isinstance(v, int) or isinstance(v, bool):
            raise ctx.error("method", "workers", f'must be a whole number >= 1 or "auto", got {_tname(v)} {_short(v)}')
        elif v < 1:
            raise ctx.error("method", "workers", f"must be at least 1, got {v}")
        m.workers = v
    if "backend" in tbl:
        m.backend = _choice(ctx, "backend", tbl["backend"], BACKENDS)
    if "cluster" in tbl:
        v = tbl["cluster"]
        if not isinstance(v, str) or not v.strip():
            raise ctx.error("method", "cluster", "must be a scheduler address like \"tcp://host:8786\" "
                                                 "or the path of a scheduler file")
        if m.backend not in ("auto", "dask"):
            raise ctx.error("method", "cluster", f"a cluster needs backend = \"dask\" (or \"auto\"), "
                                                 f"not \"{m.backend}\"")
        m.cluster = v
    return m


def _parse_reference(ctx, tbl, components) -> Reference:
    if "value" not in tbl:
        raise ctx.error("reference", "value", "missing; give the known value of the integral")
    if "source" not in tbl:
        raise ctx.error("reference", "source", "missing; say where the reference value comes from")
    src = tbl["source"]
    if not isinstance(src, str) or not src.strip():
        raise ctx.error("reference", "source", "must be a non-empty string naming where the value comes from")
    v = tbl["value"]
    if isinstance(v, list):
        if components == 1:
            raise ctx.error("reference", "value", f"is a list of {len(v)} but the integrand has one component")
        if len(v) != components:
            raise ctx.error("reference", "value", f"has {len(v)} entries but the integrand has {components} components")
        vals = []
        for x in v:
            if not _is_number(x) or math.isnan(float(x)):
                raise ctx.error("reference", "value", f"entries must be numbers, got {_tname(x)} {_short(x)}")
            vals.append(float(x))
        return Reference(vals, src)
    if not _is_number(v) or math.isnan(float(v)):
        raise ctx.error("reference", "value", f"must be a number, got {_tname(v)} {_short(v)}")
    if components > 1:
        raise ctx.error("reference", "value", f"must be a list of {components} numbers (one per component)")
    return Reference(float(v), src)


# --------------------------------------------------------------------------
# files
# --------------------------------------------------------------------------

def load_problem(path, *, allow_python: bool = False) -> Problem:
    """Read and parse a problem file; an unreadable file is a ProblemError too."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise ProblemError(f"cannot read the file: {exc.strerror or exc}", path=str(p)) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ProblemError(f"not UTF-8 text (byte {exc.start})", path=str(p)) from None
    return parse_problem(text, path=p, allow_python=allow_python)


def integrand_from_spec(spec: dict) -> Callable:
    """Re-create an integrand from ``Problem.integrand_spec`` (for worker processes)."""
    kind = spec.get("kind")
    if kind == "expr":
        return compile_expression(spec["source"], spec["variables"], spec.get("constants") or {})
    if kind == "python":
        return _import_target(spec["target"], spec.get("base_dir") or str(Path.cwd()))
    raise ProblemError(f"unknown integrand kind {kind!r}")


def bundled_problem_dir() -> Path:
    """The example problems shipped with cubage (the package ``cubage.problems``)."""
    return Path(str(importlib.resources.files("cubage.problems")))


def problem_dirs() -> list[Path]:
    """``[./problems]`` when the current folder has one, else the bundled examples."""
    local = Path.cwd() / "problems"
    if local.is_dir():
        return [local]
    return [bundled_problem_dir()]


def list_problems(dirs=None) -> list[Path]:
    """Problem files (``*.toml``) in ``dirs`` (default :func:`problem_dirs`), sorted by name."""
    dirs = problem_dirs() if dirs is None else [Path(d) for d in dirs]
    seen: dict[str, Path] = {}
    for d in dirs:
        if not d.is_dir():
            continue
        for f in sorted(d.glob("*.toml")):
            seen.setdefault(f.stem, f)
    return [seen[k] for k in sorted(seen)]


def find_problem(name_or_path: str) -> Path:
    """An existing file, else ``<name>`` / ``<name>.toml`` in the problem folders, else the bundled ones."""
    p = Path(name_or_path)
    if p.is_file():
        return p
    dirs = problem_dirs()
    bundled = bundled_problem_dir()
    if bundled not in dirs:
        dirs = [*dirs, bundled]
    for d in dirs:
        for cand in (d / name_or_path, d / f"{name_or_path}.toml"):
            if cand.is_file():
                return cand
    names = sorted({f.stem for f in list_problems(dirs)})
    hint = _suggest(str(name_or_path), names)
    avail = ", ".join(names) if names else "none"
    raise ProblemError(f"no such file or problem{hint} (available: {avail})", path=str(name_or_path))
