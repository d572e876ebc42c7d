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

import dataclasses
import difflib
import hashlib
import importlib
import importlib.resources
import importlib.util
import json
import math
import os
import reprlib
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from cubage.engine.domains import Box, DomainError, Simplex
from cubage.engine.rules import default_rule, rule_limit_error
from cubage.problem.expr import ExpressionError, compile_expression, declared_name
from cubage.problem.python_integrand import PythonIntegrand, PythonTargetError, bind_python
from cubage.problem.scan_table import ScanGrid, ScanTableError, parse_scan_table
from cubage.problem.toml_values import is_number as _is_number
from cubage.problem.toml_values import type_name as _tname

__all__ = [
    "ProblemError", "Goal", "Method", "Reference", "Problem", "ProblemSpec", "PythonIntegrand",
    "read_problem_spec", "load_problem_spec", "bind_problem",
    "parse_problem", "load_problem", "integrand_from_spec",
    "bundled_problem_dir", "problem_dirs", "find_problem", "list_problems",
    "RULES", "BACKENDS",
]

RULES = ("genz-malik", "gauss-kronrod", "grundmann-moller")
BACKENDS = ("auto", "serial", "processes", "threads", "dask")

_TOP_KEYS = ("title", "notes", "domain", "integrand", "goal", "method", "reference", "scan", "features")
_TABLE_KEYS = {
    "domain": ("variables", "box", "simplex", "scale"),
    "integrand": ("expr", "constants", "python"),
    "goal": ("rel_tol", "abs_tol", "budget", "time_limit", "memory_ceiling"),
    "method": ("rule", "degree", "workers", "backend", "cluster", "align"),
    "reference": ("value", "source"),
    "features": ("breaks", "cuts", "singular"),
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

    def to_json(self) -> dict:
        """The error as a JSON-ready object (for ``--json`` output)."""
        return {"error": "bad-input", "message": self.headline, "reason": self.message, "file": self.path,
                "line": self.line, "table": self.table, "key": self.key, "detail": list(self.detail)}


@dataclass
class Goal:
    rel_tol: float = 1e-6
    abs_tol: float = 0.0
    budget: int | None = None
    time_limit: float | None = None
    memory_ceiling: int | None = None


@dataclass
class Method:
    rule: str | None = None
    degree: int | None = None
    workers: int | str = 1
    backend: str = "auto"
    cluster: str | None = None
    #: A ``cluster`` the file names but that is not used: a dask scheduler can run code in this
    #: process, so a file's cluster counts only when the file is trusted (``allow_python``);
    #: otherwise :func:`bind_problem` keeps it here (for messages) and ``cluster`` is None (issue 10 item 0).
    cluster_ignored: str | None = None
    #: The file's ``workers`` when it was above this machine's cores and capped (issue 10 item 15d).
    workers_asked: int | None = None


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
    spec: ProblemSpec | None = None    # the pure data it was bound from (read_problem_spec)
    features: dict = field(default_factory=dict)     # engine keywords breaks/cuts/singular (problem.features)
    feature_lines: list = field(default_factory=list)  # what was declared/found and what is done about it

    @property
    def dim(self) -> int:
        return len(self.variables)

    def fingerprint(self) -> str:
        """sha256 of the domain and the integrand (not goal or method); stable across runs.

        For a Python integrand it covers the import path and the digest of the
        imported code (:func:`cubage.problem.python_integrand.code_digest`), so
        an edit of the module between a run and its resume is noticed.
        """
        spec = dict(self.integrand_spec)
        if spec.get("kind") == "python":
            spec = {"kind": "python", "target": spec["target"], "code_sha256": spec.get("code_sha256")}
        else:
            spec = {"kind": "expr", "source": spec["source"], "variables": list(spec["variables"]),
                    "constants": {k: float(v).hex() for k, v in sorted(spec.get("constants", {}).items())}}
        dom = self.domain.to_json()
        payload = json.dumps({"domain": dom, "integrand": spec}, sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(payload.encode("utf-8")).hexdigest()

    def describe(self) -> list[tuple[str, str]]:
        """Rows (label, text) summarising the problem, for ``cubage check`` and the UI."""
        rows = _describe(self.variables, self.domain, self.integrand_spec, self.components, self.goal,
                         self.method, self.reference, self.scan)
        return rows + [("feature", line) for line in self.feature_lines]   # declared and found (issue 13)


@dataclass(frozen=True, eq=False)
class ProblemSpec:
    """A problem file read and checked, as pure data: no user code is imported.

    Made by :func:`read_problem_spec` / :func:`load_problem_spec`; turned into
    a runnable :class:`Problem` by :func:`bind_problem` (which compiles the
    expression, or imports the Python code when allowed).  Every check that
    needs no user code has been made: the expression is compiled once to
    validate it, so a spec whose ``expr`` is set always binds.

    Attributes
    ----------
    path : Path or None
        The file it came from.
    text : str
        The TOML text.
    title, notes : str
    variables : tuple of str
        Variable names, NFKC-normalised as Python reads them.
    domain : Box or Simplex
    expr : str or tuple of str or None
        The expression (a tuple for several components), or None.
    python : str or None
        ``"module:function"`` or ``"file.py:function"``, or None.
    base_dir : str
        Folder that relative Python targets resolve against.
    constants : dict of str to float
    components : int or None
        Number of components; None for Python code until it is bound.
    goal : Goal
    method : Method
    reference : Reference or None
    scan : ScanGrid or None
    """

    path: Path | None
    text: str
    title: str
    notes: str
    variables: tuple[str, ...]
    domain: Box | Simplex
    expr: str | tuple[str, ...] | None
    python: str | None
    base_dir: str
    constants: dict[str, float]
    components: int | None
    goal: Goal
    method: Method
    reference: Reference | None
    scan: ScanGrid | None = None
    features: dict = field(default_factory=dict)    # engine keywords breaks/cuts/singular (issue 13)
    feature_lines: tuple = ()                       # what was declared/found and what is done about it

    @property
    def dim(self) -> int:
        """Number of variables."""
        return len(self.variables)

    @property
    def kind(self) -> str:
        """``"expr"`` or ``"python"``."""
        return "expr" if self.expr is not None else "python"

    @property
    def needs_python(self) -> bool:
        """True when binding imports the user's own code (``allow_python`` needed)."""
        return self.python is not None

    def line_of(self, table: str | None, key: str | None = None) -> int | None:
        """1-based line of ``[table] key`` (or of the ``[table]`` header) in the text, if found."""
        return _locate(self.text, table, key)

    def integrand_spec(self) -> dict:
        """The integrand as a JSON-ready dict (``Problem.integrand_spec`` without the code digest)."""
        if self.expr is not None:
            src = list(self.expr) if isinstance(self.expr, tuple) else self.expr
            return {"kind": "expr", "source": src, "variables": list(self.variables),
                    "constants": dict(self.constants)}
        return {"kind": "python", "target": self.python, "base_dir": self.base_dir}

    def describe(self) -> list[tuple[str, str]]:
        """Rows (label, text) as :meth:`Problem.describe`, from the data alone."""
        rows = _describe(self.variables, self.domain, self.integrand_spec(), self.components or 1,
                         self.goal, self.method, self.reference, self.scan)
        if self.python is not None:
            rows = [(k, v + "   (not imported)" if k == "integrand" else v) for k, v in rows]
        return rows + [("feature", line) for line in self.feature_lines]   # declared and found (issue 13)

    def to_json(self) -> dict:
        """A JSON-ready summary (numbers that JSON cannot hold are written as strings)."""
        ref = None
        if self.reference is not None:
            v = self.reference.value
            ref = {"value": [_json_number(x) for x in v] if isinstance(v, list) else _json_number(v),
                   "source": self.reference.source}
        return {
            "path": str(self.path) if self.path is not None else None, "title": self.title, "notes": self.notes,
            "dimension": self.dim, "variables": list(self.variables), "kind": self.domain.kind,
            "domain": self.domain.to_json(), "integrand": self.integrand_spec(), "components": self.components,
            "goal": {"rel_tol": self.goal.rel_tol, "abs_tol": self.goal.abs_tol, "budget": self.goal.budget,
                     "time_limit": self.goal.time_limit},
            "method": {"rule": self.method.rule, "degree": self.method.degree, "workers": self.method.workers,
                       "backend": self.method.backend, "cluster": self.method.cluster},
            "reference": ref, "scan": self.scan.to_json() if self.scan is not None else None,
        }


def _json_number(x: float) -> float | str:
    """``x``, or ``"inf"`` / ``"-inf"`` / ``"nan"`` where JSON has no number for it."""
    return x if math.isfinite(x) else str(x)


def _describe(variables, domain, spec, components, goal, method, reference, scan) -> list[tuple[str, str]]:
    rows: list[tuple[str, str]] = []
    rows.append(("dimension", f"{len(variables)} ({', '.join(variables)})"))
    rows.append(("domain", domain.describe()))
    if spec["kind"] == "expr":
        src = spec["source"]
        text = " ; ".join(src) if isinstance(src, list) else src
        if spec.get("constants"):
            text += "   with " + ", ".join(f"{k} = {v:g}" for k, v in spec["constants"].items())
    else:
        text = f"python {spec['target']}"
    if components > 1:
        text += f"   [{components} components]"
    rows.append(("integrand", text))
    g = goal
    gt = f"rel_tol {g.rel_tol:g}, abs_tol {g.abs_tol:g}"
    gt += f", budget {g.budget:,}" if g.budget is not None else ", budget unlimited"
    if g.time_limit is not None:
        gt += f", time_limit {g.time_limit:g} s"
    rows.append(("goal", gt))
    m = method
    meth = f"rule {m.rule or 'default'}"
    if m.degree is not None:
        meth += f" (degree {m.degree})"
    meth += f", workers {m.workers}, backend {m.backend}"
    if m.workers_asked:
        meth += f" (the file asks for {m.workers_asked} workers; capped at this machine's cores)"
    if m.cluster:
        meth += f", cluster {m.cluster}"
    if m.cluster_ignored:
        meth += f", cluster {m.cluster_ignored} not used (needs --cluster or --allow-python)"
    rows.append(("method", meth))
    if reference is not None:
        v = reference.value
        vt = "[" + ", ".join(f"{x:.15g}" for x in v) + "]" if isinstance(v, list) else f"{v:.15g}"
        rows.append(("reference", f"{vt}  ({reference.source})"))
    else:
        rows.append(("reference", "none"))
    if scan is not None:
        rows.append(("scan", scan.describe()))
    return rows


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------

_REPR = reprlib.Repr()
_REPR.maxstring = _REPR.maxother = 40
_REPR.maxlist = 6
_REPR.maxlevel = 3


def _short(v) -> str:
    """``repr(v)`` cut to a readable length (bounded cost, whatever ``v`` holds)."""
    return _REPR.repr(v)


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

    def skip_string_or_comment(self, s: str, i: int) -> int | None:
        """From ``s[i]`` (inside a multi-line string, or at a quote or ``#``): the index after the string,
        or None when the line ends first (a comment, or a string that goes on)."""
        n = len(s)
        if self.ml is not None:
            while i < n:
                if self.ml == '"""' and s[i] == "\\":
                    i += 2
                    continue
                if s.startswith(self.ml, i):
                    self.ml = None
                    return i + 3
                i += 1
            return None
        c = s[i]
        if c == "#":
            return None
        if s.startswith(c * 3, i):
            self.ml = c * 3
            return i + 3
        j = i + 1
        while j < n and s[j] != c:
            j += 2 if (c == '"' and s[j] == "\\") else 1
        return j + 1 if j < n else None

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

def _toml_words(msg: str) -> str:
    """tomllib's messages that show a Python tuple of keys, in a problem file's words.

    ``Cannot declare ('goal',) twice`` -> ``table [goal] is declared twice``; ``Cannot mutate immutable
    namespace ('a', 'b')`` -> ``[a.b] was written inline ({ ... }) and cannot be extended``.
    """
    import ast
    for head, tail, say in (("Cannot declare (", ") twice", "table [{}] is declared twice"),
                            ("Cannot mutate immutable namespace (", ")",
                             "[{}] was written inline ({{ ... }}) and cannot be extended")):
        if msg.startswith(head):
            end = msg.find(tail, len(head))
            if end < 0:
                continue
            try:
                keys = ast.literal_eval("(" + msg[len(head):end] + ")")
            except (ValueError, SyntaxError, RecursionError, MemoryError):
                continue
            if isinstance(keys, tuple) and keys and all(isinstance(k, str) for k in keys):
                return say.format(".".join(keys)) + msg[end + len(tail):]
    return msg


def _toml_position(msg: str, text: str) -> tuple[str, int | None]:
    """Split tomllib's "... (at line L, column C)" suffix off its message (no regular expression)."""
    msg = _toml_words(msg)
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


def read_problem_spec(text: str, *, path: Path | str | None = None) -> ProblemSpec:
    """Read and check the text of a problem file as pure data (first phase; imports no user code).

    Parameters
    ----------
    text : str
        The TOML text.
    path : path, optional
        Where it came from (used in messages and to resolve ``file.py:func``).

    Returns
    -------
    ProblemSpec

    Raises
    ------
    ProblemError
        For anything wrong, one line naming file, line, table and key.  No
        other exception escapes, whatever the text holds.
    """
    pstr = str(path) if path is not None else None
    ctx = _Ctx(text, pstr)
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        return _read_spec(ctx, text, pstr)
    except (RecursionError, MemoryError, OverflowError) as exc:   # a last guard; each known cause is checked
        raise ProblemError(f"cannot read this problem ({type(exc).__name__}); it is too large or too deeply "
                           "nested", path=ctx.path) from None


#: Most parts of one dotted key (``a.b.c``) or table header; a problem needs 2.
MAX_KEY_PARTS = 16


def _prescan(ctx: _Ctx, text: str) -> None:
    """Refuse, in one linear pass before the TOML parser runs, what would make it slow or recurse.

    The TOML parser takes time quadratic in the number of parts of a dotted
    key (``a.a.a...``: 200 KB ran for minutes) and recurses once per level of
    nested arrays and inline tables.  Outside strings and comments this counts
    the dots of each key and the depth of ``[`` / ``{``.
    """
    scan = _ValueScan()
    dots = 0
    for lineno, line in enumerate(text.splitlines(), 1):
        i, n = 0, len(line)
        while i < n:
            if scan.ml is not None or line[i] in "\"'#":
                j = scan.skip_string_or_comment(line, i)
                if j is None:
                    break
                i = j
                continue
            c = line[i]
            if c == ".":
                dots += 1
                if dots >= MAX_KEY_PARTS:
                    raise ProblemError(f"a key or table name has more than {MAX_KEY_PARTS} dotted parts",
                                       path=ctx.path, line=lineno)
            elif c in "=,":
                dots = 0
            elif c in "[{":
                dots = 0
                scan.depth += 1
                if scan.depth > MAX_NESTING + 2:     # + 2: a header [[...]] opens two at depth 0
                    raise ProblemError(f"arrays or tables nest more than {MAX_NESTING} levels deep; a problem "
                                       "file needs at most 3", path=ctx.path, line=lineno)
            elif c in "]}":
                dots = 0
                scan.depth = max(0, scan.depth - 1)
            i += 1
        dots = 0


def _read_spec(ctx: _Ctx, text: str, pstr: str | None) -> ProblemSpec:
    _prescan(ctx, text)
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
    expr, python, constants, components = _parse_integrand(ctx, tables["integrand"], variables)
    goal = _parse_goal(ctx, tables.get("goal", {}))
    method = _parse_method(ctx, tables.get("method", {}), domain)
    reference = _parse_reference(ctx, tables["reference"], components) if "reference" in tables else None
    kind_spec = {"kind": "expr" if expr is not None else "python", "constants": constants}
    scan = _parse_scan(ctx, data["scan"], kind_spec) if "scan" in data else None
    features, feature_lines = _parse_features(ctx, tables, {**kind_spec, "source": expr}, variables, domain)
    if scan is not None and isinstance(tables.get("features"), dict) \
            and tables.get("method", {}).get("align", "auto") != "off":
        from cubage.problem.features import scan_misfit
        why = scan_misfit(tables["features"], list(variables), constants or {}, scan, domain)
        if why is not None:
            raise ctx.error("features", why[0], why[1])
    return ProblemSpec(path=Path(pstr) if pstr is not None else None, text=text, title=title, notes=notes,
                       variables=tuple(variables), domain=domain, expr=expr, python=python, base_dir=base_dir,
                       constants=constants, components=components, goal=goal, method=method,
                       reference=reference, scan=scan, features=features, feature_lines=tuple(feature_lines))


def bind_problem(spec: ProblemSpec, *, allow_python: bool = False) -> Problem:
    """Give a spec its integrand (second phase): compile the expression, or import the Python code.

    Parameters
    ----------
    spec : ProblemSpec
        From :func:`read_problem_spec` or :func:`load_problem_spec`.
    allow_python : bool
        Allow importing and running the user's own code (``python = ...``).

    Returns
    -------
    Problem
        Its ``integrand`` pickles by reference: a
        :class:`~cubage.problem.expr.CompiledExpression` as its source, a
        :class:`~cubage.problem.python_integrand.PythonIntegrand` as its
        import path and code digest.

    Raises
    ------
    ProblemError
    """
    ctx = _Ctx(spec.text, str(spec.path) if spec.path is not None else None)
    ispec = spec.integrand_spec()
    reference = spec.reference
    if spec.expr is not None:
        src = list(spec.expr) if isinstance(spec.expr, tuple) else spec.expr
        try:
            f = compile_expression(src, list(spec.variables), spec.constants)
        except ExpressionError as exc:   # cannot happen: read_problem_spec compiled it already
            raise ctx.error("integrand", "expr", exc.reason, detail=exc.caret_lines()) from None
        components = f.components
    else:
        target = spec.python
        if not allow_python:
            raise ctx.error("integrand", "python", "this problem runs your own Python code; rerun with "
                                                   f"--allow-python if you trust {ctx.path}")
        try:
            f = bind_python(target, spec.base_dir)
        except PythonTargetError as exc:
            raise ctx.error("integrand", "python", str(exc)) from None
        ispec["code_sha256"] = f.code_sha256
        components = _probe_components(ctx, f, spec.domain, target)
        if reference is not None:
            _check_reference_count(ctx, reference.value, components)
    method = spec.method
    if method.cluster is not None and not allow_python:
        # never connect to a scheduler named by an untrusted file (issue 10 item 0)
        method = dataclasses.replace(method, cluster=None, cluster_ignored=method.cluster,
                                     backend="auto" if method.backend == "dask" else method.backend)
    return Problem(path=spec.path, text=spec.text, title=spec.title, notes=spec.notes,
                   variables=list(spec.variables), domain=spec.domain, integrand=f, integrand_spec=ispec,
                   components=components, goal=spec.goal, method=method, reference=reference,
                   scan=spec.scan, spec=spec, features=dict(spec.features), feature_lines=list(spec.feature_lines))


def parse_problem(text: str, *, path: Path | str | None = None, allow_python: bool = False) -> Problem:
    """Parse, validate and bind the text of a problem file (both phases at once).

    Equivalent to ``bind_problem(read_problem_spec(text, path=path), allow_python=allow_python)``.

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
    return bind_problem(read_problem_spec(text, path=path), allow_python=allow_python)


def _parse_features(ctx, tables, spec, variables, domain) -> tuple[dict, list]:
    """[features] (declared) and [method] align; expressions are analysed (cubage.problem.features)."""
    from cubage.problem.features import problem_features
    src = spec.get("source")
    spec = {**spec, "source": list(src) if isinstance(src, tuple) else src}
    kw, lines, _ = problem_features(ctx, tables.get("features"), tables.get("method", {}), spec, list(variables),
                                    domain)
    return kw, lines


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


#: The most dimensions any rule family supports (see cubage.engine.rules.rule_limit_error).
_MOST_DIMENSIONS = max(d for d in range(1, 65) if any(rule_limit_error(r, d) is None for r in RULES))


def _parse_domain(ctx, tbl):
    if "variables" not in tbl:
        raise ctx.error("domain", "variables", 'missing; name the variables, e.g. variables = ["x", "y"]')
    vs = tbl["variables"]
    if not isinstance(vs, list) or not vs:
        got = "an empty list" if isinstance(vs, list) else _tname(vs)
        raise ctx.error("domain", "variables", f"must be a non-empty list of names, got {got}")
    if len(vs) > _MOST_DIMENSIONS:    # no rule goes this far: say so before checking every name and bound
        kind = "simplex" if "simplex" in tbl and "box" not in tbl else "box"
        raise ctx.error("domain", "variables",
                        f"{len(vs)} variables: {rule_limit_error(default_rule(kind, len(vs)), len(vs))}")
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
    too_many = rule_limit_error("grundmann-moller", d)
    if too_many:     # before the (d + 1) x d vertices are checked and the simplex is built
        raise ctx.error("domain", "variables", f"{d} variables: {too_many}")
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


def _parse_integrand(ctx, tbl, variables):
    """(expr, python target, constants, components) of [integrand]; compiles the expression to check it."""
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
        return (tuple(src) if isinstance(src, list) else src), None, constants, f.components
    target = tbl["python"]
    if not isinstance(target, str):
        raise ctx.error("integrand", "python", f'must be a string "module:function" or "file.py:function", '
                                               f"got {_tname(target)}")
    if ":" not in target or not target.rsplit(":", 1)[1].strip() or not target.rsplit(":", 1)[0].strip():
        raise ctx.error("integrand", "python",
                        f'{_short(target)} must look like "module:function" or "file.py:function"')
    return None, target, constants, None


def _import_target(target: str, base_dir: str):
    try:
        return bind_python(target, base_dir)
    except PythonTargetError as exc:
        raise ProblemError(str(exc)) from None


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
    except (Exception, SystemExit, KeyboardInterrupt) as exc:  # noqa: BLE001 - user code (issue 10 item 5)
        msg = " ".join(str(exc).split())
        raise ctx.error("integrand", "python", f"calling {target} on two test points of shape {X.shape} failed: "
                                               f"{type(exc).__name__}: {msg}") from None
    if y.shape == (X.shape[0],):
        return 1
    if y.ndim == 2 and y.shape[0] == X.shape[0] and y.shape[1] >= 1:
        return int(y.shape[1])
    raise ctx.error("integrand", "python", f"{target} returned shape {y.shape} for {X.shape[0]} points; "
                                           f"it must return (n,) or (n, m)")


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
    if "memory_ceiling" in tbl:
        from cubage.engine.run import parse_memory_size
        try:
            g.memory_ceiling = parse_memory_size(tbl["memory_ceiling"])
        except ValueError as exc:
            raise ctx.error("goal", "memory_ceiling", str(exc)) from None
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
        cores = os.cpu_count() or 1
        if isinstance(v, int) and v > cores:
            # a file from someone else must not spawn processes without bound (issue 10 item 15d);
            # --workers on the command line is not capped
            m.workers_asked, v = v, cores
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
        vals = []
        for x in v:
            if not _is_number(x) or math.isnan(float(x)):
                raise ctx.error("reference", "value", f"entries must be numbers, got {_tname(x)} {_short(x)}")
            vals.append(float(x))
        if components is not None:
            _check_reference_count(ctx, vals, components)
        return Reference(vals, src)
    if not _is_number(v) or math.isnan(float(v)):
        raise ctx.error("reference", "value", f"must be a number, got {_tname(v)} {_short(v)}")
    if components is not None:
        _check_reference_count(ctx, float(v), components)
    return Reference(float(v), src)


def _check_reference_count(ctx, value, components: int) -> None:
    """A reference list must have one entry per component; a scalar needs one component."""
    if isinstance(value, list):
        if components == 1:
            raise ctx.error("reference", "value", f"is a list of {len(value)} but the integrand has one component")
        if len(value) != components:
            raise ctx.error("reference", "value",
                            f"has {len(value)} entries but the integrand has {components} components")
    elif components > 1:
        raise ctx.error("reference", "value", f"must be a list of {components} numbers (one per component)")


# --------------------------------------------------------------------------
# files
# --------------------------------------------------------------------------

#: Largest problem file read (bytes); a problem needs a few kilobytes.
MAX_FILE_BYTES = 1_000_000


def load_problem_spec(path) -> ProblemSpec:
    """Read a problem file as pure data (:func:`read_problem_spec`); imports no user code.

    An unreadable, oversized or non-UTF-8 file is a :class:`ProblemError` too.
    """
    p = Path(path)
    try:
        if p.is_dir():
            raise ProblemError("is a folder, not a problem file (give a .toml file in it, or see: cubage list "
                               f"{p})", path=str(p))
        with p.open("rb") as fh:
            raw = fh.read(MAX_FILE_BYTES + 1)
    except OSError as exc:
        raise ProblemError(f"cannot read the file: {exc.strerror or exc}", path=str(p)) from None
    if len(raw) > MAX_FILE_BYTES:
        raise ProblemError(f"larger than {MAX_FILE_BYTES:,} bytes; not a problem file", path=str(p))
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise ProblemError(f"not UTF-8 text (byte {exc.start}, on this line)", path=str(p), line=line) from None
    return read_problem_spec(text, path=p)


def load_problem(path, *, allow_python: bool = False) -> Problem:
    """Read, check and bind a problem file (:func:`load_problem_spec` then :func:`bind_problem`)."""
    return bind_problem(load_problem_spec(path), allow_python=allow_python)


def integrand_from_spec(spec: dict) -> Callable:
    """Re-create an integrand from ``Problem.integrand_spec`` (for worker processes).

    A Python integrand whose spec carries ``code_sha256`` is refused if its
    code changed on disk since (a :class:`ProblemError`).
    """
    kind = spec.get("kind")
    if kind == "expr":
        return compile_expression(spec["source"], spec["variables"], spec.get("constants") or {})
    if kind == "python":
        try:
            return bind_python(spec["target"], spec.get("base_dir") or str(Path.cwd()), spec.get("code_sha256"))
        except PythonTargetError as exc:
            raise ProblemError(str(exc)) from None
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
    """The file a command-line name means.

    In order: an existing file; ``NAME.toml`` in the current folder; ``NAME``
    or ``NAME.toml`` in the problem folders (:func:`problem_dirs`), then the
    bundled examples.  A folder gets a message that says what to give instead
    (issue 10 item 21).

    Raises
    ------
    ProblemError
    """
    p = Path(name_or_path)
    if p.is_file():
        return p
    if p.suffix != ".toml" and Path(f"{name_or_path}.toml").is_file():
        return Path(f"{name_or_path}.toml")
    dirs = problem_dirs()
    bundled = bundled_problem_dir()
    if bundled not in dirs:
        dirs = [*dirs, bundled]
    if not p.is_dir():
        for d in dirs:
            for cand in (d / name_or_path, d / f"{name_or_path}.toml"):
                if cand.is_file():
                    return cand
    if p.is_dir():
        try:
            inside = sorted(f.name for f in p.glob("*.toml"))
        except OSError:
            inside = []
        shown = ", ".join(inside[:5]) + (", ..." if len(inside) > 5 else "")
        files = f"give one of its problem files ({shown})" if inside else "give a problem file (.toml)"
        raise ProblemError(f"is a folder, not a problem file: {files}; to continue a run directory use: "
                           f"cubage resume {name_or_path}", path=str(name_or_path))
    names = sorted({f.stem for f in list_problems(dirs)})
    hint = _suggest(str(name_or_path), names)
    avail = ", ".join(names) if names else "none"
    raise ProblemError(f"no such file or problem{hint} (available: {avail})", path=str(name_or_path))
