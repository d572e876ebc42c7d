"""Features of an integrand expression: where it switches and where it is singular.

An expression tells where its region boundaries belong.  This module walks the
same syntax tree the expression compiler checks (:mod:`cubage.problem.expr`)
and collects

* **switching functions** — the arguments of ``abs``, ``sign``,
  ``heaviside``, ``floor``/``ceil``/``trunc``, ``%``, both sides of every
  comparison, the condition of ``where``, the differences of the arguments of
  ``minimum``/``maximum``/``min``/``max``/``clip``, the sign argument of
  ``copysign``.  An affine switching function ``a . x + c`` becomes a break
  value (one variable) or a cut plane (several); ``floor(u)`` etc. give one
  plane per integer value ``u`` takes in the domain.  A non-affine one (a
  curved boundary such as ``x**2 + y**2 < 1``) cannot be followed by a plane:
  it is listed as a non-smooth place, so that nobody mistakes the integrand for
  a smooth one;
* **singular factors** — ``u**a`` with a negative or fractional constant
  ``a``, ``sqrt``, ``cbrt``, ``log``, and division by something that can
  vanish.  When ``u`` is affine the singular set is a plane (``|u|**a``); when
  ``u`` is a positive semi-definite quadratic vanishing at one point (such as
  ``(x - a)**2 + (y - b)**2``, also through ``hypot``) it is that point
  (``|r|**(2a)``).  These become the ``singular`` features of
  :mod:`cubage.engine.partition`.  A division by an affine function, which is
  not integrable unless the numerator vanishes too (``sin(x)/x``), gets a break
  there so that no node lies on it.

Everything found is filtered against the domain (a plane that misses it, a
point outside it are dropped) and turned into the engine's keyword arguments
``breaks``, ``cuts`` and ``singular``; :func:`feature_report` gives the lines
``cubage check`` prints.  The analysis is conservative: an expression it
cannot read gets no features (never an error).

The problem file's ``[features]`` table declares the same things by hand
(:func:`parse_feature_table`), with planes written as equations, e.g.
``cuts = ["x + y + z = 1.4"]``.
"""

from __future__ import annotations

import ast
import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from cubage.engine.domains import Box, Simplex
from cubage.problem import expr as _expr

__all__ = ["Findings", "analyse", "to_engine", "feature_report", "parse_plane", "parse_feature_table",
           "ALIGN_MODES", "MAX_DETECTED_CUTS"]

#: Values of ``[method] align``: detect and use declared features, use only declared ones, use none.
ALIGN_MODES = ("auto", "declared", "off")
#: At most this many detected non-axis cut planes are used (each multiplies the simplices).
MAX_DETECTED_CUTS = 6
_MAX_STEPS = 64                  # floor/ceil: at most this many integer levels


@dataclass
class Findings:
    """What :func:`analyse` found in an expression.

    Attributes
    ----------
    planes : list of (normal, offset, why)
        Zero sets of affine switching functions, ``normal . x = offset``.
    singular : list of dict
        ``{"point": [...], "power": a, "why": text}`` or
        ``{"normal": [...], "offset": b, "power": a, "why": text}``.
    nonsmooth : list of str
        Non-affine switching functions (source text), where the integrand is
        not smooth along a curved set.
    notes : list of str
        Features seen but not handled, and why.
    """

    planes: list = field(default_factory=list)
    singular: list = field(default_factory=list)
    nonsmooth: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    def empty(self) -> bool:
        return not (self.planes or self.singular or self.nonsmooth or self.notes)


# --------------------------------------------------------------------------
# polynomials of degree <= 2 over the variables
# --------------------------------------------------------------------------

class _Poly:
    """``c + g . x + x^T H x`` (``H`` symmetric), or a constant when g and H are zero."""

    __slots__ = ("c", "g", "H")

    def __init__(self, c, g, H):
        self.c, self.g, self.H = float(c), g, H

    @property
    def degree(self) -> int:
        if np.any(self.H != 0):
            return 2
        return 1 if np.any(self.g != 0) else 0

    def __add__(self, o):
        return _Poly(self.c + o.c, self.g + o.g, self.H + o.H)

    def scale(self, k):
        return _Poly(k * self.c, k * self.g, k * self.H)

    def mul(self, o):
        if self.degree + o.degree > 2:
            return None
        H = self.H * o.c + o.H * self.c + 0.5 * (np.outer(self.g, o.g) + np.outer(o.g, self.g))
        return _Poly(self.c * o.c, self.g * o.c + o.g * self.c, H)


