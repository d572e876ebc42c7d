"""What the run view needs to know about a problem, whether or not its code can be imported."""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from cubage.problem.problem_file import Problem, ProblemError, load_problem

#: How an axis of the engine's frame relates to the user's axis.
AXIS_FINITE, AXIS_UPPER_INF, AXIS_LOWER_INF, AXIS_BOTH_INF = "finite", "upper-inf", "lower-inf", "both-inf"

_AXIS_NOTE = {
    AXIS_UPPER_INF: "[{a:g}, inf) drawn as t in [0,1), {v} = {a:g} + {L}t/(1-t)",
    AXIS_LOWER_INF: "(-inf, {b:g}] drawn as t in [0,1), {v} = {b:g} - {L}t/(1-t)",
    AXIS_BOTH_INF: "(-inf, inf) drawn as t in (-1,1), {v} = {L}t/(1-t^2)",
}


@dataclass
class ProblemMeta:
    """Title, variable names, reference and axis kinds of a problem.

    Attributes
    ----------
    title : str
    path : Path or None
    variables : list of str
    kind : {"box", "simplex"}
    lower, upper : list of float
        The box bounds (for a simplex: the bounding box of its vertices).
    axis_kinds : list of str
        One of the ``AXIS_*`` words per axis.
    reference : list of float or None
        Known value per component.
    reference_source : str
    """

    title: str
    path: Path | None
    variables: list[str]
    kind: str = "box"
    lower: list[float] = field(default_factory=list)
    upper: list[float] = field(default_factory=list)
    axis_kinds: list[str] = field(default_factory=list)
    reference: list[float] | None = None
    reference_source: str = ""
    scale: list[float] = field(default_factory=list)

    @property
    def dim(self) -> int:
        return len(self.variables)

    def axis_note(self, i: int) -> str:
        """A short note for axis ``i`` when it is unbounded (drawn in mapped coordinates), else ''."""
        k = self.axis_kinds[i] if i < len(self.axis_kinds) else AXIS_FINITE
        if k == AXIS_FINITE:
            return ""
        L = self.scale[i] if i < len(self.scale) else 1.0
        return f"{self.variables[i]}: " + _AXIS_NOTE[k].format(a=self.lower[i], b=self.upper[i],
                                                               v=self.variables[i], L="" if L == 1 else f"{L:g}*")

    @classmethod
    def from_problem(cls, p: Problem) -> ProblemMeta:
        """From a parsed problem."""
        ref = None
        src = ""
        if p.reference is not None:
            v = p.reference.value
            ref = [float(x) for x in v] if isinstance(v, list) else [float(v)]
            src = p.reference.source
        dom = p.domain
        if hasattr(dom, "vertices"):
            v = np.asarray(dom.vertices, dtype=float)
            lo, hi, kind = v.min(axis=0).tolist(), v.max(axis=0).tolist(), "simplex"
        else:
            lo, hi, kind = [float(x) for x in dom.lower], [float(x) for x in dom.upper], "box"
        scale = [float(x) for x in getattr(dom, "scale", [])]
        return cls(p.title or (p.path.stem if p.path else "problem"), p.path, list(p.variables), kind, lo, hi,
                   _kinds(lo, hi), ref, src, scale)


def _kinds(lo, hi) -> list[str]:
    out = []
    for a, b in zip(lo, hi):
        if math.isfinite(a) and math.isfinite(b):
            out.append(AXIS_FINITE)
        elif math.isfinite(a):
            out.append(AXIS_UPPER_INF)
        elif math.isfinite(b):
            out.append(AXIS_LOWER_INF)
        else:
            out.append(AXIS_BOTH_INF)
    return out


def uses_python(path) -> str | None:
    """The ``[integrand] python`` target of a problem file, or None (also None when unreadable)."""
    try:
        data = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError, MemoryError):
        return None     # nested 3000 deep, unreadable...: the full load says why (issue 10 item 11)
    integ = data.get("integrand")
    if isinstance(integ, dict) and isinstance(integ.get("python"), str):
        return integ["python"]
    return None


def _num(x) -> float:
    if isinstance(x, str):
        return float(x)
    return float(x)


def meta_from_file(path) -> ProblemMeta:
    """Metadata of a problem file without importing user code.

    Tries :func:`load_problem` (allow_python=False); a problem whose integrand
    is Python code is read as plain TOML for title, variables, domain and
    reference.  Raises :class:`ProblemError` when neither works.
    """
    path = Path(path)
    try:
        return ProblemMeta.from_problem(load_problem(path, allow_python=False))
    except ProblemError:
        if uses_python(path) is None:
            raise
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        dom = data["domain"]
        variables = [str(v) for v in dom["variables"]]
        if "simplex" in dom:
            v = np.asarray([[_num(c) for c in row] for row in dom["simplex"]], dtype=float)
            lo, hi, kind = v.min(axis=0).tolist(), v.max(axis=0).tolist(), "simplex"
        else:
            rows = dom["box"]
            lo, hi, kind = [_num(r[0]) for r in rows], [_num(r[1]) for r in rows], "box"
        ref = src = None
        if isinstance(data.get("reference"), dict) and "value" in data["reference"]:
            v = data["reference"]["value"]
            ref = [float(x) for x in v] if isinstance(v, list) else [float(v)]
            src = str(data["reference"].get("source", ""))
        scale = [float(x) for x in dom.get("scale", [])]
        return ProblemMeta(str(data.get("title") or path.stem), path, variables, kind, lo, hi, _kinds(lo, hi),
                           ref, src or "", scale)
    except (KeyError, TypeError, ValueError, IndexError, OSError, ArithmeticError, RecursionError,
            tomllib.TOMLDecodeError) as exc:
        raise ProblemError(f"cannot read title/variables/domain: {exc}", path=str(path)) from None
