"""Domain decomposition along declared features: break values, cut planes, singular sets.

An adaptive rule cannot resolve a jump or a kink that runs through the middle
of its regions, nor converge fast next to an integrable singularity.  Region
boundaries placed *on* the feature from the start fix both: on each piece the
integrand is smooth (or singular only at a face or vertex, where a map from
:mod:`cubage.engine.singular_maps` flattens it).

Features (engine form, JSON-ready; :func:`normalise` checks and canonicalises
what the user gave):

``breaks``
    One list of values per axis: the box is split into sub-boxes there.
``cuts``
    Planes ``a . x = b`` as ``[a, b]``; a cut parallel to an axis plane is a
    break value.
``singular``
    ``{"point": [...], "power": a}`` (the integrand behaves like ``|x - point|**a``)
    or ``{"normal": [...], "offset": b, "power": a}`` (like
    ``|a . x - b|**a``); ``power`` may be ``None`` (unknown; a safe default
    is used, see :func:`~cubage.engine.singular_maps.face_power` and
    :func:`~cubage.engine.singular_maps.point_power`).

Two ways to decompose, because one run integrates one kind of region:

* **sub-boxes** (box domains whose features are all axis-aligned): the box is
  cut at every break value and every coordinate of a singular point or axis
  plane into a grid of sub-boxes, all integrated with the box rule; graded
  axes get the per-axis endpoint map, composed with the map of infinite axes
  (:mod:`cubage.engine.transforms`).
* **simplices** (any other cut, a singular plane that is not axis-aligned, or
  a simplex domain): the domain is triangulated (a box into its ``d!`` Kuhn
  simplices — Kuhn 1960, "Some combinatorial lemmas in topology", IBM J. Res.
  Dev. 4; a box with singular points or break values first into sub-boxes,
  each triangulated from its corner at a singular point), every simplex
  crossed by a plane is cut into its two convex parts and each part
  triangulated directly (a pulling triangulation whose cut face is the
  staircase triangulation of a product of two simplices; checked against
  scipy.spatial's Qhull convex hulls in the tests); a singular point inside a
  simplex becomes a vertex by a star split.  The pieces are integrated with the simplex rule; pieces that touch a
  singular set get the radial (vertex) or per-face map.

The pieces, their maps and their number are deterministic functions of the
domain and the features, so a checkpoint only needs the features (they are
part of the run's settings and fingerprint).
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from cubage.engine import singular_maps as sm
from cubage.engine.domains import Box, DomainError, Simplex
from cubage.engine.geometry import BoxGeometry, SimplexGeometry
from cubage.engine.transforms import _BOTH_INF, _LOWER_INF, _UPPER_INF, AxisMap

#: Refuse initial partitions larger than this many pieces.
MAX_PIECES = 200_000

_TOL = 1e-12


class FeatureError(DomainError):
    """A declared feature that cannot be used (wrong shape, not integrable, unsupported domain)."""


# --------------------------------------------------------------------------
# normalisation
# --------------------------------------------------------------------------

def _floats(v, n, what) -> list[float]:
    try:
        a = np.asarray(v, dtype=float).reshape(-1)
    except (TypeError, ValueError):
        raise FeatureError(f"{what} must be a list of {n} numbers, got {v!r}") from None
    if a.size != n or not np.isfinite(a).all():
        raise FeatureError(f"{what} must be a list of {n} finite numbers, got {v!r}")
    return [float(x) for x in a]


def _power(v, what):
    if v is None:
        return None
    try:
        p = float(v)
    except (TypeError, ValueError):
        raise FeatureError(f"{what}: power must be a number, got {v!r}") from None
    if not math.isfinite(p):
        raise FeatureError(f"{what}: power must be finite, got {v!r}")
    return p


def normalise(domain, breaks=None, cuts=None, singular=None) -> tuple[list | None, list | None, list | None]:
    """Check features against ``domain`` and return their canonical engine form.

    Parameters
    ----------
    domain : Box or Simplex
    breaks : list of lists, or dict {axis index: list}, optional
    cuts : list of ``[normal, offset]`` (or ``{"normal": ..., "offset": ...}``), optional
    singular : list of dicts, optional

    Returns
    -------
    (breaks, cuts, singular)
        ``None`` for an absent feature kind; otherwise sorted, de-duplicated
        lists.  Axis-parallel cuts become break values.

    Raises
    ------
    FeatureError
    """
    d = domain.dim
    per_axis: list[set] = [set() for _ in range(d)]
    if breaks is not None:
        items = breaks.items() if isinstance(breaks, dict) else enumerate(breaks)
        for i, vals in items:
            if not isinstance(i, (int, np.integer)) or not 0 <= int(i) < d:
                raise FeatureError(f"breaks: axis {i!r} is not one of 0..{d - 1}")
            if vals is None:
                continue
            vals = [vals] if np.ndim(vals) == 0 else vals
            for x in _floats(vals, len(vals), f"breaks of axis {i}"):
                per_axis[int(i)].add(x)
    planes = []
    for c in cuts or []:
        if isinstance(c, dict):
            c = [c.get("normal"), c.get("offset")]
        if not isinstance(c, (list, tuple)) or len(c) != 2:
            raise FeatureError(f"a cut must be [normal, offset], got {c!r}")
        a = _floats(c[0], d, "cut normal")
        b = _floats([c[1]], 1, "cut offset")[0]
        na = max(abs(x) for x in a)
        if na == 0:
            raise FeatureError("a cut normal must not be zero")
        a, b = [x / na for x in a], b / na
        nz = [i for i, x in enumerate(a) if x != 0]
        if len(nz) == 1:
            per_axis[nz[0]].add(b / a[nz[0]])
        else:
            planes.append([a, b])
    sing = []
    for s in singular or []:
        if not isinstance(s, dict):
            raise FeatureError(f"a singular feature must be a table with 'point' or 'normal'/'offset', got {s!r}")
        unknown = set(s) - {"point", "normal", "offset", "power"}
        if unknown:
            raise FeatureError(f"singular: unknown key(s) {', '.join(sorted(unknown))} "
                               "(allowed: point, normal, offset, power)")
        if "point" in s:
            if "normal" in s or "offset" in s:
                raise FeatureError("singular: give either point or normal/offset, not both")
            pt = _floats(s["point"], d, "singular point")
            pw = _power(s.get("power"), "singular point")
            try:
                sm.point_power(pw, d)
            except ValueError as exc:
                raise FeatureError(str(exc)) from None
            sing.append({"point": pt, "power": pw})
        elif "normal" in s:
            if "offset" not in s:
                raise FeatureError("singular: a plane needs both normal and offset")
            a = _floats(s["normal"], d, "singular plane normal")
            b = _floats([s["offset"]], 1, "singular plane offset")[0]
            na = max(abs(x) for x in a)
            if na == 0:
                raise FeatureError("singular plane normal must not be zero")
            pw = _power(s.get("power"), "singular plane")
            try:
                sm.face_power(pw)
            except ValueError as exc:
                raise FeatureError(str(exc)) from None
            sing.append({"normal": [x / na for x in a], "offset": b / na, "power": pw})
        else:
            raise FeatureError("singular: needs 'point' or 'normal' and 'offset'")
    out_breaks = None
    if any(per_axis):
        out_breaks = [sorted(s) for s in per_axis]
    out_cuts = sorted(planes) if planes else None
    out_sing = sorted(sing, key=lambda s: repr(sorted(s.items()))) if sing else None
    return out_breaks, out_cuts, out_sing


def _axis_plane(s: dict) -> int | None:
    nz = [i for i, x in enumerate(s["normal"]) if x != 0]
    return nz[0] if len(nz) == 1 else None


def needs_simplices(domain, cuts, singular) -> bool:
    """True when the features force the simplex decomposition.

    A singular point in a bounded box does too: the radial map on the Kuhn
    simplices around it needs 3-20x fewer evaluations than per-axis maps on
    boxes (``benchmarks/features.py``).
    """
    if isinstance(domain, Simplex):
        return True
    if cuts:
        return True
    if domain.bounded and any("point" in s for s in singular or []):
        return True
    return any("normal" in s and _axis_plane(s) is None for s in singular or [])


# --------------------------------------------------------------------------
# sub-boxes
# --------------------------------------------------------------------------

def _to_engine(amap: AxisMap, i: int, x: float) -> float:
    """Inverse of the infinite-axis map of axis ``i`` (identity on finite axes)."""
    k = amap.kinds[i]
    L = float(amap.scale[i])
    if k == _UPPER_INF:
        u = x - amap.user_lower[i]
        return u / (L + u)
    if k == _LOWER_INF:
        u = amap.user_upper[i] - x
        return u / (L + u)
    if k == _BOTH_INF:
        return 0.0 if x == 0 else (-L + math.sqrt(L * L + 4 * x * x)) / (2 * x)
    return x


class GradedAxisMap:
    """Per-axis endpoint grading at some knots, composed with the infinite-axis map.

    Engine coordinate ``t`` -> graded ``t'`` (:func:`~cubage.engine.singular_maps.endpoint_map`
    on the interval of ``t``) -> user ``x`` (:class:`~cubage.engine.transforms.AxisMap`).

    Parameters
    ----------
    amap : AxisMap
    intervals : list of (starts, widths, powers, left) arrays per axis
    """

    def __init__(self, amap: AxisMap, intervals: list):
        self.amap = amap
        self.lower, self.upper = amap.lower, amap.upper
        self.identity = False
        self.intervals = intervals
        self._axes = [i for i, iv in enumerate(intervals) if (iv[2] != 1.0).any()]

    def _grade(self, t: np.ndarray, exact: bool = False) -> tuple[np.ndarray, np.ndarray]:
        tt = np.array(t, dtype=float, copy=True)
        jac = np.ones(t.shape[:-1])
        for i in self._axes:
            lo, h, p, left = self.intervals[i]
            ti = t[..., i]
            j = np.clip(np.searchsorted(lo, ti, side="right") - 1, 0, lo.size - 1)
            if exact:
                u = np.clip((ti - lo[j]) / h[j], 0.0, 1.0)
                w = np.where(left[j], u, 1.0 - u) ** p[j]
                tt[..., i] = np.where(left[j], lo[j] + h[j] * w, lo[j] + h[j] - h[j] * w)
            else:
                tt[..., i], dx = sm.endpoint_map(ti, lo[j], h[j], p[j], left[j])
                jac = jac * dx
        return tt, jac

    def to_user(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Engine points (n, d) -> user points and Jacobians."""
        tt, jac = self._grade(t)
        x, j2 = self.amap.to_user(tt)
        return x, (jac if j2 is None else jac * j2)

    def bounds_to_user(self, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Engine bounds -> user bounds (monotone maps)."""
        a, _ = self._grade(lo, exact=True)
        b, _ = self._grade(hi, exact=True)
        return self.amap.bounds_to_user(a, b)


class BoxPiecesGeometry(BoxGeometry):
    """Box regions starting from a grid of sub-boxes (break values), with optional graded axes."""

    def __init__(self, domain: Box, rule, split: str, breaks, singular):
        super().__init__(domain, rule, split)
        d = domain.dim
        amap = self.map
        knots = [dict() for _ in range(d)]          # engine knot -> grading power
        for i in range(d):
            for x in (breaks or [[]] * d)[i]:
                knots[i].setdefault(_to_engine(amap, i, x), 1.0)
        for s in singular or []:
            if "point" in s:         # (unbounded boxes only) a corner of the sub-boxes there, never a node
                a = s["power"]
                if d == 1:           # in 1-D a point is a face: the endpoint map fits exactly
                    p = sm.face_power(a)
                elif a is not None and a + d < 1:
                    # strong point singularities only: per-axis grading bounds them (degree p (a + d) - d at
                    # the corner) but costs more than plain bisection for milder ones (benchmarks/features.py)
                    p = float(math.ceil((d + 2.0) / (a + d)))
                else:
                    p = 1.0
                for i, x in enumerate(s["point"]):
                    t = _to_engine(amap, i, x)
                    knots[i][t] = max(knots[i].get(t, 1.0), p)
            else:
                i = _axis_plane(s)
                p = sm.face_power(s["power"])
                t = _to_engine(amap, i, s["offset"] / s["normal"][i])
                knots[i][t] = max(knots[i].get(t, 1.0), p)
        self.intervals = []
        self.grid = []
        for i in range(d):
            a, b = float(amap.lower[i]), float(amap.upper[i])
            width = b - a
            inner = {t: p for t, p in knots[i].items() if a + _TOL * width < t < b - _TOL * width}
            # knots on the boundary keep their grading
            pa = max([p for t, p in knots[i].items() if abs(t - a) <= _TOL * width] + [1.0])
            pb = max([p for t, p in knots[i].items() if abs(t - b) <= _TOL * width] + [1.0])
            pts = [(a, pa)] + sorted(inner.items()) + [(b, pb)]
            los, hs, ps, lefts = [], [], [], []
            for (t0, p0), (t1, p1) in zip(pts[:-1], pts[1:]):
                if p0 > 1 and p1 > 1:           # graded at both ends: split in the middle
                    m = 0.5 * (t0 + t1)
                    los += [t0, m]
                    hs += [m - t0, t1 - m]
                    ps += [p0, p1]
                    lefts += [True, False]
                else:
                    los.append(t0)
                    hs.append(t1 - t0)
                    ps.append(p0 if p0 > 1 else p1)
                    lefts.append(p0 > 1)
            self.intervals.append((np.array(los), np.array(hs), np.array(ps, dtype=float),
                                   np.array(lefts, dtype=bool)))
            self.grid.append(np.array(los + [b]))
        count = math.prod(len(g) - 1 for g in self.grid)
        if count > MAX_PIECES:
            raise FeatureError(f"the break values cut the box into {count:,} sub-boxes (at most {MAX_PIECES:,})")
        self.pieces = count
        if any((iv[2] != 1.0).any() for iv in self.intervals):
            self.map = GradedAxisMap(amap, self.intervals)

    def root(self) -> dict:
        lo = [g[:-1] for g in self.grid]
        hi = [g[1:] for g in self.grid]
        L = np.array(list(itertools.product(*lo)), dtype=float).reshape(-1, self.dim)
        H = np.array(list(itertools.product(*hi)), dtype=float).reshape(-1, self.dim)
        return {"centre": 0.5 * (L + H), "halfw": 0.5 * (H - L), "axis": np.zeros(len(L), np.int8)}


# --------------------------------------------------------------------------
# simplices
# --------------------------------------------------------------------------

def _volumes(v: np.ndarray) -> np.ndarray:
    d = v.shape[-1]
    return np.abs(np.linalg.det(v[:, 1:, :] - v[:, :1, :])) / math.factorial(d)


def kuhn_simplices(lower, upper, origin=None) -> np.ndarray:
    """The ``d!`` Kuhn simplices of a box, shape (d!, d+1, d); they share the diagonal from ``origin``.

    ``origin`` (a corner of the box, default ``lower``) is a vertex of every simplex.
    """
    lo, hi = np.asarray(lower, float), np.asarray(upper, float)
    start = lo.copy() if origin is None else np.asarray(origin, float).copy()
    end = np.where(start == lo, hi, lo)
    d = lo.size
    out = []
    for perm in itertools.permutations(range(d)):
        v = [start.copy()]
        for ax in perm:
            nxt = v[-1].copy()
            nxt[ax] = end[ax]
            v.append(nxt)
        out.append(np.array(v))
    return np.array(out)


def _box_simplices(domain: Box, breaks, singular) -> list[np.ndarray]:
    """Kuhn simplices of the sub-boxes cut at the break values and singular points/axis planes.

    Each sub-box with a singular point at a corner is triangulated from that
    corner, so the point is a vertex of all its simplices.
    """
    d = domain.dim
    cuts = [set() for _ in range(d)]
    for i, vals in enumerate(breaks or []):
        cuts[i].update(vals)
    points = [np.asarray(s["point"], float) for s in singular or [] if "point" in s]
    for p in points:
        for i in range(d):
            cuts[i].add(float(p[i]))
    for s in singular or []:
        if "normal" in s and _axis_plane(s) is not None:
            i = _axis_plane(s)
            cuts[i].add(s["offset"] / s["normal"][i])
    grid = []
    for i in range(d):
        a, b = float(domain.lower[i]), float(domain.upper[i])
        w = b - a
        inner = sorted(x for x in cuts[i] if a + _TOL * w < x < b - _TOL * w)
        grid.append(np.array([a, *inner, b]))
    count = math.prod(len(g) - 1 for g in grid) * math.factorial(d)
    if count > MAX_PIECES:
        raise FeatureError(f"the features cut the box into {count:,} simplices (at most {MAX_PIECES:,})")
    out = []
    for idx in itertools.product(*[range(len(g) - 1) for g in grid]):
        lo = np.array([grid[i][j] for i, j in enumerate(idx)])
        hi = np.array([grid[i][j + 1] for i, j in enumerate(idx)])
        origin = None
        for p in points:
            at_lo, at_hi = np.isclose(p, lo, rtol=0, atol=1e-13), np.isclose(p, hi, rtol=0, atol=1e-13)
            if np.all(at_lo | at_hi):
                origin = np.where(at_lo, lo, hi)
                break
        out.extend(kuhn_simplices(lo, hi, origin))
    return out


def _staircases(A: int, B: int) -> list[list[tuple[int, int]]]:
    """Monotone lattice paths from (0, 0) to (A-1, B-1): the simplices of the staircase
    triangulation of the product of simplices Delta_{A-1} x Delta_{B-1} (common practice)."""
    out = []
    for downs in itertools.combinations(range(A + B - 2), A - 1):
        i = j = 0
        path = [(0, 0)]
        for step in range(A + B - 2):
            if step in downs:
                i += 1
            else:
                j += 1
            path.append((i, j))
        out.append(path)
    return out


def _side_recipes(neg: tuple, zero: tuple, pos: tuple) -> list[list[tuple[int, int]]]:
    """Simplices of the part of a simplex where the signed distance ``s`` <= 0, as recipes.

    Each simplex is a list of ``(i, j)``: vertex ``i`` when ``j < 0``, else the
    crossing point of edge (i, j), ``v_i + s_i/(s_i - s_j) (v_j - v_i)``.
    Pulling triangulation from the vertices ``neg`` in order: the k-th cone
    joins ``neg[:k+1]`` and the on-plane vertices ``zero`` with a staircase
    simplex of the crossing points between ``neg[k:]`` and ``pos``.
    """
    out = []
    for k in range(len(neg)):
        rest = neg[k:]
        for path in _staircases(len(rest), len(pos)):
            out.append([(i, -1) for i in neg[:k + 1]] + [(i, -1) for i in zero] +
                       [(rest[a], pos[b]) for a, b in path])
    return out


def cut_simplices(simplices, normal, offset) -> list[np.ndarray]:
    """Cut every simplex crossed by the plane ``normal . x = offset`` into simplices on either side.

    The part of a simplex on one side of a plane is triangulated directly (see
    :func:`_side_recipes`), vectorised over simplices with the same sign pattern;
    flat children are dropped and every cut is checked to keep the parents' volume.
    """
    a = np.asarray(normal, float)
    V = np.asarray(simplices, dtype=float)
    if V.size == 0:
        return []
    S = V @ a - offset                                              # (k, d+1)
    scale = np.abs(V).max(axis=(1, 2)) * np.abs(a).sum() + abs(offset) + 1e-300
    S = np.where(np.abs(S) <= 1e-12 * scale[:, None], 0.0, S)
    sign = np.sign(S).astype(np.int8)
    crossed = (sign < 0).any(axis=1) & (sign > 0).any(axis=1)
    out = list(V[~crossed])
    if not crossed.any():
        return out
    Vc, Sc, sg = V[crossed], S[crossed], sign[crossed]
    patterns, inverse = np.unique(sg, axis=0, return_inverse=True)
    pieces = []
    for p_idx, pat in enumerate(patterns):
        rows = np.nonzero(inverse.reshape(-1) == p_idx)[0]
        v, s_ = Vc[rows], Sc[rows]
        neg = tuple(int(i) for i in np.nonzero(pat < 0)[0])
        pos = tuple(int(i) for i in np.nonzero(pat > 0)[0])
        zero = tuple(int(i) for i in np.nonzero(pat == 0)[0])
        for recipe in _side_recipes(neg, zero, pos) + _side_recipes(pos, zero, neg):
            pts = []
            for i, j in recipe:
                if j < 0:
                    pts.append(v[:, i])
                else:
                    t = s_[:, i] / (s_[:, i] - s_[:, j])
                    pts.append(v[:, i] + t[:, None] * (v[:, j] - v[:, i]))
            pieces.append((rows, np.stack(pts, axis=1)))
    vol = _volumes(Vc)
    got = np.zeros(len(Vc))
    kept = []
    for rows, kids in pieces:
        kv = _volumes(kids)
        keep = kv > 1e-14 * vol[rows]
        np.add.at(got, rows[keep], kv[keep])
        kept.append(kids[keep])
    if np.any(np.abs(got - vol) > 1e-10 * vol):
        raise FeatureError("a cut plane could not be triangulated exactly (volume lost)")
    return out + list(np.concatenate(kept))


def star_split(simplices: list[np.ndarray], point) -> list[np.ndarray]:
    """Make ``point`` a vertex of every simplex that contains it (star split; flat children dropped)."""
    p = np.asarray(point, float)
    out = []
    for v in simplices:
        lam = sm.barycentric(p[None], v[None])[0]
        tol = 1e-12
        if (lam < -tol).any() or (np.abs(v - p).max(axis=1) <= 1e-13 * (1 + np.abs(p).max())).any():
            out.append(v)
            continue
        vol = _volumes(v[None])[0]
        for j in range(len(v)):
            if lam[j] <= tol:
                continue                           # the point lies on the face opposite j: child is flat
            w = v.copy()
            w[j] = p
            if _volumes(w[None])[0] > 1e-14 * vol:
                out.append(w)
    return out


class SimplexPiecesGeometry(SimplexGeometry):
    """Simplex regions starting from a decomposition of the domain, with per-piece singular maps.

    Extra column ``piece`` (int32): index of the initial piece a region
    descends from; the maps of :mod:`cubage.engine.singular_maps` are defined
    on the whole piece.
    """

    def __init__(self, domain, rule, split: str, breaks, cuts, singular):
        if split != "bisect":
            raise ValueError(f"simplices are split by longest-edge bisection only (split='bisect'), got {split!r}")
        self.domain = domain
        self.rule = rule
        self.dim = d = domain.dim
        self.columns = {"verts": ((d + 1, d), np.float64), "vol": ((), np.float64), "piece": ((), np.int32)}
        self.map = None
        self._pairs = np.array([(i, j) for i in range(d + 1) for j in range(i + 1, d + 1)])
        if isinstance(domain, Box):
            if not domain.bounded:
                raise FeatureError("cut planes and non-axis singular planes need a bounded box "
                                   "(infinite axes take break values only)")
            simp = _box_simplices(domain, breaks, singular)
            total = domain.volume()
        else:
            simp = [np.array(domain.vertices, dtype=float)]
            total = domain.volume()
        planes = [(c[0], c[1]) for c in cuts or []]
        if not isinstance(domain, Box):          # on boxes the axis planes are the sub-box grid
            for i, vals in enumerate(breaks or []):
                for x in vals:
                    n = [0.0] * d
                    n[i] = 1.0
                    planes.append((n, x))
        planes += [(s["normal"], s["offset"]) for s in singular or []
                   if "normal" in s and not (isinstance(domain, Box) and _axis_plane(s) is not None)]
        for n, b in planes:
            simp = cut_simplices(simp, n, b)
            if len(simp) > MAX_PIECES:
                raise FeatureError(f"the cut planes cut the domain into more than {MAX_PIECES:,} simplices")
        for s in singular or []:
            if "point" in s:
                simp = star_split(simp, s["point"])
        if len(simp) > MAX_PIECES:
            raise FeatureError(f"the features cut the domain into {len(simp):,} simplices (at most {MAX_PIECES:,})")
        V = np.array(simp)
        vol = _volumes(V)
        if abs(vol.sum() - total) > 1e-9 * total:
            raise FeatureError(f"decomposition lost volume ({vol.sum():.17g} of {total:.17g})")
        self.pverts = V
        self.pvol = vol
        self.pieces = len(V)
        k = len(V)
        self.radial_vertex = np.full(k, -1, np.int64)
        self.radial_power = np.ones(k)
        self.face_powers = np.ones((k, d + 1))
        scale = np.abs(V).max() + 1.0
        for s in singular or []:
            if "point" in s:
                p = sm.point_power(s["power"], d)
                hit = np.abs(V - np.asarray(s["point"])).max(axis=2) <= 1e-12 * scale     # (k, d+1)
                rows, cols = np.nonzero(hit)
                better = p > self.radial_power[rows]
                self.radial_vertex[rows[better]] = cols[better]
                self.radial_power[rows[better]] = p
            else:
                p = sm.face_power(s["power"])
                a = np.asarray(s["normal"])
                dist = V @ a - s["offset"]                                                # (k, d+1)
                on = np.abs(dist) <= 1e-12 * scale
                touch = on.any(axis=1)
                grade = touch[:, None] & ~on
                self.face_powers = np.where(grade, np.maximum(self.face_powers, p), self.face_powers)
        self.mapped = (self.radial_vertex >= 0) | (self.face_powers != 1.0).any(axis=1)
        # per mapped piece: inverse edge matrix (lam[1:] = pinv @ (x - v0)) and the faces map's floors
        self.pinv = np.zeros((k, d, d))
        self.face_floor = np.ones((k, d + 1))
        m = np.nonzero(self.mapped)[0]
        if m.size:
            e = V[m, 1:, :] - V[m, :1, :]
            self.pinv[m] = np.linalg.inv(np.transpose(e, (0, 2, 1)))
            self.face_floor[m] = sm.face_floors(V[m])

    def points(self, g: dict) -> np.ndarray:
        """Nodes ``bary @ V`` of the regions, one batched matrix product (faster than einsum for many simplices)."""
        return np.matmul(self.rule.bary[None], g["verts"]).reshape(-1, self.dim)

    def root(self) -> dict:
        return {"verts": self.pverts.copy(), "vol": self.pvol.copy(), "piece": np.arange(self.pieces, dtype=np.int32)}

    def split(self, g: dict) -> dict:
        kids = super().split(g)
        kids["piece"] = np.concatenate([g["piece"], g["piece"]])
        return kids

    def to_user(self, g: dict, t: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Engine points of regions ``g`` -> user points and Jacobians of the pieces' maps."""
        if not self.mapped.any():
            return t, None
        piece = np.repeat(g["piece"], self.rule.size)
        sel = np.nonzero(self.mapped[piece])[0]
        if sel.size == 0:
            return t, None
        x = t.copy()
        jac = np.ones(t.shape[0])
        pc = piece[sel]
        V = self.pverts[pc]
        xs = t[sel]
        lam1 = np.einsum("nij,nj->ni", self.pinv[pc], xs - V[:, 0, :])
        lam = np.concatenate([1.0 - lam1.sum(axis=1, keepdims=True), lam1], axis=1)
        js = np.ones(sel.size)
        rv = self.radial_vertex[pc]
        r = rv >= 0
        if r.any():
            y, jr = sm.radial_map(xs[r], V[r], rv[r], self.radial_power[pc[r]], lam[r])
            xs[r] = y
            js[r] *= jr
            lam1 = np.einsum("nij,nj->ni", self.pinv[pc[r]], y - V[r, 0, :])
            lam[r] = np.concatenate([1.0 - lam1.sum(axis=1, keepdims=True), lam1], axis=1)
        fp = self.face_powers[pc]
        f = (fp != 1.0).any(axis=1)
        if f.any():
            y, jf = sm.faces_map(xs[f], V[f], fp[f], lam[f], self.face_floor[pc[f]])
            xs[f] = y
            js[f] *= jf
        x[sel] = xs
        jac[sel] = js
        return x, jac

    def map_extent(self) -> tuple[np.ndarray, np.ndarray]:
        if isinstance(self.domain, Box):
            return self.domain.lower.copy(), self.domain.upper.copy()
        return super().map_extent()


# --------------------------------------------------------------------------
# entry point for the engine
# --------------------------------------------------------------------------

def make_geometry(domain, settings, box_rule, simplex_rule, default_rule):
    """Geometry and rule name for a run with features (``None`` when there are none).

    Normalises ``settings.breaks``, ``settings.cuts`` and ``settings.singular``
    in place (so the checkpoint holds the canonical form).
    """
    if not (settings.breaks or settings.cuts or settings.singular):
        return None
    br, cu, si = normalise(domain, settings.breaks, settings.cuts, settings.singular)
    settings.breaks, settings.cuts, settings.singular = br, cu, si
    if not (br or cu or si):
        return None
    d = domain.dim
    if needs_simplices(domain, cu, si):
        name = settings.rule
        if name is None or name not in ("grundmann-moller",):
            name = default_rule("simplex", d)
        rule = simplex_rule(name, d, settings.degree)
        return SimplexPiecesGeometry(domain, rule, settings.split, br, cu, si), name
    name = settings.rule or default_rule("box", d)
    rule = box_rule(name, d)
    return BoxPiecesGeometry(domain, rule, settings.split, br, si), name


def describe(geometry) -> str:
    """One line on the decomposition of a run's geometry (for summaries and ``cubage check``)."""
    if isinstance(geometry, SimplexPiecesGeometry):
        n = int(geometry.mapped.sum())
        txt = f"{geometry.pieces} simplices"
        if n:
            txt += f", {n} of them with a singular map"
        return txt
    if isinstance(geometry, BoxPiecesGeometry):
        txt = f"{geometry.pieces} sub-box" + ("es" if geometry.pieces != 1 else "")
        if isinstance(geometry.map, GradedAxisMap):
            txt += ", graded axes " + ", ".join(str(i) for i in geometry.map._axes)
        return txt
    return "one region (no features)"


def describe_features(domain, features: dict, degree: int | None = None, rule: str | None = None) -> str:
    """Build the decomposition for ``features`` (engine keywords) and describe it in one line.

    Raises
    ------
    FeatureError
    """
    from types import SimpleNamespace

    from cubage.engine.rules import box_rule, default_rule, simplex_rule
    s = SimpleNamespace(breaks=features.get("breaks"), cuts=features.get("cuts"),
                        singular=features.get("singular"), rule=rule, degree=degree or 7, split="bisect")
    made = make_geometry(domain, s, box_rule, simplex_rule, default_rule)
    if made is None:
        return "one region (no features)"
    geometry, name = made
    return f"{describe(geometry)}, rule {name}"