class _Reader:
    """Reads sub-trees as polynomials of degree <= 2 (None when they are not)."""

    def __init__(self, variables, constants):
        self.index = {_expr.normalise_name(v): i for i, v in enumerate(variables)}
        self.d = len(variables)
        self.consts = {**{"pi": math.pi, "e": math.e}, **{_expr.normalise_name(k): float(v)
                                                            for k, v in constants.items()}}

    def const(self, v):
        return _Poly(v, np.zeros(self.d), np.zeros((self.d, self.d)))

    def poly(self, node) -> _Poly | None:
        try:
            p = self._poly(node)
        except (ArithmeticError, ValueError, TypeError, RecursionError):
            return None
        if p is None or not (math.isfinite(p.c) and np.isfinite(p.g).all() and np.isfinite(p.H).all()):
            return None
        return p

    def _poly(self, node):
        if isinstance(node, ast.Expression):
            return self._poly(node.body)
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) and \
                not isinstance(node.value, bool):
            return self.const(float(node.value))
        if isinstance(node, ast.Name):
            name = _expr.normalise_name(node.id)
            if name in self.index:
                g = np.zeros(self.d)
                g[self.index[name]] = 1.0
                return _Poly(0.0, g, np.zeros((self.d, self.d)))
            if name in self.consts:
                return self.const(self.consts[name])
            return None
        if isinstance(node, ast.UnaryOp):
            p = self._poly(node.operand)
            if p is None:
                return None
            if isinstance(node.op, ast.USub):
                return p.scale(-1.0)
            if isinstance(node.op, ast.UAdd):
                return p
            return None
        if isinstance(node, ast.BinOp):
            a, b = self._poly(node.left), self._poly(node.right)
            if a is None or b is None:
                return None
            if isinstance(node.op, ast.Add):
                return a + b
            if isinstance(node.op, ast.Sub):
                return a + b.scale(-1.0)
            if isinstance(node.op, ast.Mult):
                return a.mul(b)
            if isinstance(node.op, ast.Div):
                return a.scale(1.0 / b.c) if b.degree == 0 and b.c != 0 else None
            if isinstance(node.op, ast.Pow):
                if b.degree != 0:
                    return None
                if a.degree == 0:
                    return self.const(a.c ** b.c)
                if b.c == 1:
                    return a
                if b.c == 2:
                    return a.mul(a)
                return None
            return None
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            name = node.func.id
            if name == "square" and len(node.args) == 1:
                a = self._poly(node.args[0])
                return None if a is None else a.mul(a)
            args = [self._poly(a) for a in node.args]
            if name in _expr.FUNCTIONS and args and all(a is not None and a.degree == 0 for a in args):
                fn = _expr.FUNCTIONS[name][0]
                with np.errstate(all="ignore"):
                    v = float(np.asarray(fn(*[np.float64(a.c) for a in args]), dtype=float))
                return self.const(v) if math.isfinite(v) else None
            return None
        return None


# --------------------------------------------------------------------------
# the walk
# --------------------------------------------------------------------------

_SWITCH_ONE = {"abs": "absolute value", "fabs": "absolute value", "sign": "sign", "heaviside": "step"}
_STEPS = {"floor": "floor", "ceil": "ceil", "trunc": "trunc"}
_MINMAX = {"minimum", "maximum", "min", "max"}
_LOGS = {"log", "ln", "log2", "log10"}


