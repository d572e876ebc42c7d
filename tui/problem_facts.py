"""What the run view shows about a problem (title, variables, reference, axis kinds), from the problem layer.

The facts come from a :class:`~cubage.problem.problem_file.ProblemSpec`
(pure data: reading a file never imports user code) or a bound
:class:`~cubage.problem.problem_file.Problem`; the UI has no parser of its own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from cubage.problem.problem_file import Problem, ProblemSpec, load_problem_spec

#: How an axis of the engine's frame relates to the user's axis.
AXIS_FINITE, AXIS_UPPER_INF, AXIS_LOWER_INF, AXIS_BOTH_INF = "finite", "upper-inf", "lower-inf", "both-inf"

_AXIS_NOTE = {
    AXIS_UPPER_INF: "[{a:g}, inf) drawn as t in [0,1), {v} = {a:g} + {L}t/(1-t)",
    AXIS_LOWER_INF: "(-inf, {b:g}] drawn as t in [0,1), {v} = {b:g} - {L}t/(1-t)",
    AXIS_BOTH_INF: "(-inf, inf) drawn as t in (-1,1), {v} = {L}t/(1-t^2)",
}


@dataclass
class ProblemFacts:
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
    def from_spec(cls, spec: ProblemSpec | Problem) -> ProblemFacts:
        """From a problem read as data (or a bound problem: the same fields)."""
        ref = None
        src = ""
        if spec.reference is not None:
            v = spec.reference.value
            ref = [float(x) for x in v] if isinstance(v, list) else [float(v)]
            src = spec.reference.source
        dom = spec.domain
        if hasattr(dom, "vertices"):
            v = np.asarray(dom.vertices, dtype=float)
            lo, hi, kind = v.min(axis=0).tolist(), v.max(axis=0).tolist(), "simplex"
        else:
            lo, hi, kind = [float(x) for x in dom.lower], [float(x) for x in dom.upper], "box"
        scale = [float(x) for x in getattr(dom, "scale", [])]
        return cls(spec.title or (spec.path.stem if spec.path else "problem"), spec.path, list(spec.variables),
                   kind, lo, hi, _kinds(lo, hi), ref, src, scale)

    from_problem = from_spec

    @classmethod
    def from_file(cls, path) -> ProblemFacts:
        """From a problem file read as data (:func:`load_problem_spec`; raises its ProblemError)."""
        return cls.from_spec(load_problem_spec(path))


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