class _Walker:
    def __init__(self, reader: _Reader, text: str):
        self.r = reader
        self.text = text
        self.found = Findings()

    def src(self, node) -> str:
        try:
            return ast.unparse(node)
        except Exception:  # noqa: BLE001 - display only
            return "?"

    # -- switching ---------------------------------------------------------
    def switch(self, node, why: str) -> None:
        p = self.r.poly(node)
        if p is None or p.degree == 2:
            self.found.nonsmooth.append(f"{why}: {self.src(node)}")
            return
        if p.degree == 1:
            self.found.planes.append((p.g.copy(), -p.c, f"{why} of {self.src(node)}"))

    def steps(self, node, why: str, period: float = 1.0) -> None:
        p = self.r.poly(node)
        if p is None or p.degree == 2:
            self.found.nonsmooth.append(f"{why}: {self.src(node)}")
            return
        if p.degree == 1:
            self.found.planes.append((p.g.copy(), -p.c, f"{why} of {self.src(node)}",
                                      period))   # levels c + k*period: expanded against the domain

    # -- singular ------------------------------------------------------------
    def order(self, node):
        """(kind, where, power): ``node ~ dist**power`` near a plane or a point, else None."""
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            name = node.func.id
            if name in ("sqrt", "cbrt") and len(node.args) == 1:
                o = self.order(node.args[0])
                return None if o is None else (o[0], o[1], o[2] * (0.5 if name == "sqrt" else 1 / 3))
            if name in ("abs", "fabs") and len(node.args) == 1:
                return self.order(node.args[0])
            if name == "hypot" and len(node.args) == 2:
                a, b = (self.r.poly(x) for x in node.args)
                if a is not None and b is not None:
                    q = a.mul(a)
                    q2 = b.mul(b)
                    if q is not None and q2 is not None:
                        o = self._quad_order(q + q2)
                        return None if o is None else (o[0], o[1], o[2] * 0.5)
                return None
        if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Pow):
            e = self.r.poly(node.right)
            if e is not None and e.degree == 0:
                o = self.order(node.left)
                return None if o is None else (o[0], o[1], o[2] * e.c)
            return None
        p = self.r.poly(node)
        if p is None:
            return None
        if p.degree == 1:
            return ("plane", (p.g.copy(), -p.c), 1.0)
        if p.degree == 2:
            return self._quad_order(p)
        return None

    def _quad_order(self, q: _Poly):
        H = q.H
        w, V = np.linalg.eigh(H)
        scale = max(np.abs(w).max(), 1e-300)
        if w.min() < -1e-12 * scale:
            return None
        if w.min() <= 1e-12 * scale:
            self.found.notes.append("a quadratic vanishing on a line or plane (not a point): not handled")
            return None
        pt = -0.5 * np.linalg.solve(H, q.g)
        vmin = q.c + 0.5 * q.g @ pt
        if abs(vmin) > 1e-12 * (abs(q.c) + scale * (1 + pt @ pt)):
            return None                       # positive everywhere: nothing singular
        return ("point", pt, 2.0)

    def singular(self, node, power_scale: float, why: str) -> None:
        if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Mult, ast.Div)):   # a product: each factor
            self.singular(node.left, power_scale, why)
            self.singular(node.right, -power_scale if isinstance(node.op, ast.Div) else power_scale, why)
            return
        o = self.order(node)
        if o is None:
            return
        kind, where, k = o
        power = k * power_scale
        if power >= 0 and abs(power - round(power)) < 1e-12 and (kind == "plane" or round(power) % 2 == 0):
            return                            # a polynomial factor: smooth
        self.add_singular(kind, where, power, why)

    def add_singular(self, kind, where, power, why):
        if kind == "plane":
            g, off = where
            self.found.singular.append({"normal": g, "offset": off, "power": power, "why": why})
        else:
            self.found.singular.append({"point": where, "power": power, "why": why})

    # -- visiting ------------------------------------------------------------
    def visit(self, node) -> None:
        if isinstance(node, ast.Compare):
            ops = [node.left, *node.comparators]
            for a, b in zip(ops[:-1], ops[1:]):
                self.switch(ast.BinOp(left=a, op=ast.Sub(), right=b), "comparison")
        elif isinstance(node, ast.BinOp):
            if isinstance(node.op, ast.Pow):
                e = self.r.poly(node.right)
                if e is not None and e.degree == 0 and (e.c < 0 or abs(e.c - round(e.c)) > 1e-12):
                    self.singular(node.left, e.c, f"power {self.src(node)}")
            elif isinstance(node.op, ast.Div):
                o = self.order(node.right)
                if o is not None:
                    kind, where, k = o
                    if kind == "plane" and k >= 1:
                        g, off = where
                        self.found.planes.append((g, off, f"division by {self.src(node.right)}: no node where it "
                                                          "vanishes; integrable there only if the numerator "
                                                          "vanishes too, as in sin(x)/x"))
                    else:
                        self.singular(node.right, -1.0, f"division by {self.src(node.right)}")
            elif isinstance(node.op, ast.Mod):
                b = self.r.poly(node.right)
                if b is not None and b.degree == 0 and b.c != 0:
                    self.steps(node.left, "remainder", abs(b.c))
                else:
                    self.found.nonsmooth.append(f"remainder: {self.src(node)}")
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            name, args = node.func.id, node.args
            if name in _SWITCH_ONE and args:
                self.switch(args[0], _SWITCH_ONE[name])
            elif name in _STEPS and args:
                self.steps(args[0], _STEPS[name])
            elif name in _MINMAX and len(args) >= 2:
                for a, b in itertools.combinations(args, 2):
                    self.switch(ast.BinOp(left=a, op=ast.Sub(), right=b), name)
            elif name == "clip" and len(args) == 3:
                for b in args[1:]:
                    self.switch(ast.BinOp(left=args[0], op=ast.Sub(), right=b), "clip")
            elif name == "copysign" and len(args) == 2:
                self.switch(args[1], "sign")
            elif name == "where" and args:
                c = args[0]
                if not isinstance(c, (ast.Compare, ast.BoolOp)) and not (
                        isinstance(c, ast.UnaryOp) and isinstance(c.op, ast.Not)):
                    self.switch(c, "where condition")
            elif name in ("sqrt", "cbrt") and args:
                self.singular(args[0], 0.5 if name == "sqrt" else 1 / 3, f"{name}({self.src(args[0])})")
            elif name in _LOGS and args:
                o = self.order(args[0])
                if o is not None:
                    self.add_singular(o[0], o[1], None, f"{name}({self.src(args[0])})")
            elif name == "hypot" and len(args) == 2:
                o = self.order(node)
                if o is not None and o[0] == "point":
                    self.add_singular("point", o[1], 1.0, f"hypot({self.src(args[0])}, {self.src(args[1])})")
        for child in ast.iter_child_nodes(node):
            self.visit(child)


def analyse(source: str | list[str], variables: list[str], constants: dict | None = None) -> Findings:
    """Walk an expression (or a list of them) and collect its features.

    Parameters
    ----------
    source : str or list of str
        As given to :func:`cubage.problem.expr.compile_expression`.
    variables : list of str
    constants : dict, optional

    Returns
    -------
    Findings
        Empty when the expression cannot be read (the analysis never raises).
    """
    reader = _Reader(variables, constants or {})
    out = Findings()
    for s in (source if isinstance(source, list) else [source]):
        try:
            text = _expr._flatten(s)
            tree = ast.parse(text, mode="eval")
            if _expr._depth(tree) > _expr.MAX_DEPTH:
                continue
            w = _Walker(reader, text)
            w.visit(tree)
        except (SyntaxError, ValueError, RecursionError, MemoryError, TypeError):
            continue
        out.planes += w.found.planes
        out.singular += w.found.singular
        out.nonsmooth += w.found.nonsmooth
        out.notes += w.found.notes
    out.nonsmooth = list(dict.fromkeys(out.nonsmooth))
    out.notes = list(dict.fromkeys(out.notes))
    return out


# --------------------------------------------------------------------------
# against the domain
# --------------------------------------------------------------------------

def _corners(domain) -> np.ndarray | None:
    if isinstance(domain, Simplex):
        return np.asarray(domain.vertices, float)
    if not domain.bounded:
        return None
    return np.array(list(itertools.product(*zip(domain.lower, domain.upper))), dtype=float)


def _canon(g, off):
    g = np.asarray(g, float)
    k = np.abs(g).max()
    g, off = g / k, off / k
    first = g[np.nonzero(g)[0][0]]
    if first < 0:
        g, off = -g, -off
    return g + 0.0, float(off) + 0.0           # no negative zeros


def _crosses(domain, g, off) -> bool:
    """The plane meets the interior of the domain."""
    nz = np.nonzero(g)[0]
    if isinstance(domain, Box) and nz.size == 1:
        i = int(nz[0])
        x = off / g[i]
        return bool(domain.lower[i] < x < domain.upper[i])
    c = _corners(domain)
    if c is None:
        return True
    s = c @ g - off
    tol = 1e-12 * (np.abs(c).max() * np.abs(g).sum() + abs(off) + 1e-300)
    return bool(s.min() < -tol and s.max() > tol)


def _touches(domain, g, off) -> bool:
    """The plane meets the closed domain."""
    nz = np.nonzero(g)[0]
    if isinstance(domain, Box) and nz.size == 1:
        i = int(nz[0])
        x = off / g[i]
        return bool(domain.lower[i] <= x <= domain.upper[i])
    c = _corners(domain)
    if c is None:
        return True
    s = c @ g - off
    tol = 1e-12 * (np.abs(c).max() * np.abs(g).sum() + abs(off) + 1e-300)
    return bool(s.min() <= tol and s.max() >= -tol)


def _inside(domain, p) -> bool:
    p = np.asarray(p, float)
    if isinstance(domain, Box):
        tol = 1e-12 * (1 + np.abs(p).max())
        return bool(np.all(domain.lower - tol <= p) and np.all(p <= domain.upper + tol))
    from cubage.engine.singular_maps import barycentric
    lam = barycentric(p[None], np.asarray(domain.vertices, float)[None])[0]
    return bool(lam.min() >= -1e-12)


def to_engine(found: Findings, domain) -> tuple[dict, list[str]]:
    """Turn findings into the engine's ``breaks``/``cuts``/``singular`` keywords.

    Returns
    -------
    (kwargs, lines)
        ``kwargs`` for :class:`cubage.engine.run.Run` (only the kinds present);
        ``lines``: what will be done, one line each, for ``cubage check``.
    """
    d = domain.dim
    breaks: list[set] = [set() for _ in range(d)]
    cuts: dict = {}
    lines: list[str] = []
    c = _corners(domain)
    for item in found.planes:
        g, off, why = item[0], item[1], item[2]
        g, off = _canon(g, off)
        levels = [off]
        if len(item) > 3:                    # floor/ceil/%: every level c + k * period in the domain
            period = item[3] / np.abs(np.asarray(item[0], float)).max()
            if c is None:
                lines.append(f"not aligned ({why}): steps on an unbounded domain")
                continue
            vals = c @ g
            lo, hi = vals.min(), vals.max()
            k0, k1 = math.ceil((lo - off) / period), math.floor((hi - off) / period)
            if k1 - k0 + 1 > _MAX_STEPS:
                lines.append(f"not aligned ({why}): {k1 - k0 + 1} steps in the domain (at most {_MAX_STEPS})")
                continue
            levels = [off + k * period for k in range(k0, k1 + 1)]
        for lv in levels:
            if not _crosses(domain, g, lv):
                continue
            nz = np.nonzero(g)[0]
            if nz.size == 1:
                i = int(nz[0])
                x = float(lv / g[i]) + 0.0
                if x not in breaks[i]:
                    breaks[i].add(x)
                    lines.append(f"break at variable {i + 1} = {x:.10g}  ({why})")
            else:
                key = (tuple(np.round(g, 12)), round(lv, 12))
                if key not in cuts:
                    cuts[key] = ([float(v) for v in g], float(lv), why)
    cut_list = list(cuts.values())
    if cut_list and isinstance(domain, Box) and not domain.bounded:
        for _g, _lv, why in cut_list:
            lines.append(f"not aligned ({why}): cut planes need a bounded box")
        cut_list = []
    if len(cut_list) > MAX_DETECTED_CUTS:
        for _g, _lv, why in cut_list[MAX_DETECTED_CUTS:]:
            lines.append(f"not aligned ({why}): more than {MAX_DETECTED_CUTS} cut planes")
        cut_list = cut_list[:MAX_DETECTED_CUTS]
    for g, lv, why in cut_list:
        lines.append(f"cut along {_plane_text(g, lv)}  ({why})")
    sing = []
    seen = set()
    # the strongest claim about a set first (1/sqrt(x) is seen as x**-0.5 and as sqrt(x))
    order = sorted(found.singular, key=lambda s: -0.5 if s["power"] is None else s["power"])
    order = [_vertex_contact(s, domain, c) for s in order]
    for s in order:
        if "point" in s:
            p = [float(v) for v in s["point"]]
            if not _inside(domain, p):
                continue
            a = s["power"]
            if a is not None and a <= -d:
                lines.append(f"not treated ({s['why']}): |r|^{a:g} at ({_pt(p)}) is not integrable in {d}-D")
                continue
            key = ("p", tuple(np.round(p, 12)))
            if key in seen:
                continue
            seen.add(key)
            p = [v + 0.0 for v in p]
            sing.append({"point": p, "power": a})
            how = ("a vertex of the simplices there, radial map" if domain.bounded else
                   "a corner of the sub-boxes there, no node on it")
            lines.append(f"singular point ({_pt(p)}), power {_pw(a)}: {how}  ({s['why']})")
        else:
            g, off = _canon(s["normal"], s["offset"])
            if not _touches(domain, g, off):
                continue
            a = s["power"]
            if a is not None and a <= -1:
                lines.append(f"not treated ({s['why']}): |distance|^{a:g} at {_plane_text(g, off)} "
                             "is not integrable")
                continue
            nz = np.nonzero(g)[0]
            if nz.size > 1 and isinstance(domain, Box) and not domain.bounded:
                lines.append(f"not treated ({s['why']}): a slanted singular plane needs a bounded box")
                continue
            key = ("n", tuple(np.round(g, 12)), round(off, 12))
            if key in seen:
                continue
            seen.add(key)
            sing.append({"normal": [float(v) for v in g], "offset": float(off), "power": a})
            lines.append(f"singular plane {_plane_text(g, off)}, power {_pw(a)}: boundary there, graded map  "
                         f"({s['why']})")
    for t in found.nonsmooth:
        lines.append(f"non-smooth along a curved set, not aligned: {t}")
    for t in found.notes:
        lines.append(f"note: {t}")
    out: dict = {}
    if any(breaks):
        out["breaks"] = [sorted(b) for b in breaks]
    if cut_list:
        out["cuts"] = [[g, lv] for g, lv, _ in cut_list]
    if sing:
        out["singular"] = sing
    return out, lines


def _vertex_contact(s: dict, domain, corners) -> dict:
    """A singular plane that meets the domain in one corner only is a singular point there.

    Near that corner the distance to the plane is comparable to the distance to
    the corner, so ``|a . x - b|**p`` is treated as ``|x - corner|**p`` (the
    radial map), which is integrable for ``p > -d`` (``(x + y + z)**-2.5`` on the
    standard simplex, for example).
    """
    if "normal" not in s or corners is None:
        return s
    g, off = _canon(s["normal"], s["offset"])
    v = corners @ g - off
    tol = 1e-12 * (np.abs(corners).max() * np.abs(g).sum() + abs(off) + 1e-300)
    on = np.abs(v) <= tol
    if on.sum() == 1 and ((v[~on] > tol).all() or (v[~on] < -tol).all()):
        return {"point": [float(x) for x in corners[on][0]], "power": s["power"],
                "why": s["why"] + ", touching the domain at one corner"}
    return s


def _pt(p) -> str:
    return ", ".join(f"{v + 0.0:.10g}" for v in p)


def _pw(a) -> str:
    return "unknown" if a is None else f"{a:.6g}"


def _plane_text(g, off, names=None) -> str:
    terms = []
    for i, v in enumerate(g):
        if v == 0:
            continue
        name = names[i] if names else f"x{i + 1}"
        coef = "" if v == 1 else ("-" if v == -1 else f"{v:.6g} ")
        terms.append(f"{coef}{name}")
    return " + ".join(terms).replace("+ -", "- ") + f" = {off:.10g}"


def feature_report(kwargs: dict, lines: list[str], variables: list[str]) -> list[tuple[str, str]]:
    """Rows ``(label, text)`` for ``cubage check`` (variables named as in the problem)."""
    rows = []
    for ln in lines:
        for i in range(len(variables), 0, -1):
            ln = ln.replace(f"variable {i} =", f"{variables[i - 1]} =").replace(f"x{i}", variables[i - 1])
        rows.append(("feature", ln))
    return rows


# --------------------------------------------------------------------------
# declared features ([features] table)
# --------------------------------------------------------------------------

def parse_plane(text: str, variables: list[str], constants: dict | None = None) -> tuple[list[float], float]:
    """An affine equation ``"lhs = rhs"`` as ``(normal, offset)``.

    Raises
    ------
    ValueError
        One-line reason.
    """
    if not isinstance(text, str):
        raise ValueError(f"a plane is written as an equation string like \"x + y = 1\", got {text!r}")
    parts = [p for p in _split_equation(text)]
    if len(parts) != 2:
        raise ValueError(f"{text!r} must be one equation 'lhs = rhs' (a single '=')")
    reader = _Reader(variables, constants or {})
    sides = []
    for part in parts:
        try:
            tree = ast.parse(_expr._flatten(part), mode="eval")
        except (SyntaxError, ValueError, RecursionError, MemoryError):
            raise ValueError(f"cannot read {part.strip()!r} in {text!r}") from None
        p = reader.poly(tree)
        if p is None or p.degree > 1:
            raise ValueError(f"{part.strip()!r} in {text!r} is not affine in the variables "
                             f"({', '.join(variables)})")
        sides.append(p)
    diff = sides[0] + sides[1].scale(-1.0)
    if not np.any(diff.g != 0):
        raise ValueError(f"{text!r} does not involve any variable")
    return [float(v) for v in diff.g], float(-diff.c)


def _split_equation(text: str) -> list[str]:
    out, cur, i = [], "", 0
    while i < len(text):
        ch = text[i]
        if ch == "=" and (i + 1 >= len(text) or text[i + 1] != "=") and (i == 0 or text[i - 1] not in "<>=!"):
            out.append(cur)
            cur = ""
        else:
            cur += ch
        i += 1
    out.append(cur)
    return out


def parse_feature_table(tbl: dict, variables: list[str], constants: dict | None = None) -> tuple[dict, list]:
    """The ``[features]`` table of a problem file as engine keywords.

    Keys: ``breaks = { x = [0.3, 0.7] }``; ``cuts = ["x + y = 1.4", ...]``;
    ``singular = [{ point = [0, 0], power = -1 }, { plane = "x = 0", power = -0.5 }]``
    (``power`` optional).

    Returns
    -------
    (kwargs, errors)
        ``errors``: ``(key, message)`` pairs for the caller's one-line error.
    """
    out: dict = {}
    names = [_expr.normalise_name(v) for v in variables]
    d = len(variables)
    for key in tbl:
        if key not in ("breaks", "cuts", "singular"):
            return {}, [(key, "unknown key (allowed: breaks, cuts, singular)")]
    if "breaks" in tbl:
        b = tbl["breaks"]
        if not isinstance(b, dict):
            return {}, [("breaks", "must be a table of lists, like { x = [0.3, 0.7] }")]
        per = [[] for _ in range(d)]
        for name, vals in b.items():
            n = _expr.normalise_name(name)
            if n not in names:
                return {}, [("breaks", f"'{name}' is not a variable ({', '.join(variables)})")]
            vals = vals if isinstance(vals, list) else [vals]
            for v in vals:
                if not isinstance(v, (int, float)) or isinstance(v, bool) or not math.isfinite(float(v)):
                    return {}, [("breaks", f"values of {name} must be finite numbers, got {v!r}")]
                per[names.index(n)].append(float(v))
        out["breaks"] = per
    if "cuts" in tbl:
        c = tbl["cuts"]
        if not isinstance(c, list):
            return {}, [("cuts", 'must be a list of equations, like ["x + y = 1.4"]')]
        cuts = []
        for eq in c:
            try:
                cuts.append(list(parse_plane(eq, variables, constants)))
            except ValueError as exc:
                return {}, [("cuts", str(exc))]
        out["cuts"] = cuts
    if "singular" in tbl:
        s = tbl["singular"]
        if not isinstance(s, list):
            return {}, [("singular", "must be a list of tables like { point = [0, 0], power = -1 }")]
        sing = []
        for item in s:
            if not isinstance(item, dict):
                return {}, [("singular", f"entries must be tables like {{ point = [0, 0] }}, got {item!r}")]
            extra = set(item) - {"point", "plane", "power"}
            if extra:
                return {}, [("singular", f"unknown key(s) {', '.join(sorted(extra))} (allowed: point, plane, power)")]
            pw = item.get("power")
            if pw is not None and (not isinstance(pw, (int, float)) or isinstance(pw, bool)):
                return {}, [("singular", f"power must be a number, got {pw!r}")]
            if ("point" in item) == ("plane" in item):
                return {}, [("singular", "each entry needs either point = [...] or plane = \"...\"")]
            if "point" in item:
                p = item["point"]
                if not isinstance(p, list) or len(p) != d or not all(
                        isinstance(v, (int, float)) and not isinstance(v, bool) for v in p):
                    return {}, [("singular", f"point must be a list of {d} numbers, got {p!r}")]
                sing.append({"point": [float(v) for v in p], "power": None if pw is None else float(pw)})
            else:
                try:
                    g, off = parse_plane(item["plane"], variables, constants)
                except ValueError as exc:
                    return {}, [("singular", str(exc))]
                sing.append({"normal": g, "offset": off, "power": None if pw is None else float(pw)})
        out["singular"] = sing
    return out, []


#: Most combinations of scanned constants whose declared features :func:`scan_misfit` reads up front.
SCAN_CHECK_LIMIT = 10_000


def declared_misfit(table: dict, variables: list[str], constants: dict, domain) -> tuple[str | None, str] | None:
    """Why the declared ``[features]`` table, read with ``constants``, does not fit ``domain``: a
    ``(key, message)`` pair, or None when it fits.  The checks :func:`problem_features` makes at the
    file's own constants."""
    from cubage.engine.partition import FeatureError, needs_simplices, normalise
    declared, errors = parse_feature_table(dict(table), variables, constants)
    if errors:
        return errors[0]
    try:
        normalise(domain, **declared)
    except FeatureError as exc:
        return None, str(exc)
    if needs_simplices(domain, declared.get("cuts"), declared.get("singular")) and isinstance(domain, Box) \
            and not domain.bounded:
        return ("cuts" if declared.get("cuts") else "singular",
                "cut planes and slanted singular planes need a bounded box (infinite axes take break values only)")
    return None


def scan_misfit(table: dict, variables: list[str], constants: dict, grid, domain) -> tuple[str | None, str] | None:
    """The first point of a scan (issue 14) at which the declared ``[features]`` table does not fit the
    domain (:func:`declared_misfit` at that point's constants): ``(key, message)`` naming the point, or
    None.  Only the scanned constants the table's plane equations mention are varied (break values and
    singular points are numbers); beyond :data:`SCAN_CHECK_LIMIT` combinations of them nothing is
    checked here, and such a point ends ``failed`` with the same message when it runs."""
    import re
    text = repr([table.get("cuts"), table.get("singular")])
    names = [n for n in grid.names if re.search(rf"(?<![A-Za-z0-9_]){re.escape(n)}(?![A-Za-z0-9_])", text)]
    if not names:
        return None
    axes = [np.unique(np.asarray(grid.axes[grid.names.index(n)], float)) for n in names]
    if math.prod(len(a) for a in axes) > SCAN_CHECK_LIMIT:
        return None
    for values in itertools.product(*axes):
        point = dict(zip(names, (float(v) for v in values)))
        why = declared_misfit(table, variables, {**constants, **point}, domain)
        if why is not None:
            where = ", ".join(f"{n} = {v:.10g}" for n, v in point.items())
            return why[0], f"at scan point {where}: {why[1]} (declared features must fit every point of the scan)"
    return None


def merge(declared: dict, detected: dict) -> dict:
    """Declared and detected engine keywords together (the engine removes duplicates)."""
    out: dict = {}
    for k in ("breaks", "cuts", "singular"):
        a, b = declared.get(k), detected.get(k)
        if k == "breaks":
            if a or b:
                d = len(a or b)
                out[k] = [sorted(set((a or [[]] * d)[i]) | set((b or [[]] * d)[i])) for i in range(d)]
        elif a or b:
            out[k] = list(a or []) + [x for x in (b or []) if x not in (a or [])]
    return out


def problem_features(ctx, table: dict | None, method_table: dict, spec: dict, variables: list[str],
                     domain) -> tuple[dict, list[str], str]:
    """Declared plus detected features of a problem file, checked against its domain.

    Called once by :func:`cubage.problem.problem_file.parse_problem`.

    Parameters
    ----------
    ctx
        The parser's error context (``ctx.error(table, key, message)`` builds the one-line error).
    table : dict or None
        The ``[features]`` table.
    method_table : dict
        The ``[method]`` table (its ``align`` key: one of :data:`ALIGN_MODES`).
    spec : dict
        The integrand spec (expressions are analysed, Python code is not).
    variables : list of str
    domain : Box or Simplex

    Returns
    -------
    (kwargs, lines, align)
        Engine keywords, the lines ``cubage check`` prints, the alignment mode.
    """
    from cubage.engine.partition import FeatureError, needs_simplices, normalise
    align = method_table.get("align", "auto")
    if not isinstance(align, str) or align not in ALIGN_MODES:
        raise ctx.error("method", "align", f"must be one of {', '.join(ALIGN_MODES)}, got {align!r}")
    constants = spec.get("constants") or {}
    declared: dict = {}
    if table is not None:
        declared, errors = parse_feature_table(table, variables, constants)
        if errors:
            key, msg = errors[0]
            raise ctx.error("features", key, msg)
        try:
            normalise(domain, **declared)
        except FeatureError as exc:
            raise ctx.error("features", None, str(exc)) from None
        if needs_simplices(domain, declared.get("cuts"), declared.get("singular")) and isinstance(domain, Box) \
                and not domain.bounded:
            raise ctx.error("features", "cuts", "cut planes and slanted singular planes need a bounded box "
                                                "(infinite axes take break values only)")
    lines = []
    for k, v in declared.items():
        for item in v if k != "breaks" else [x for i, vals in enumerate(v) for x in [(i, vals)] if vals]:
            if k == "breaks":
                lines.append(f"break at {variables[item[0]]} = " + ", ".join(f"{x:.10g}" for x in item[1])
                             + "  (declared)")
            elif k == "cuts":
                lines.append(f"cut along {_plane_text(item[0], item[1], variables)}  (declared)")
            elif "point" in item:
                lines.append(f"singular point ({_pt(item['point'])}), power {_pw(item['power'])}  (declared)")
            else:
                lines.append(f"singular plane {_plane_text(item['normal'], item['offset'], variables)}, power "
                             f"{_pw(item['power'])}  (declared)")
    if align == "off":
        return {}, (["alignment off ([method] align = \"off\"): no features used"] if declared or lines else []), align
    detected: dict = {}
    if align == "auto" and spec.get("kind") == "expr":
        found = analyse(spec["source"], variables, constants)
        detected, det_lines = to_engine(found, domain)
        lines += [ln for _, ln in feature_report(detected, det_lines, variables)]
    return merge(declared, detected), lines, align
