"""The globally adaptive engine.

One loop, over arrays:

1. take the regions with the largest error estimates from the global queue
   (:class:`_Queue`), as many as the batch policy allows;
2. split them (:mod:`cubage.engine.geometry`);
3. evaluate the integrand at all children's nodes in one vectorised call (or a
   few, through an evaluator — see :mod:`cubage.engine.parallel`);
4. apply the rule's weight vectors, estimate each child's error
   (:mod:`cubage.engine.estimate`), write the children back (parent's row reused,
   the rest appended) and update the running totals;
5. stop when the total error meets the goal, the budget or the clock runs out,
   or somebody asked the run to stop.

A :class:`Run` is the steppable object; :func:`integrate` is the one-call form.
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import numpy as np

from cubage.engine import estimate as _estimate
from cubage.engine.abandon import AbandonableCaller, Abandoned, CallFailed
from cubage.engine.domains import Box, DomainError, Simplex
from cubage.engine.flags import (
    _NON_SMOOTH,
    _SIGNATURES,
    FLAG_AUDITED,
    FLAG_DISAGREED,
    FLAG_LOWER_CLOSER,
    FLAG_NON_ASYMPTOTIC,
    FLAG_PROBE,
    FLAG_PROBED,
    FLAG_WARY,
    FLAG_WATCH,
)
from cubage.engine.geometry import BoxGeometry, SimplexGeometry, has_probes, vertex_signs
from cubage.engine.probes import SHIFT_MAX, Probes
from cubage.engine.regions import RegionStore
from cubage.engine.rule_errors import RuleErrors
from cubage.engine.rules import box_rule, default_rule, simplex_rule
from cubage.engine.singular import Singularities
from cubage.engine.split_checks import SplitChecks
from cubage.engine.statuses import STATUSES as STATUSES  # re-exported: cubage.STATUSES

DEFAULT_BUDGET = 50_000_000
#: Seconds an integrand call in progress may still take after a stop request or the time limit.
STOP_GRACE_SECONDS = 2.0


#: Audit before claiming convergence: split the regions holding this share of sum |value| ...
AUDIT_VALUE_SHARE = 0.5
#: ... but at most this fraction of the evaluations so far (and at least AUDIT_MIN regions, besides the region
#: with the largest error estimate).  On small runs the minimum sets the sample: 2 there cost the smooth Genz
#: families at 1e-4 +3.9 % evaluations against 1 on the tuning seeds 7, 8 and 9 (480 runs, the same none
#: held-back or silent; C0 and discontinuous, 1200 runs, and the published cases unchanged in held and silent)
AUDIT_COST = 0.05
AUDIT_MIN = 1
#: hidden error (extrapolated from the audit's sample) below this fraction of the goal passes the audit
AUDIT_SMALL = 0.25
#: the largest-error region is split beside the value sample (:meth:`Run._audit`) where its estimate holds at least
#: this share of the total error, or it carries a non-smooth signature or a watch: a coarse smooth region's
#: estimate was measured up to 3.5x short, and (4 - 1) x 0.3 of a total within the goal keeps the true error within
#: twice the goal.  Smooth Genz families at 1e-4, d = 3..6, tuning seeds 7, 8, 9, 10 draws (360 runs): 223 audits
#: split it beside the value sample, one of them measured more than its estimate (3.25x, at share 0.37); 162 of those
#: splits are spared (1.136x -> 1.118x the first release's evaluations; all 360 within their reported error)
AUDIT_TOP_SHARE = 0.3
#: failed audits that each double the next sample (at most 2^AUDIT_GROWTH times AUDIT_COST)
AUDIT_GROWTH = 1
#: boxes holding a domain vertex, each half the size of the last, that Run._domain_corners may check in turn
CORNER_LEVELS = 6
#: ... a check read with the one at the level above bounds a jump at the vertex by the two deviations, assuming a
#: smooth residual that shrinks at least this much per halving (:meth:`Run._domain_corners`)
CORNER_DECAY = 4.0
#: ... and a deviation that shrank less than this many times from the level above under every smooth model is a
#: jump's when it matters to the goal (a jump at the vertex keeps its size at every level)
CORNER_STEADY = 2.0
#: the audit adds the wide neighbours of a feature's lineage (:meth:`Run._straddlers`): boxes at least this many
#: times wider along an axis than a box of that lineage whose extent there they hold
STRADDLE_RATIO = 8.0
#: at most this many such boxes per audit, and read from at most this many boxes of the lineage (largest errors)
STRADDLE_MAX = 8
STRADDLE_FEATURES = 64
#: The 2-D audit first measures each sampled tensor Gauss-Kronrod box's missed error on a Fibonacci lattice of
#: this many points (a prime Fibonacci number; :meth:`Run._audit_check`); 0: always the full split into four boxes
AUDIT_LATTICE = 233
#: ... whose estimate counts this many times (a feature that spans few lattice points is measured only roughly)
AUDIT_LATTICE_MARGIN = 2.0
#: ... after a failed check, the lattice points whose residual is at least this share of the box's largest carry
#: what the split that follows did not measure (Run._lattice_hidden)
LATTICE_HIT_SHARE = 0.1
#: ... and are dropped once the splits inside the box have measured all but this share of it
LATTICE_HIT_LEFT = 0.05
#: ... or, each, once its box is this many times smaller than the lattice's box (the node lines of a tensor
#: Gauss-Kronrod box, at most 0.104 of its width apart, are then as close as the lattice's 233 coordinates)
LATTICE_HIT_FINE = 24.0
#: ... and when all its points are gone with more left, the audit checks the largest boxes inside it again, at most
#: this many
LATTICE_ORPHAN_BOXES = 8
#: the node values of at most this many live regions are kept for that check (Run._cache_nodes)
NODE_CACHE_REGIONS = 64
#: Warm start (scans): share of the audit sample taken when the start partition passed its own audit at the
#: neighbouring constants and neither run shows a non-smooth signature (:meth:`Run._warm_audit_share`).
#: Chosen on benchmarks/scan.py's smooth scan (warm/cold 0.517 with 1, 0.491 with 0.5, 0.476 with 0.25,
#: every point within its error of the closed form in each case); 0.5 keeps the top half of the sample.
WARM_AUDIT_SHARE = 0.5


@functools.lru_cache(maxsize=1)
def default_memory_ceiling() -> int:
    """Half of this machine's physical memory (bytes), or 4 GiB when it cannot be read."""
    import os
    try:
        total = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        total = 0
    return int(total // 2) if total > 0 else 4 << 30


_SIZE_UNITS = {"": 1, "b": 1, "k": 1 << 10, "kb": 1 << 10, "kib": 1 << 10, "m": 1 << 20, "mb": 1 << 20,
               "mib": 1 << 20, "g": 1 << 30, "gb": 1 << 30, "gib": 1 << 30, "t": 1 << 40, "tb": 1 << 40,
               "tib": 1 << 40}


def parse_memory_size(value) -> int:
    """Bytes from ``value``: a positive whole number of bytes, or text like ``"800M"``, ``"4 GB"``, ``"1.5G"``.

    Units are powers of 1024 (``K``, ``M``, ``G``, ``T``, optionally followed
    by ``B`` or ``iB``).  Raises ValueError (one line) for anything else.
    """
    if isinstance(value, bool):
        raise ValueError(f"must be a size like \"4G\" or a number of bytes, got {value!r}")
    if isinstance(value, (int, np.integer)):
        n = int(value)
    elif isinstance(value, float) and math.isfinite(value) and value == int(value):
        n = int(value)
    elif isinstance(value, str):
        text = value.strip().lower().replace("_", "")
        num = text.rstrip("kmgtib ")
        unit = text[len(num):].strip()
        if unit not in _SIZE_UNITS or not num:
            raise ValueError(f"must be a size like \"4G\", \"800M\" or a number of bytes, got {value!r}")
        try:
            x = float(num)
        except ValueError:
            raise ValueError(f"must be a size like \"4G\", \"800M\" or a number of bytes, got {value!r}") from None
        if not (math.isfinite(x) and x > 0):
            raise ValueError(f"must be a positive size, got {value!r}")
        n = int(x * _SIZE_UNITS[unit])
    else:
        raise ValueError(f"must be a size like \"4G\" or a number of bytes, got {value!r}")
    if n < (1 << 20):
        raise ValueError(f"must be at least 1M (1048576 bytes), got {value!r}")
    return n


class IntegrandError(RuntimeError):
    """The integrand raised, returned the wrong shape, or returned NaN/inf."""


@dataclass
class Settings:
    """Everything that steers a run (besides the integrand and the domain).

    Attributes
    ----------
    rel_tol, abs_tol : float
        Goal: total error estimate <= max(abs_tol, rel_tol * |value|), for
        every component.
    budget : int
        Budget of integrand evaluations.
    time_limit : float or None
        Seconds of wall time (summed over resumes).
    rule : str or None
        Rule family; None picks :func:`cubage.engine.rules.default_rule`.
    degree : int
        Degree of the simplex rule (odd >= 3).
    split : {"bisect", "all"}
        Bisect along the axis the rule chooses, or split every axis at once.
    queue : {"global", "local"}
        ``"global"``: one priority queue over all regions (the default).
        ``"local"``: the classical recursive scheme, each child inheriting
        its parent's tolerance divided by the number of children; a region
        meeting its own tolerance is never split again.
    batch : "auto" or int
        ``"auto"``: the documented policy of :meth:`Run._choose`; an integer
        fixes the number of regions split per step (1 = strictly one).
    estimate : {"sharp", "plain"}
        Region error estimate, see :mod:`cubage.engine.estimate`.
    max_regions : int or None
        Stop with ``"region-limit"`` rather than grow beyond this.
    batch_points : int
        Target number of integrand points per step for ``batch="auto"``.
    breaks, cuts, singular : optional
        Declared features: region boundaries placed on them from the start
        and maps flattening singularities (see :mod:`cubage.engine.partition`).
        ``breaks``: one list of values per axis (or ``{axis: [values]}``);
        ``cuts``: planes ``[normal, offset]``; ``singular``: tables
        ``{"point": [...], "power": a}`` or ``{"normal": [...], "offset": b, "power": a}``.
    audit : bool
        Audit the partition before claiming convergence (see
        :meth:`Run._audit`); False only for studies of the estimate itself.
    memory_ceiling : int or None
        Bytes the run's own arrays may take (``None``: half the machine's
        physical memory, :func:`default_memory_ceiling`).  The run stops
        with ``"memory-ceiling"`` before a step would go beyond it, keeping
        its estimate (see :meth:`Run.memory_needed`).
    """

    rel_tol: float = 1e-6
    abs_tol: float = 0.0
    budget: int = DEFAULT_BUDGET
    time_limit: float | None = None
    rule: str | None = None
    degree: int = 7
    split: str = "bisect"
    queue: str = "global"
    batch: str | int = "auto"
    estimate: str = "sharp"
    max_regions: int | None = None
    batch_points: int = 131072
    breaks: list | dict | None = None
    cuts: list | None = None
    singular: list | None = None
    audit: bool = True
    memory_ceiling: int | None = None

    def validate(self) -> None:
        if not (self.rel_tol >= 0 and self.abs_tol >= 0) or math.isnan(self.rel_tol) or math.isnan(self.abs_tol):
            raise ValueError("rel_tol and abs_tol must be non-negative numbers")
        if self.rel_tol == 0 and self.abs_tol == 0:
            raise ValueError("rel_tol and abs_tol cannot both be zero")
        if int(self.budget) <= 0:
            raise ValueError("budget must be a positive integer")
        if self.time_limit is not None and not self.time_limit > 0:
            raise ValueError("time_limit must be positive (seconds)")
        if self.queue not in ("global", "local"):
            raise ValueError(f"queue policy must be 'global' or 'local', got {self.queue!r}")
        if self.batch != "auto" and not (isinstance(self.batch, int) and self.batch >= 1):
            raise ValueError(f"batch must be 'auto' or a positive integer, got {self.batch!r}")
        if self.memory_ceiling is not None:
            try:
                self.memory_ceiling = parse_memory_size(self.memory_ceiling)
            except ValueError as exc:
                raise ValueError(f"memory_ceiling {exc}") from None

    def shape_key(self) -> dict:
        """The settings that decide the sequence of regions (part of the fingerprint)."""
        key = {"rule": self.rule, "degree": self.degree, "split": self.split, "queue": self.queue,
               "batch": self.batch, "estimate": self.estimate, "batch_points": self.batch_points}
        key.update({k: v for k, v in (("breaks", self.breaks), ("cuts", self.cuts), ("singular", self.singular))
                    if v is not None})
        if not self.audit:   # only when switched off, so fingerprints of default runs are unchanged
            key["audit"] = False
        return key


@dataclass(frozen=True)
class TopRegion:
    """One of the regions with the largest error, in the user's coordinates."""

    lower: np.ndarray
    upper: np.ndarray
    value: np.ndarray
    error: np.ndarray
    depth: int
    vertices: np.ndarray | None = None


@dataclass(frozen=True)
class Snapshot:
    """What an observer sees of a run at one moment.

    ``map_centres``/``map_sizes`` are a deterministic down-sample of region
    centres and full widths in the engine's finite coordinates (unbounded axes
    appear mapped onto [0, 1] or [-1, 1], see :mod:`cubage.engine.transforms`);
    ``map_lower``/``map_upper`` give that frame.  ``depth_error[k]`` is the
    error mass (priority-key units) of regions ``k`` splits deep.
    ``history`` has columns (evaluations, regions, value_0..m-1, error_0..m-1).
    """

    step: int
    evaluations: int
    value: np.ndarray
    error: np.ndarray
    goal: np.ndarray
    regions: int
    elapsed: float
    status: str
    rate: float
    top: tuple[TopRegion, ...]
    depth_error: np.ndarray
    map_centres: np.ndarray
    map_sizes: np.ndarray
    map_lower: np.ndarray
    map_upper: np.ndarray
    history: np.ndarray
    message: str = ""
    rel_tol: float = 0.0
    abs_tol: float = 0.0
    budget: int = 0

    @property
    def components(self) -> int:
        return int(self.value.shape[0])


@dataclass
class Result:
    """The outcome of a run.

    ``value``/``error`` are floats for a scalar integrand and arrays of shape
    (m,) for an m-component one; ``values``/``errors`` are always arrays.
    The error is a heuristic estimate, not a guaranteed bound.

    ``trust`` says how far to trust it (a JSON-ready dict, see
    :meth:`Run.trust`): whether the partition passed its audit, how often a
    split's children disagreed with their parent beyond its estimate, how
    much of the error sits in regions with a non-smooth or non-asymptotic
    signature, and the bounds of the worst such regions.
    """

    value: float | np.ndarray
    error: float | np.ndarray
    evaluations: int
    regions: int
    status: str
    seconds: float
    steps: int
    rule: str
    message: str = ""
    values: np.ndarray = field(default_factory=lambda: np.zeros(0))
    errors: np.ndarray = field(default_factory=lambda: np.zeros(0))
    trust: dict = field(default_factory=dict)

    @property
    def converged(self) -> bool:
        return self.status == "converged"

    def to_json(self) -> dict:
        """A JSON-ready dict (lists for vector integrands)."""
        def num(v):
            if isinstance(v, np.ndarray):
                return [float(x) for x in v]
            return float(v)
        return {"value": num(self.value), "error": num(self.error), "evaluations": int(self.evaluations),
                "regions": int(self.regions), "status": self.status, "seconds": round(float(self.seconds), 6),
                "steps": int(self.steps), "rule": self.rule, "message": self.message, "trust": self.trust}


class _Queue:
    """Exact max-priority selection over the region keys without one object per region.

    ``cand`` holds, sorted by ascending key, every live region whose key is
    ``>= thr``; every region outside it has a key ``< thr``.  The top of
    ``cand`` is thus the global maximum.  When fewer than the wanted number
    remain, ``cand`` is rebuilt from all keys with one ``argpartition``
    (O(n), rare).  Insertions are one ``searchsorted`` + ``insert`` per step.
    The whole structure is part of a checkpoint, so ties resolve identically
    after a resume.
    """

    SIZE = 1 << 14

    def __init__(self):
        self.idx = np.zeros(0, np.int64)
        self.key = np.zeros(0, np.float64)
        self.thr = math.inf

    def rebuild(self, keys: np.ndarray, want: int) -> None:
        live = np.nonzero(keys > -np.inf)[0]
        m = min(live.size, max(self.SIZE, 4 * want))
        if m == 0:
            self.idx = np.zeros(0, np.int64)
            self.key = np.zeros(0)
            self.thr = -np.inf
            return
        lk = keys[live]
        if m < live.size:
            thr = np.partition(lk, live.size - m)[live.size - m]
            sel = live[lk >= thr]
        else:
            thr = -np.inf
            sel = live
        order = np.argsort(keys[sel], kind="stable")
        self.idx = sel[order].astype(np.int64)
        self.key = keys[self.idx]
        self.thr = float(thr)

    def top(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        """The ``k`` largest (descending), without removing them."""
        k = min(k, self.idx.size)
        return self.idx[::-1][:k], self.key[::-1][:k]

    def pop(self, k: int) -> None:
        if k:
            self.idx = self.idx[: self.idx.size - k]
            self.key = self.key[: self.key.size - k]

    def push(self, idx: np.ndarray, key: np.ndarray) -> None:
        keep = (key >= self.thr) & (key > -np.inf)     # retired regions (key -inf) never re-enter
        if not keep.any():
            return
        idx, key = idx[keep], key[keep]
        order = np.argsort(key, kind="stable")
        idx, key = idx[order], key[order]
        pos = np.searchsorted(self.key, key, side="right")
        self.idx = np.insert(self.idx, pos, idx)
        self.key = np.insert(self.key, pos, key)


def _make_geometry(domain, settings: Settings):
    if settings.breaks or settings.cuts or settings.singular:   # features: an initial partition
        from cubage.engine.partition import make_geometry
        made = make_geometry(domain, settings, box_rule, simplex_rule, default_rule)
        if made is not None:
            return made
    if isinstance(domain, Box):
        name = settings.rule or default_rule("box", domain.dim)
        rule = box_rule(name, domain.dim)
        return BoxGeometry(domain, rule, settings.split), name
    if isinstance(domain, Simplex):
        name = settings.rule or default_rule("simplex", domain.dim)
        rule = simplex_rule(name, domain.dim, settings.degree)
        return SimplexGeometry(domain, rule, settings.split), name
    raise DomainError(f"domain must be a cubage.Box or cubage.Simplex, got {type(domain).__name__}")


@functools.lru_cache(maxsize=4)
def _fibonacci_lattice(n: int) -> np.ndarray:
    """The 2-D Fibonacci lattice with ``n`` points (a Fibonacci number; generator the previous one), shifted by
    half a step, on [-1, 1]^2 (Korobov 1959; Sloan & Joe, *Lattice Methods for Multiple Integration*, 1994):
    ``n`` points whose coordinates on either axis are ``n`` distinct values ``2 (i + 1/2) / n - 1``.

    The second coordinate is shifted by the whole number of steps that keeps the points farthest from the
    square's vertices (ties: the smallest shift; for ``n = 233``, 188 steps, no point within 0.045 of the side of
    a vertex on both axes): unshifted, the first point lay ``1/(2n)`` from a vertex on both axes, where a box's
    interpolant misses a cone or a kink at that vertex most (the partition puts singular points at vertices),
    and that one point weighs ``1/n`` of the box while the residual's mass there is far smaller.  The box
    integral ``B_2(1)`` (``sqrt(x^2 + y^2)`` on the unit square) failed its check at 1e-6 on that point alone
    (lattice 5.1e-7 against the rule's true error 1.7e-9) and refined to 7,541 evaluations against 1,611."""
    a, b = 1, 1
    while b < n:
        a, b = b, a + b
    if b != n:
        raise ValueError(f"{n} is not a Fibonacci number")
    i = np.arange(n)
    x = (i + 0.5) / n
    y = ((i[None, :] * a + i[:, None]) % n + 0.5) / n                       # row s: shifted by s steps
    near = np.maximum(np.minimum(x, 1 - x)[None, :], np.minimum(y, 1 - y)).min(axis=1)
    shift = int(np.argmax(near))
    t = np.stack([x, y[shift]], axis=1)
    out = 2.0 * t - 1.0
    out.flags.writeable = False
    return out


@functools.lru_cache(maxsize=4)
def _lattice_basis(n: int, nodes: tuple | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lagrange basis values (n, p) of the 1-D ``nodes`` at the two coordinates of the points of
    :func:`_fibonacci_lattice` (barycentric form, Berrut & Trefethen, SIAM Review 46, 2004)."""
    x = np.asarray(nodes, dtype=float)
    bw = np.array([1.0 / np.prod([x[j] - x[i] for i in range(len(x)) if i != j]) for j in range(len(x))])
    out = []
    for col in _fibonacci_lattice(n).T:
        diff = col[:, None] - x[None, :]
        hit = diff == 0
        diff[hit] = 1.0
        q = bw[None, :] / diff
        q /= q.sum(axis=1, keepdims=True)
        rows = hit.any(axis=1)
        q[rows] = hit[rows]
        q.flags.writeable = False
        out.append(q)
    return out[0], out[1]


def _callable_name(f) -> str:
    return getattr(f, "fingerprint", None) or f"{getattr(f, '__module__', '?')}:{getattr(f, '__qualname__', repr(f))}"


def touching(lo: np.ndarray, hi: np.ndarray, slo: np.ndarray, shi: np.ndarray) -> np.ndarray:
    """Boxes ``[lo, hi]`` (n, d) that meet, or lie within one grid cell of, any box ``[slo, shi]`` (k, d).

    Conservative (every box that meets one of the second set is included, and a few more next to
    them): the boxes' extent is cut into a grid of at most about 2^18 cells; the cells the second
    set's boxes reach are marked with a d-dimensional difference array, and each box of the first
    set is tested with a summed-area table over the cells it reaches.  Work ``O(n 2^d + k 2^d +
    cells)``; deterministic.  Used by the warm start (:meth:`Run._carried`).
    """
    n, d = lo.shape
    near = np.zeros(n, dtype=bool)
    if n == 0 or slo.shape[0] == 0:
        return near
    e_lo, e_hi = lo.min(axis=0), hi.max(axis=0)
    m = int(max(2, min(64, round((1 << 18) ** (1.0 / d)))))
    cell = np.where(e_hi > e_lo, (e_hi - e_lo) / m, 1.0)
    pad = 1e-9 * m

    def cells(a, b):
        i0 = np.clip(np.floor((a - e_lo) / cell - pad), 0, m - 1).astype(np.int64)
        i1 = np.clip(np.floor((b - e_lo) / cell + pad), 0, m - 1).astype(np.int64)
        return i0, i1
    corners = np.array(np.meshgrid(*[[0, 1]] * d, indexing="ij")).reshape(d, -1).T     # (2^d, d)
    sign = np.where(corners.sum(axis=1) % 2 == 0, 1, -1)
    shape = (m + 1,) * d
    # mark the cells the second set reaches: +-1 at the corners of each range, then prefix sums
    s0, s1 = cells(slo, shi)
    diff = np.zeros(shape, dtype=np.int64).ravel()
    for cnr, sg in zip(corners, sign):
        idx = np.where(cnr[None, :] == 1, s1 + 1, s0)
        np.add.at(diff, np.ravel_multi_index(idx.T, shape), sg)
    occ = diff.reshape(shape)
    for ax in range(d):
        occ = np.cumsum(occ, axis=ax)
    sat = (occ > 0).astype(np.int64)
    sat = np.pad(sat, [(1, 0)] * d)[tuple(slice(0, m + 1) for _ in range(d))]
    for ax in range(d):
        sat = np.cumsum(sat, axis=ax)
    # sat[i] = marked cells with every index below i: count over [i0, i1] by inclusion-exclusion
    r0, r1 = cells(lo, hi)
    total = np.zeros(n, dtype=np.int64)
    flat = sat.ravel()
    for cnr, sg in zip(corners, sign):
        idx = np.where(cnr[None, :] == 1, r1 + 1, r0)
        total += sg * flat[np.ravel_multi_index(idx.T, shape)]
    sgn_all = 1 if d % 2 == 0 else -1
    near[:] = sgn_all * total > 0
    return near


class Run(Probes, Singularities, RuleErrors, SplitChecks):
    """A steppable, observable, stoppable and resumable integration.

    Parameters
    ----------
    f : callable
        Vectorised integrand: ``f(X)`` with ``X`` of shape (n, d) returns
        (n,) or (n, m).
    domain : Box or Simplex
    evaluator : callable, optional
        ``evaluator(f, X) -> F``; the default calls ``f(X)`` in-process.
        See :mod:`cubage.engine.parallel` for joblib and dask evaluators.
    fingerprint : str, optional
        Identity of the integrand for checkpoints (an expression's hash, a
        problem file's fingerprint).  Defaults to the callable's
        ``fingerprint`` attribute or its qualified name.
    start : dict, optional
        Warm start: a partition of the domain (as returned by
        :meth:`partition` of another run over the same domain with the same
        rule and split policy) to begin from instead of the whole domain.
        Every region is evaluated with this run's integrand; the same error
        control follows.  Optional ``flags`` (the regions' signatures),
        ``wary`` (the learnt wary-class counters) and ``audited`` (the
        partition passed its audit with no non-smooth signature), as
        :meth:`partition` gives them, carry what the previous run measured
        (see :meth:`_carried` and :meth:`_warm_audit_share`).
        Used by parameter scans (:mod:`cubage.session.scan`).
    **settings
        Fields of :class:`Settings`.

    Notes
    -----
    Thread use: one thread drives the run (:meth:`step`, iteration or
    :meth:`run`); any thread may call :meth:`pause`, :meth:`resume`,
    :meth:`stop`, :meth:`set_goal` and :meth:`snapshot`.
    """

    def __init__(self, f: Callable, domain, *, evaluator=None, fingerprint: str | None = None,
                 snapshot_interval: float = 0.25, start: dict | None = None, **settings):
        self.f = f
        self.domain = domain
        self.settings = Settings(**settings)
        self.settings.validate()
        self.settings.budget = int(self.settings.budget)
        self.geometry, self.rule_name = _make_geometry(domain, self.settings)
        self.settings.rule = self.rule_name
        self.rule = self.geometry.rule
        if self.settings.budget < self.rule.size:
            raise ValueError(f"budget {self.settings.budget} is below the {self.rule.size} nodes of one "
                             f"region of the {self.rule_name} rule in {domain.dim}-D")
        w3 = self.rule.weights_third if self.settings.estimate == "sharp" else None
        self._w = np.stack([self.rule.weights, self.rule.weights_low] + ([w3] if w3 is not None else []))
        self._wt = np.ascontiguousarray(self._w.T)
        self.evaluator = evaluator
        self.integrand_id = fingerprint or _callable_name(f)
        self.snapshot_interval = snapshot_interval
        self._start_partition = start
        self._lock = threading.RLock()
        self._pause = threading.Event()
        self._stop = threading.Event()
        self._stop_at = math.inf
        self._stop_now = False
        self._caller = AbandonableCaller()
        # state (all of it goes into a checkpoint)
        self.m: int | None = None
        self.store: RegionStore | None = None
        self.queue = _Queue()
        self.step_count = 0
        self.evaluations = 0
        self.total_value = None
        self.total_error = None
        self.key_weight = None
        self.elapsed_before = 0.0
        self.status = "running"
        self.message = ""
        self._hist: list[np.ndarray] = []
        self._depth_err = np.zeros(64)
        self._t_start = None
        self._last_snap = -math.inf
        # the honesty checks (counters for the trust report; part of a checkpoint)
        self._hidden = np.zeros(1)
        self._lattice_miss = None
        self._missed = np.zeros(1)
        self.checks = {"splits": 0, "disagreed": 0, "lower_closer": 0, "audits": 0, "audit_regions": 0,
                       "audit_evaluations": 0, "audit_disagreed": 0, "audit": "not run",
                       "wary_splits": 0, "wary_measured": 0.0, "wary_estimated": 0.0, "f_scale": [0.0]}
        self._audit_ok = False
        # node values of the regions the last step made (rows, values (k, p, m)), for the 2-D audit's lattice
        # check (:meth:`_audit_check`): the store keeps none; part of a checkpoint
        self._node_cache: tuple[np.ndarray, np.ndarray] | None = None
        # node values of the live Genz-Malik boxes holding a domain vertex (rows, values (k, p, m), centres and
        # half-widths (k, 2 d)), for the domain-corner checks (:meth:`_domain_corners`); part of a checkpoint
        self._corner_cache: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
        # the vertex probes of the last explained children (vertices (n, d), probe points (n, d), values (n, m)),
        # read again for their neighbours' shared vertices (:meth:`_explained_probes`); part of a checkpoint
        self._vertex_memo: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
        # the first region's vertex probes when it is the whole domain (points (2^d, d), values (2^d, m)), read
        # again as the first-level domain-corner checks' probes at the domain's vertices (:meth:`_domain_corners`);
        # part of a checkpoint
        self._first_probes: tuple[np.ndarray, np.ndarray] | None = None
        self._domain_box: tuple[np.ndarray, np.ndarray] | None = None
        self._axis_node_cache: np.ndarray | None = None

    # -- fingerprint ---------------------------------------------------------
    def fingerprint(self) -> str:
        """Identity of problem and path-deciding settings (sha256 hex)."""
        blob = json.dumps({"domain": self.domain.to_json(), "integrand": self.integrand_id,
                           "settings": self.settings.shape_key()}, sort_keys=True)
        return hashlib.sha256(blob.encode()).hexdigest()

    # -- control -------------------------------------------------------------
    def pause(self) -> None:
        """Hold the run after the current step (resumable)."""
        self._pause.set()

    def resume(self) -> None:
        """Continue a paused run."""
        self._pause.clear()

    def stop(self, now: bool = False) -> None:
        """Stop after the current step; the result keeps the current estimate.

        An integrand call in progress gets :data:`STOP_GRACE_SECONDS` to
        return (``now=True``: none); after that it is abandoned, so that a
        stuck integrand cannot hold the run (issue 10 item 9).  The run then
        ends with the state of its last complete step.
        """
        if not self._stop.is_set():
            self._stop_at = time.monotonic()
        if now:
            self._stop_now = True
        self._stop.set()
        self._pause.clear()

    @property
    def paused(self) -> bool:
        return self._pause.is_set()

    @property
    def done(self) -> bool:
        return self.status not in ("running", "paused")

    def set_goal(self, rel_tol: float | None = None, abs_tol: float | None = None,
                 budget: int | None = None, time_limit: float | None = None,
                 memory_ceiling: int | str | None = None) -> None:
        """Change the goal while running (tighten or loosen).  A run that had
        converged, spent its budget or time, or was stopped becomes running
        again: it goes on from its current partition (and ends at once if
        the new goal is already met).

        With ``queue="local"`` the run stops when every region meets the
        tolerance it was given when it was made, so a new tolerance has no
        effect there (budgets and time limits still do)."""
        with self._lock:
            s = self.settings
            new = Settings(**{**s.__dict__})
            if rel_tol is not None:
                new.rel_tol = float(rel_tol)
            if abs_tol is not None:
                new.abs_tol = float(abs_tol)
            if budget is not None:
                new.budget = int(budget)
            if time_limit is not None:
                new.time_limit = float(time_limit)
            if memory_ceiling is not None:
                new.memory_ceiling = memory_ceiling
            new.validate()
            self.settings = new
            if self.status in ("converged", "budget-spent", "time-limit", "stopped", "memory-ceiling") \
                    and self.store is not None:
                self.status = "running"
                self._stop.clear()
                self._audit_ok = False
                self._stop_now = False
                self._stop_at = math.inf

    # -- the loop ------------------------------------------------------------
    def elapsed(self) -> float:
        if self._t_start is None:
            return self.elapsed_before
        return self.elapsed_before + (time.perf_counter() - self._t_start)

    def goal(self) -> np.ndarray:
        s = self.settings
        if self.total_value is None:
            return np.array([np.inf])
        return np.maximum(s.abs_tol, s.rel_tol * np.abs(self.total_value))

    def _evaluate(self, g: dict) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Rule values (k, r, m), |f|-rule (k, m), node values (k, p, m) of regions ``g``."""
        t = self.geometry.points(g)
        if hasattr(self.geometry, "to_user"):                    # per-piece maps (cubage.engine.partition)
            x, jac = self.geometry.to_user(g, t)
        else:
            x, jac = (self.geometry.map.to_user(t) if self.geometry.map is not None else (t, None))
        fx = self._node_values(x, jac)
        k = len(next(iter(g.values())))
        p = self.rule.size
        fr = fx.reshape(k, p, -1)
        vol = self.geometry.volume(g)
        if fr.shape[2] == 1:                                       # one GEMM for all rule values
            f2 = fr[:, :, 0]
            q = (f2 @ self._wt)[:, :, None]
            absq = (np.abs(f2) @ self.rule.weights)[:, None]
        else:
            q = np.matmul(self._w, fr)                             # (k, r, m)
            absq = np.matmul(self.rule.weights, np.abs(fr))
        q *= vol[:, None, None]
        absq *= vol[:, None]
        return q, np.abs(absq), fr

    def _node_values(self, x: np.ndarray, jac: np.ndarray | None) -> np.ndarray:
        """Integrand values (n, m) times the Jacobian ``jac`` at user points ``x`` (n, d) that are nodes of a rule:
        a value that is not a finite number there is the integrand's failure (:class:`IntegrandError`)."""
        fx = self._call_integrand(x)
        if np.iscomplexobj(fx):
            raise IntegrandError("integrand returned complex values; return the real and imaginary parts as two "
                                 "components, shape (n, 2)")
        try:
            fx = np.asarray(fx, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise IntegrandError(f"integrand returned something that is not an array of numbers ({exc})") from None
        n = x.shape[0]
        if fx.ndim == 0:
            fx = np.full(n, float(fx))
        if fx.shape[0] != n or fx.ndim > 2:
            raise IntegrandError(
                f"integrand returned shape {fx.shape} for {n} points; expected ({n},) or ({n}, m)")
        if fx.ndim == 1:
            fx = fx[:, None]
        if fx.shape[1] == 0:
            raise IntegrandError(f"integrand returned shape {fx.shape}: no components; expected ({n},) or ({n}, m) "
                                 "with m >= 1")
        if self.m is not None and fx.shape[1] != self.m:
            raise IntegrandError(f"integrand returned {fx.shape[1]} components, earlier {self.m}")
        bad = ~np.isfinite(fx)
        if bad.any():
            i = int(np.nonzero(bad.any(axis=1))[0][0])
            pt = ", ".join(f"{v:.17g}" for v in x[i])
            raise IntegrandError(f"integrand returned {fx[i][bad[i]][0]} at x = ({pt}); if that point is a "
                                 "removable singularity give the integrand its limit there (expressions: "
                                 "sin_over_x), or declare it singular so that no node lies on it (problem files: "
                                 "[features] singular; Python: singular=[{'point': [...]}])")
        if jac is not None:
            with np.errstate(over="ignore", invalid="ignore"):      # reported below in one line
                fx = fx * jac[:, None]
            if not np.isfinite(fx).all():
                i = int(np.nonzero(~np.isfinite(fx).all(axis=1))[0][0])
                pt = ", ".join(f"{v:.17g}" for v in x[i])
                raise IntegrandError(
                    f"integrand times the Jacobian of the variable map overflows at x = ({pt}); "
                    "the integrand must decay at infinity (or its singularity there be integrable)")
        return fx


    def _values_at(self, t: np.ndarray) -> np.ndarray:
        """Integrand values (n, m) at engine points ``t`` (n, d) outside the rule's nodes, in one call: NaN where
        the integrand gives no finite value, fails there, or the point maps to infinity."""
        n, m = t.shape[0], self.m or 1
        out = np.full((n, m), np.nan)
        # a vertex at the end of an infinite axis (engine t = +-1) maps to infinity: no value there is data
        amap = self.geometry.map
        kinds = getattr(getattr(amap, "amap", amap), "kinds", None)
        use = np.ones(n, dtype=bool)
        if kinds is not None and (kinds != 0).any():
            inf_axes = kinds != 0
            on_end = (t <= amap.lower[None, :]) | (t >= amap.upper[None, :])
            use = ~(on_end & inf_axes[None, :]).any(axis=1)
        if use.any():
            tu = t[use]
            x, jac = (amap.to_user(tu) if amap is not None else (tu, None))
            try:
                with np.errstate(all="ignore"):     # 1/0 at a vertex is no news: the value is not data
                    fx = self._call_integrand(x)    # abandonable (Abandoned propagates)
                fx = np.asarray(fx, dtype=np.float64)
                if fx.ndim == 0:
                    fx = np.full(x.shape[0], float(fx))
                fx = fx.reshape(x.shape[0], -1)
            except (IntegrandError, TypeError, ValueError):
                # an integrand that fails on the boundary (where no node lies) gives the probes no data;
                # a broken integrand fails at the next evaluation of nodes
                fx = None
            if fx is not None and fx.shape[1] == m:
                with np.errstate(invalid="ignore", over="ignore"):
                    if jac is not None:
                        fx = fx * jac[:, None]
                out[use] = np.where(np.isfinite(fx), fx, np.nan)
        return out

    def _call_integrand(self, x: np.ndarray):
        """The integrand (through the evaluator) at ``x``, in a call the run can abandon.

        Anything the user's code raises -- ``SystemExit`` and
        ``KeyboardInterrupt`` included -- is an :class:`IntegrandError`
        (issue 10 item 5).  A stop request (after its grace), ``stop(now=True)``
        or the time limit (after the same grace) abandon a call that does not
        return, raising :class:`~cubage.engine.abandon.Abandoned` (issue 10 item 9).
        """
        call = (self.evaluator, (self.f, x)) if self.evaluator is not None else (self.f, (x,))
        try:
            return self._caller.call(call[0], call[1], self._abandon_reason)
        except Abandoned:
            cancel = getattr(self.evaluator, "cancel", None)
            if cancel is not None:
                try:
                    cancel()        # frees stuck workers; the evaluator stays usable
                except Exception:  # noqa: BLE001 - cancelling must not hide why the run ends
                    pass
            raise
        except CallFailed as failed:
            exc = failed.error
            if isinstance(exc, IntegrandError):
                raise exc from None
            msg = " ".join(str(exc).split())
            where = ""
            if isinstance(exc, (SystemExit, KeyboardInterrupt)):
                where = " (an exit or interrupt inside the integrand is a failure of the integrand)"
            raise IntegrandError(f"integrand raised {type(exc).__name__}{': ' + msg if msg else ''}{where}") \
                from (exc if isinstance(exc, Exception) else None)

    def _abandon_reason(self) -> str | None:
        """Why to give up waiting for the integrand call in progress (None: keep waiting)."""
        if self._stop.is_set() and (self._stop_now or time.monotonic() - self._stop_at >= STOP_GRACE_SECONDS):
            return "stopped"
        s = self.settings
        if s.time_limit is not None and self.elapsed() >= s.time_limit + STOP_GRACE_SECONDS:
            return "time-limit"
        return None


    def _keys(self, err: np.ndarray, tol: np.ndarray | None = None) -> np.ndarray:
        key = err[:, 0] if self.m == 1 else (err * self.key_weight).max(axis=1)
        if tol is not None:
            key = np.where(key > tol, key, -np.inf)
        return key

    def _set_errors(self, rows: np.ndarray, err: np.ndarray) -> None:
        """Write the live rows' new errors ``err`` (k, m) and their queue keys (the caller rebuilds the queue)."""
        st = self.store
        st["error"][rows] = err
        st["key"][rows] = self._keys(err, st["tol"][rows] if "tol" in st.columns else None)


    def partition(self) -> dict[str, np.ndarray]:
        """Copies of the regions' geometry, depth and signature flags, the learnt wary-class counters
        and whether the partition passed its audit with no non-smooth signature (``audited``): the
        ``start`` of a warm-started run (see :meth:`_start`)."""
        with self._lock:
            if self.store is None:
                g = self.geometry.root()
                return {**g, "depth": np.zeros(len(next(iter(g.values()))), np.int16)}
            part = {name: self.store[name].copy() for name in (*self.geometry.columns, "depth", "flags")}
            c = self.checks
            part["wary"] = np.array([c["wary_splits"], c["wary_measured"], c["wary_estimated"]], np.float64)
            # whether this partition passed its audit with no non-smooth signature anywhere in the run
            clean = (c["audit"] == "passed" and not c.get("audit_failed", 0) and not c["audit_disagreed"]
                     and not c["disagreed"] and not c["lower_closer"]
                     and not ((self.store["flags"] & _NON_SMOOTH) != 0).any())
            part["audited"] = np.array([1 if clean else 0], np.int8)
            return part

    def _evaluate_start(self) -> tuple[dict, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The first regions (the root, or the warm-start partition in chunks of ``batch_points``) evaluated."""
        part = self._start_partition
        if part is None:
            g = self.geometry.root()
            n = len(next(iter(g.values())))
            if n == 1:
                return (g, *self._evaluate(g), np.zeros(1, np.int16))
            part = {**g, "depth": np.zeros(n, np.int16)}   # several roots: features (cubage.engine.partition)
        g = {name: np.asarray(part[name]) for name in self.geometry.columns}
        n = len(g[next(iter(g))])
        per = max(1, self.settings.batch_points // self.rule.size)
        outs = [self._evaluate({k: a[i:i + per] for k, a in g.items()}) for i in range(0, n, per)]
        q, absq, fr = (np.concatenate([o[j] for o in outs]) for j in range(3))
        return g, q, absq, fr, np.asarray(part.get("depth", np.zeros(n)), np.int16)

    def region_columns(self) -> dict:
        """Columns of the region store: geometry, value, error, priority key, depth, the rule's
        own estimate ``raw`` and lower-degree value ``low`` (for the split check) and ``flags``."""
        m = self.m
        cols = dict(self.geometry.columns)
        cols.update({"value": ((m,), np.float64), "error": ((m,), np.float64),
                     "key": ((), np.float64), "depth": ((), np.int16),
                     "raw": ((m,), np.float64), "low": ((m,), np.float64), "flags": ((), np.uint8)})
        if self.settings.queue == "local":
            cols["tol"] = ((), np.float64)
        if self.geometry.kind == "simplex":      # the lineage window (see _lineage_tails)
            cols["dwin"] = ((2 * self.domain.dim, m), np.float64)
        # what the region's lineage measured and its nodes cannot see, the axis it was measured across and the
        # bisections across it left to carry it through (see _blind_floors)
        cols["blind"] = ((m,), np.float64)
        cols["blind_axis"] = ((), np.int8)
        cols["blind_cuts"] = ((), np.int8)
        cols["blind_c"] = ((), np.float64)
        cols["blind_h"] = ((), np.float64)
        return cols

    def _carried(self, g: dict, n: int) -> tuple[np.ndarray, np.ndarray] | None:
        """Warm start (issue 14 item 3): what the ``n`` start regions ``g`` carry from the run they come
        from (None when the start carries no flags): which had a non-smooth signature there, and which
        had one, were children of one (``FLAG_WARY``, unless their own vertex probes agreed there:
        ``FLAG_PROBED``) or touch such a region.

        A warm start carries what its predecessor measured at nearby constants: the regions with a
        signature join the wary class (as a child of a non-smooth region does), and the class's learnt
        factor (the predecessor's counters) applies to their children from the first split.  A feature
        that moves with the scanned constant moves into the regions next to where it was, so those
        regions and their neighbours (boxes sharing a face, edge or corner, found conservatively by
        :func:`touching`) are probed, with the second probe per vertex that a cold run gives the children
        of a non-smooth region (a kink just inside a carried region's face escaped the first): on a kink
        moving along x, probing only the regions with a signature doubled the silent wrong answers,
        and probing these ones left as few as probing every region.  A wary child whose own probes
        cleared it showed no feature at its scale (the feature sits in a sibling with a signature of its
        own): its neighbourhood is not probed for it (smooth scan of ``benchmarks/scan.py``: warm/cold
        0.532 -> 0.517; the moving kink's points kept their honesty).  Regions far from any signature
        are not probed again (a cold run does not probe the children of smooth regions either); the
        split check and the audit still apply to them.
        """
        part = self._start_partition
        if part is None or "flags" not in part:
            return None
        fl = np.asarray(part["flags"], np.uint8)
        if fl.shape != (n,):
            return None
        carried = (fl & _NON_SMOOTH) != 0
        # a child of a non-smooth region whose own vertices were probed there and agreed showed no feature
        # at its scale: the feature sits in a sibling that carries a signature itself
        cleared = ((fl & FLAG_WARY) != 0) & ((fl & FLAG_PROBED) != 0)
        src = np.nonzero(((fl & _NON_SMOOTH) != 0) | (((fl & FLAG_WARY) != 0) & ~cleared))[0]
        near = np.zeros(n, dtype=bool)
        if src.size:
            lo, hi = self.geometry.engine_bounds(g)
            near = touching(lo, hi, lo[src], hi[src])
        return carried, near

    def _warm_audit_share(self) -> float:
        """The share of the usual audit sample (:data:`AUDIT_COST`) this run's audit takes: a warm start
        from a partition whose own audit passed at the neighbouring constants, with no non-smooth signature
        there, takes :data:`WARM_AUDIT_SHARE` while this run shows none either (no split disagreed with
        its parent or was won by the lower-degree rule, no live region is flagged, no audit failed);
        every other run takes the whole sample."""
        c = self.checks
        if not c.get("warm_audit") or c.get("audit_failed", 0) or c["disagreed"] or c["lower_closer"]:
            return 1.0
        if ((self.store["flags"] & _NON_SMOOTH) != 0).any():
            return 1.0
        c["audit_reduced"] = int(c.get("audit_reduced", 0)) + 1
        return WARM_AUDIT_SHARE

    def _start(self) -> None:
        g, q, absq, fr, depth = self._evaluate_start()
        probe = (np.ones(len(q), dtype=bool) if len(q) == 1 or "diagonal" in self.rule.extra
                 else self._looks_resolved(q, absq))
        carried = self._carried(g, len(q))
        if carried is not None:
            carried, near = carried
            probe &= near
            if np.asarray(self._start_partition.get("audited", 0)).ravel()[:1].tolist() == [1] and not carried.any():
                self.checks["warm_audit"] = 1            # the start passed its audit, smooth (see partition)
            wary = np.asarray(self._start_partition.get("wary", ()), np.float64)
            if wary.shape == (3,) and np.all(np.isfinite(wary)) and np.all(wary >= 0):
                self.checks["wary_splits"] = int(wary[0])
                self.checks["wary_measured"] = float(wary[1])
                self.checks["wary_estimated"] = float(wary[2])
        self.m = q.shape[2]
        self.checks["f_scale"] = [float(v) for v in np.abs(fr).max(axis=(0, 1))]
        # carried regions are probed for the reason a cold run probes the children of a non-smooth region:
        # they get the same second probe per vertex (a feature moving into one may sit near its face)
        pv = self._probe_values(g, probe, mid=carried is not None)
        raw = self._rule_errors(g, q, absq, fr)
        floor, deviates, steer, watched = self._probe_floor(g, fr, pv, probe)
        self._rank_corners(g, fr, pv, probe)
        err = np.maximum(raw, floor)
        val = q[:, 0, :]
        scale = np.maximum(np.abs(val.sum(axis=0)), np.maximum(err.sum(axis=0), 1e-300))
        self.key_weight = (1.0 / scale) if self.m > 1 else np.ones(1)
        self.geometry.set_split_axes(g, self._axis_values(fr, err))
        self._steer_axes(g, steer, floor, raw)
        self.store = RegionStore(self.region_columns(), capacity=1024)
        g["raw"] = raw
        g["low"] = q[:, 1, :]
        g["flags"] = (np.where(self._non_asymptotic(q, absq, g, fr), FLAG_NON_ASYMPTOTIC, 0)
                      | np.where(deviates, FLAG_PROBE, 0)
                      | np.where(watched, FLAG_WATCH, 0)
                      | np.where(probe & ~deviates & ~watched if pv is not None else False,
                                 FLAG_PROBED, 0)
                      | (np.where(carried, FLAG_WARY, 0) if carried is not None else 0)).astype(np.uint8)
        self.evaluations = fr.shape[0] * fr.shape[1] + (pv.size // self.m if pv is not None else 0)
        self.total_value = val.sum(axis=0)
        self.total_error = err.sum(axis=0)
        tol = None
        if self.settings.queue == "local":
            tol = np.full(len(val), float(self._keyed_goal()) / len(val))
            g["tol"] = tol
        key = self._keys(err, tol)
        if "dwin" in self.store.columns:
            g["dwin"] = np.full((len(val), 2 * self.domain.dim, self.m), np.nan)     # nothing measured yet
        g["blind"] = np.zeros((len(val), self.m))
        g["blind_axis"] = np.full(len(val), -1, np.int8)
        g["blind_cuts"] = np.zeros(len(val), np.int8)
        g["blind_c"] = np.zeros(len(val))
        g["blind_h"] = np.zeros(len(val))
        rows = self.store.append(**g, value=val, error=err, key=key, depth=depth)
        self._cache_nodes(rows, fr)
        self._cache_corner_nodes(rows, g, fr)
        self.queue.rebuild(self.store["key"], 1)
        self._depth_add(depth, key)
        self._record()

    def _keyed_goal(self) -> float:
        g = self.goal()
        return float(g[0]) if self.m == 1 else float((g * self.key_weight).min())

    def _record(self) -> None:
        row = np.concatenate([[self.evaluations, self.store.n], self.total_value, self.total_error])
        self._hist.append(row)
        if len(self._hist) > 8192:  # thin deterministically: keep every other point and the newest
            self._hist = self._hist[:-1:2] + [self._hist[-1]]

    def _per_split(self) -> int:
        """Most evaluations one split can cost (children's nodes and vertex probes)."""
        v = 2 ** self.domain.dim if has_probes(self.rule) else 0
        if "diagonal" not in self.rule.extra:
            v = 2 * v + 2 * self.domain.dim         # Genz-Malik regions get a second probe per vertex, and faces
        return self.geometry.children_per_split * (self.rule.size + v)

    def _choose(self) -> int:
        """How many of the queue's top regions to split this step.

        ``batch="auto"`` (documented policy): at most ``batch_points`` new
        integrand points; only regions whose key is at least 1/4 of the
        largest; and no more than needed to cover the excess of the total
        error over the goal (the regions are taken in order until their
        summed error reaches that excess).  Splitting a region the one-at-a-
        time algorithm would never have split is what wastes evaluations;
        these limits keep that waste small while giving large vectorised
        calls whenever the error is spread over many regions.
        ``queue="local"`` takes every unfinished region (up to the point
        limit); an integer ``batch`` takes that many.
        """
        s = self.settings
        per = self.geometry.children_per_split * self.rule.size
        budget = (s.budget - self.evaluations) // self._per_split()
        kmax = max(1, s.batch_points // per)
        if s.batch != "auto":
            kmax = int(s.batch)
        kmax = int(min(kmax, budget))
        if kmax <= 0:
            return 0
        if self.queue.idx.size < kmax:
            self.queue.rebuild(self.store["key"], kmax)
        idx, key = self.queue.top(kmax)
        if s.batch != "auto" or s.queue == "local" or idx.size == 0:
            return int(idx.size)
        k = int(np.searchsorted(-key, -0.25 * key[0], side="right"))
        g = self.goal()
        if self.m == 1:
            excess = float(self.total_error[0] - g[0])
        else:
            excess = float(((self.total_error - g) * self.key_weight).max())
        if excess > 0:
            cum = np.cumsum(key[:k])
            k = min(k, int(np.searchsorted(cum, excess, side="left")) + 1)
        return max(1, k)

    def _check_stop(self) -> str | None:
        s = self.settings
        if self._stop.is_set():
            return "stopped"
        if self.queue.idx.size == 0:
            self.queue.rebuild(self.store["key"], 1)
        if s.queue == "local":
            if self.queue.idx.size == 0:
                self._exact_totals()
                return "converged" if (self._audit_ok or not s.audit) else "audit"
        elif np.all(self.total_error <= self.goal()):
            self._exact_totals()
            if np.all(self.total_error <= self.goal()):
                if np.any(self._trend() > self.goal()):
                    self.checks["trend_held_back"] = int(self.checks.get("trend_held_back", 0)) + 1
                else:
                    return "converged" if (self._audit_ok or not s.audit) else "audit"
        if self.queue.idx.size == 0:
            return "stalled"
        if self.evaluations + self._per_split() > s.budget:
            return "budget-spent"
        if s.time_limit is not None and self.elapsed() >= s.time_limit:
            return "time-limit"
        if s.max_regions is not None and self.store.n + self.geometry.children_per_split - 1 > s.max_regions:
            return "region-limit"
        ceiling = s.memory_ceiling if s.memory_ceiling is not None else default_memory_ceiling()
        if self.memory_needed() > ceiling:
            return "memory-ceiling"
        return None

    def _trend(self) -> np.ndarray:
        """Floor (m,) on the total error from the convergence history (see
        :func:`cubage.engine.estimate.trend_floor`); a function of the history, none while the run is smooth so
        far (:meth:`_smooth_so_far`): the trend stands in for split checks that understate the error next to
        singularities and kinks, and where every split agreed with its parent, none looked non-asymptotic and no
        live region carries a signature, the split checks measured that the estimates hold (a smooth 6-D product
        peak at 1e-4 was held back four steps, 17,589 -> 33,993 evaluations, on a floor 1.12x its goal while its
        estimate fell from 0.91x to 0.013x of it)."""
        if len(self._hist) < 4 or self._smooth_so_far():
            return np.zeros(self.m or 1)
        h = np.array(self._hist)
        m = self.m or 1
        return _estimate.trend_floor(h[:, 0], h[:, 2:2 + m])

    def memory_needed(self) -> int:
        """Bytes the run's arrays would take during its next step (the quantity the memory ceiling bounds).

        A deterministic estimate from counts, not a measurement: the region
        columns for the regions after the step, times ``1 + GROWTH`` (the old
        and the grown arrays coexist while the store grows; a checkpoint
        copies the live rows), plus the step's scratch arrays (points,
        values and rule products, about ``8 (3 d + 4 m + 4)`` bytes a point)
        and the history.  The integrand's own memory is not counted.
        """
        from cubage.engine.regions import GROWTH
        st = self.store
        if st is None:
            return 0
        per = self.geometry.children_per_split * self.rule.size
        k = max(1, self.settings.batch_points // per) if self.settings.batch == "auto" else int(self.settings.batch)
        k = min(k, st.n)                 # a step never splits more regions than there are
        rows = st.n + k * (self.geometry.children_per_split - 1)
        points = k * per
        m = self.m or 1
        scratch = 8 * points * (3 * self.domain.dim + 4 * m + 4)
        hist = 8 * len(self._hist) * (2 + 2 * m)
        return int(st.bytes_per_region() * rows * (1 + GROWTH) + scratch + hist)

    def _exact_totals(self) -> None:
        self.total_value = self.store["value"].sum(axis=0)
        self.total_error = self.store["error"].sum(axis=0)

    def step(self) -> bool:
        """Do one step (or start the run).  Returns False once the run is over."""
        if self.done:
            return False
        with self._lock:
            if self._t_start is None:
                self._t_start = time.perf_counter()
            try:
                if self.store is None:
                    self._start()
                    self.step_count = 1
                    return True
                why = self._check_stop()
                if why == "audit":   # the goal is met by the estimate: this step audits the partition
                    why = self._domain_corners()
                    if why == "audit":
                        why = self._audit()
                    if why is None:
                        self.step_count += 1
                        self._record()
                        return True
                if why is not None:
                    return self._finish(why)
                self._advance()
            except Abandoned as gone:
                # the integrand call did not return in time: end with the last complete step's state
                self.message = (f"an integrand call was abandoned ({gone.reason}); the estimate is from the "
                                f"last complete step")
                return self._finish(gone.reason)
            except IntegrandError as exc:
                self.message = str(exc)
                self._finish("failed")
                raise
            return True

    def _finish(self, status: str) -> bool:
        if self.store is not None:  # a failure in the very first evaluation leaves no regions
            self._exact_totals()
            if status in ("budget-spent", "time-limit", "region-limit", "stalled") and not self.message:
                self.message = self._why_short()
        self.status = status
        self.elapsed_before = self.elapsed()
        self._t_start = None
        return False

    def _advance(self) -> None:
        st = self.store
        k = self._choose()
        idx, _ = self.queue.top(k)
        parents = {name: st[name][idx] for name in st.columns}
        ok = self.geometry.splittable(parents)
        if not ok.all():
            # too small to split in floating point: keep their estimates, retire them from the queue
            self.queue.pop(k)
            st["key"][idx[~ok]] = -np.inf
            self.queue.push(idx[ok], parents["key"][ok])
            return
        kids = self.geometry.split(parents)
        q, absq, fr = self._evaluate(kids)           # may raise: nothing changed yet
        # children that look resolved although their parent showed a non-smooth signature: probe their vertices
        suspect = self._suspects(parents, q, absq, kids)
        # may raise: nothing changed yet
        spent = shift = None
        if "diagonal" in self.rule.extra:
            pv = self._probe_values(kids, suspect, mid=True, faces=False)
        else:
            pv, spent, shift = self._suspect_probes(kids, suspect, fr)
        # resolved children a known singularity explains: their vertex probes only (a feature that does not
        # come from the singularity may still cross them, and only a probe sees it)
        light = (self._explained(parents, kids) & self._looks_resolved(q, absq) & ~suspect
                 if "diagonal" not in self.rule.extra else np.zeros(len(q), bool))
        if light.any():
            pl, spent_light, shift_light = self._explained_probes(kids, light)
            if pl is not None:
                nv = pl.shape[1]
                both = suspect | light
                full = np.full((int(both.sum()), pv.shape[1] if pv is not None else 2 * nv + 2 * self.domain.dim,
                                pl.shape[2]), np.nan)
                full[light[both], :nv] = pl
                own = shift
                shift = np.zeros(full.shape[:2])
                shift[light[both], :nv] = shift_light
                if pv is not None:
                    full[suspect[both]] = pv
                    shift[suspect[both]] = own
                spent = (spent if spent is not None else 0) + spent_light
                pv, suspect = full, both
        self.queue.pop(k)
        key, new, disagreed = self._replace(idx, parents, kids, q, absq, fr, pv, suspect, 0, spent=spent,
                                            shift=shift)
        if disagreed and np.any(self._hidden > 0.1 * self.goal()):
            self._audit_ok = False                   # a large new discrepancy: the next convergence needs an audit
        self.queue.push(np.concatenate([idx, new]), key)
        self.step_count += 1
        if self.step_count % 256 == 0:
            self._exact_totals()
        self._record()

    def _replace(self, idx: np.ndarray, parents: dict, kids: dict, q: np.ndarray, absq: np.ndarray,
                 fr: np.ndarray, pv: np.ndarray | None, probe: np.ndarray,
                 extra_flag: int, nch: int | None = None,
                 spent: int | None = None, shift: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, int]:
        """Write the children of the split parents ``idx`` into the store (the parent's row is reused,
        the other children appended) after the split check; returns (children's keys, appended rows,
        number of surprises: parents whose children disagreed with them beyond their estimate, plus
        children whose vertex probes raised their estimate).  ``spent``: the probes evaluated, when not
        every entry of ``pv`` was; ``shift``: where a probe value was read beside the probe
        (:meth:`_explained_probes`)."""
        st = self.store
        k = len(idx)
        nch = nch or self.geometry.children_per_split
        m = q.shape[2]
        val, low = q[:, 0, :], q[:, 1, :]
        raw = self._rule_errors(kids, q, absq, fr, np.tile((parents["flags"] & _NON_SMOOTH) != 0, nch))
        # measure, not assume: each parent's value against the sum of its children's
        child_sum = val.reshape(nch, k, m).sum(axis=0)
        noise = _estimate.ROUNDING * absq.reshape(nch, k, m).sum(axis=0)
        child_raw = raw.reshape(nch, k, m).sum(axis=0)
        D, disagree, lower = _estimate.split_check(parents["value"], parents["low"], parents["raw"], child_sum,
                                                   noise)
        err = _estimate.corrected_errors(raw.reshape(nch, k, m), parents["raw"], D, disagree,
                                         lower).reshape(nch * k, m)
        # children of a region with a non-smooth signature form the "wary" class; how far their rule
        # estimates fall short is measured whenever one of them is split, and learnt as a factor (issue 12
        # item 1: a calibration per lineage class; smooth runs keep a factor of 1)
        pw = (parents["flags"] & FLAG_WARY) != 0
        if pw.any():
            kw = self.key_weight[None, :]
            self.checks["wary_measured"] += float((D[pw] * kw).max(axis=1).sum())
            self.checks["wary_estimated"] += float((parents["raw"][pw] * kw).max(axis=1).sum())
            self.checks["wary_splits"] += int(pw.sum())
        wary = np.tile((parents["flags"] & _NON_SMOOTH) != 0, nch)
        factor = self._wary_factor()
        if factor > 1.0 and wary.any():
            err = np.where(wary[:, None], np.maximum(err, raw * factor), err)
        windows = None
        implied = D
        if "dwin" in st.columns:
            err, windows, implied = self._lineage_tails(parents, child_sum, raw.reshape(nch, k, m), err, wary,
                                                        noise, D)
        floor, deviates, steer, watched = self._probe_floor(kids, fr, pv, probe, shift)
        raised = (floor > err).any(axis=1)
        # error the parents' estimates did not account for: measured discrepancy beyond the estimate, and
        # what the vertex probes added on top of the children's corrected estimates
        probe_extra = np.maximum(floor - err, 0.0).sum(axis=0)
        self._hidden = (np.maximum(D.sum(axis=0) - parents["error"].sum(axis=0) - child_raw.sum(axis=0), 0.0)
                        + probe_extra)
        # what the parents' own estimates missed, region by region (the audit extrapolates it to the regions
        # it did not split: the children's estimates may now cover their share, the unsplit regions' do not)
        self._missed = np.maximum(np.maximum(D, implied) - parents["error"], 0.0).sum(axis=0) + probe_extra
        err = np.maximum(err, floor)
        err, bcols = self._blind_floors(parents, kids, raw.reshape(nch, k, m), D, noise, err)
        blind, blind_axis = bcols["blind"], bcols["blind_axis"]
        err, hidden_here = self._carry_lattice_hits(parents, kids, child_sum, err)
        deviates = deviates | hidden_here
        pd, pl = disagree.any(axis=1), lower.any(axis=1)
        flags = (np.where(self._non_asymptotic(q, absq, kids, fr), FLAG_NON_ASYMPTOTIC, 0)
                 | np.where(deviates, FLAG_PROBE, 0) | np.where(wary, FLAG_WARY, 0)
                 | np.where(watched, FLAG_WATCH, 0)
                 | np.where(probe & ~deviates & ~watched if pv is not None else False,
                            FLAG_PROBED, 0)
                 | np.tile(np.where(pd, FLAG_DISAGREED, 0) | np.where(pl, FLAG_LOWER_CLOSER, 0), nch)
                 | np.where(np.tile((parents["flags"] & (_NON_SMOOTH | FLAG_WATCH)) != 0, nch) & ~probe
                            & ~self._explained(parents, kids), FLAG_WATCH, 0)
                 | extra_flag).astype(np.uint8)
        self.checks["splits"] += k
        self.checks["disagreed"] += int(pd.sum())
        self.checks["lower_closer"] += int(pl.sum())
        self.geometry.set_split_axes(kids, self._axis_values(fr, err))
        self._steer_axes(kids, steer, floor, raw)
        if "axis" in kids:
            # a region carrying what its lineage saw between its node lines across an axis is bisected across it
            cut = (blind_axis >= 0) & (blind > 0).any(axis=1)
            kids["axis"][cut] = blind_axis[cut].astype(kids["axis"].dtype)
        tol = None
        if self.settings.queue == "local":
            tol = np.tile(parents["tol"] / nch, nch)
            kids["tol"] = tol
        key = self._keys(err, tol)
        depth = np.tile(parents["depth"] + 1, nch).astype(np.int16)
        # totals: remove parents, add children
        self.total_value = self.total_value - parents["value"].sum(axis=0) + val.sum(axis=0)
        self.total_error = self.total_error - parents["error"].sum(axis=0) + err.sum(axis=0)
        self._depth_add(parents["depth"], -parents["key"])
        self._depth_add(depth, key)
        cols = dict(kids, value=val, error=err, key=key, depth=depth, raw=raw, low=low, flags=flags, **bcols)
        if windows is not None:
            cols["dwin"] = windows
        first = {name: a[:k] for name, a in cols.items()}
        rest = {name: a[k:] for name, a in cols.items()}
        st.put(idx, **first)
        new = st.append(**rest) if nch > 1 else np.zeros(0, np.int64)
        self._cache_nodes(np.concatenate([idx, new]), fr)
        self._cache_corner_nodes(np.concatenate([idx, new]), kids, fr)
        if spent is None:
            spent = pv.shape[0] * pv.shape[1] if pv is not None else 0
        self.evaluations += fr.shape[0] * fr.shape[1] + spent
        return key, new, int(pd.sum()) + int(raised.sum())


    def _audit(self) -> str | None:
        """Audit the partition before claiming convergence (issue 12 item 4).

        Splits the regions holding most of the value (largest ``|value|``,
        up to :data:`AUDIT_VALUE_SHARE` of the sum, at most :data:`AUDIT_COST`
        times the evaluations so far and at least :data:`AUDIT_MIN` regions) —
        not only those holding most of the estimated error; beside them,
        the region with the largest error estimate too, where that estimate
        weighs (:data:`AUDIT_TOP_SHARE` of the total error, or a non-smooth
        signature or a watch; 2-D: always).  Boxes are
        bisected along their widest axis (ties: not the axis the rule would
        choose), so the children's nodes form a second node set that also
        reaches where the parent's rule had none; the largest-error region
        along the rule's axis, where its error comes from.  The children replace their
        parents like any split, with the same split check.  The audit passes
        when every audited parent agrees with its children within its
        estimate; otherwise the corrected estimates keep the run refining and
        the next convergence is audited again.

        Returns None after an audit step, or a final status when no audit is
        possible (budget left for none: ``"budget-spent"``; nothing
        splittable: ``"converged"`` with the audit recorded as impossible).
        """
        st, s = self.store, self.settings
        # 2-D boxes are audited by a split along both axes (4 children): a bisection only measures the error
        # along its own axis (splitting parallel to a kink, or across a smooth direction, leaves D = 0); tensor
        # Gauss-Kronrod boxes are first checked on a lattice (_audit_check), and split only when that fails
        both = (self.geometry.kind == "box" and self.geometry.split_policy == "bisect" and self.domain.dim == 2)
        # simplices whose error sits mostly in non-smooth regions are audited through a whole cycle of d bisections
        # (2^d children): a bisection along a singular face measures none of a region's error (x0^-1/2 on the
        # 2-D simplex at rel_tol 3e-2 converged after 475 evaluations 3x beyond its goal)
        cycle = False
        if self.geometry.kind == "simplex" and self.domain.dim > 1:
            fl, e = self._flagged()
            cycle = bool(e[fl != 0].sum() >= 0.5 * e.sum())
        per = self._per_split() * (2 if both else 1) * (2 ** (self.domain.dim - 1) if cycle else 1)
        afford = (s.budget - self.evaluations) // per
        if afford <= 0:
            self.message = ("the error estimate met the goal, but no budget was left to audit the partition "
                            "before claiming convergence; raise the budget to complete the check")
            return "budget-spent"
        w = np.abs(st["value"])
        w = w[:, 0] if self.m == 1 else (w * self.key_weight).max(axis=1)
        w_total = float(w.sum())
        order = np.argsort(-w, kind="stable")
        can = self.geometry.splittable({name: st[name][order] for name in self.geometry.columns})
        order = order[can]
        if order.size == 0:
            self.checks["audit"] = "impossible (no region can be split further)"
            self._audit_ok = True
            return "converged"
        cum = np.cumsum(w[order])
        # each failed audit doubles the next one's sample: a failure says the estimates of this run fall short
        # somewhere, and the next sample must reach further than the one that failed
        failed = min(int(self.checks.get("audit_failed", 0)), AUDIT_GROWTH)
        share = 1.0 - (1.0 - AUDIT_VALUE_SHARE) / 2 ** failed
        want = int(np.searchsorted(cum, share * cum[-1], side="left")) + 1 if cum[-1] > 0 else 1
        cap = max(AUDIT_MIN, int(AUDIT_COST * self._warm_audit_share() * 2 ** failed * self.evaluations) // per)
        if self.checks.get("audit_failed", 0) and afford < min(want, cap, order.size):
            # after a failed audit, a sample cut short by the budget cannot pass: a one-region sample at the end
            # of the budget passed after seven failures (Genz C0, 3-D, converged 7x beyond its reported error)
            self.message = ("the error estimate met the goal, but an earlier audit found error the estimates had "
                            "missed and the budget left cannot pay for a full audit; raise the budget to complete "
                            "the check")
            return "budget-spent"
        k = max(1, min(want, cap, int(afford), order.size))
        # besides the regions holding most of the value, those with a non-smooth signature holding most error:
        # their estimates are the least certain (up to half of the sample)
        flagged = order[(st["flags"][order] & _NON_SMOOTH) != 0]
        if flagged.size and k >= 2:
            worst = flagged[: k // 2]                   # order is by |value|, descending
            rest = order[~np.isin(order, worst)][: k - worst.size]
            idx = np.sort(np.concatenate([worst, rest]))
        else:
            idx = np.sort(order[:k])
        # and the region with the largest error estimate, the one the run's own estimates trust least: a coarse
        # region whose rules are not yet asymptotic can understate its error several times (a 5-D Gaussian draw
        # at 1e-4 converged 1.3x off with its largest region 3.5x under-estimated and never audited)
        # (when it is in the value sample already, it is split along the rule's axis all the same: split along the
        # widest other axis, parallel to a 1 % kink across the rule's, its children agreed with it and a 5-D run
        # converged 12x beyond its goal; but not a one-region run's only region, whose audit split is the one
        # second node set across the directions its rule did not choose: along the rule's axis, narrow bumps and
        # slabs between the nodes went unseen, 4 more silent answers in benchmarks/stress.py, d = 3..6)
        top = order[int(np.argmax(st["key"][order]))]
        top_only = False                                # the largest-error region is no value region of the sample
        # (beside the value sample only where its estimate weighs: AUDIT_TOP_SHARE of the total, or a signature or
        # a watch; the 2-D audit always takes it)
        weighs = (both or (st["flags"][top] & (_NON_SMOOTH | FLAG_WATCH)) != 0
                  or bool(np.any(st["error"][top] >= AUDIT_TOP_SHARE * self.total_error)))
        if top not in idx:
            if k < afford and weighs:
                idx = np.sort(np.append(idx, top))
                k += 1
                top_only = True
            else:
                top = -1
        elif st.n == 1:
            top = -1
        elif k < afford and self._singular_known():
            # the value sample's region is the largest-error one, split along the rule's axis; beside a known
            # singular face or point the partition refines across it alone, and a split along that axis moves no
            # node line along the others: the next value region joins the sample, split across its widest other
            # axis (x0^(-1/2) (x1 + x2 + x3) + 0.01 (x1 + x2 + x3 > 2.566) on [0, 1]^4 at 1e-6: every split and
            # the audit's along x0, the jump between the same node lines of every box, converged 15x beyond
            # its goal)
            nxt = order[~np.isin(order, idx)][:1]
            if nxt.size:
                idx = np.sort(np.append(idx, nxt))
                k += 1
        straddle = np.full(0, -1, np.intp)
        if not both and self.geometry.kind == "box" and self.geometry.split_policy == "bisect" and k < afford:
            more, ax_more = self._straddlers(idx, int(afford) - k)
            straddle = np.full(k, -1, np.intp)
            # a value region that straddles such a feature is split across it (not the largest-error region)
            inx = np.isin(more, idx) & (more != top)
            where = np.searchsorted(idx, more[inx])
            straddle[where] = ax_more[inx]
            more, ax_more = more[~np.isin(more, idx)], ax_more[~np.isin(more, idx)]
            if more.size or inx.any():
                idx = np.concatenate([idx, more])
                o = np.argsort(idx, kind="stable")
                straddle = np.concatenate([straddle, ax_more])[o]
                idx = idx[o]
                k = len(idx)
                self.checks["audit_straddlers"] = (int(self.checks.get("audit_straddlers", 0)) + int(more.size)
                                                   + int(inx.sum()))
            else:
                straddle = np.full(0, -1, np.intp)
        if both and AUDIT_LATTICE and k < afford:
            more = self._orphan_leaves()
            more = more[~np.isin(more, idx)][: int(afford) - k]
            if more.size:
                idx = np.sort(np.concatenate([idx, more]))
                k = len(idx)
        parents = {name: st[name][idx] for name in st.columns}
        nch = self.geometry.children_per_split
        self._lattice_miss = None
        if both and AUDIT_LATTICE and self._audit_check(idx, parents, w_total, per):
            return None
        if both:
            first = self.geometry.split({**parents, "axis": np.zeros(k, np.int8)})
            kids = self.geometry.split({**first, "axis": np.ones(2 * k, np.int8)})   # child j of i: row j k + i
            nch = 4
        elif cycle:
            kids = parents
            for _ in range(self.domain.dim):
                kids = self.geometry.split(kids)                                      # child j of i: row j k + i
            nch = 2 ** self.domain.dim
        else:
            if self.geometry.kind == "box" and self.geometry.split_policy == "bisect":
                h = parents["halfw"]
                rule_axis = parents["axis"].astype(np.intp)
                pref = np.where(np.arange(h.shape[1])[None, :] != rule_axis[:, None], h, 0.0)
                # (the added largest-error region is split along the rule's own axis, the direction its error
                # comes from: split along a flat axis its children agree with it whatever its error)
                parents["axis"] = np.where(idx == top, rule_axis, np.argmax(pref, axis=1)).astype(np.int8)
                if straddle.size:
                    parents["axis"] = np.where(straddle >= 0, straddle, parents["axis"]).astype(np.int8)
            kids = self.geometry.split(parents)
        before = self.evaluations
        q, absq, fr = self._evaluate(kids)           # may raise: nothing changed yet
        # the audit's children get vertex probes (Genz-Malik: where they look resolved), unless their parent's
        # vertices were probed and agreed (each child's other vertices lie on the mid-planes, which the split check
        # covers): a one-region run's audit then costs one split, not one split and 2^(d+1) probes.  Tensor
        # Gauss-Kronrod children too: their probes' cubic extrapolation over the last 0.9 % of the diagonal
        # deviated from smooth values by its fourth-order remainder where the cubic term vanished by accident,
        # failing one-region audits of Genz's oscillatory family (12 of 92 in 2-D on tuning seeds 7, 8, 9 at
        # 1e-4 and 1e-6, true errors 1e-10 of the goal) and refining them 3-5x further
        probe = ((np.ones(len(q), dtype=bool) if "diagonal" in self.rule.extra else self._looks_resolved(q, absq))
                 & ~np.tile((parents["flags"] & FLAG_PROBED) != 0, nch))
        if top_only and "diagonal" not in self.rule.extra:
            # the largest-error region's split measures its estimate (its children's nodes are the second opinion);
            # its vertices are the value regions' probes' job unless it carries a signature or a watch
            probe &= ~np.tile((idx == top) & ((parents["flags"] & (_NON_SMOOTH | FLAG_WATCH)) == 0), nch)
        spent = shift = None
        if nch == 2 and self.geometry.kind == "box" and "diagonal" not in self.rule.extra:
            pv, spent, shift = self._sibling_probes(kids, probe)
        else:
            pv = self._probe_values(kids, probe)
        w_sample = float(w[idx].sum())
        _, new_rows, disagreed = self._replace(idx, parents, kids, q, absq, fr, pv, probe, FLAG_AUDITED, nch,
                                               spent=spent, shift=shift)
        self._keep_corner_floors(np.concatenate([idx, new_rows]))
        self._keep_probe_floors(idx, parents, new_rows, nch)
        if both and self._lattice_miss is not None:
            self._lattice_hidden(idx, new_rows, parents, kids, q)
        self.queue.rebuild(st["key"], 1)
        self._exact_totals()
        # the sample's hidden error, extrapolated to the whole partition by value share, must fit in the goal
        scale = w_total / w_sample if w_sample > 0 else float(st.n) / max(1, len(idx))
        hidden = self._missed * scale
        c = self.checks
        c["audits"] += 1
        c["audit_regions"] += int(k)
        c["audit_evaluations"] += int(self.evaluations - before)
        c["audit_disagreed"] += disagreed
        # passed: the extrapolated hidden error fits beside the corrected total, or is small against the goal
        # (then the corrected estimates steer the rest of the run and no new audit is needed)
        goal = self.goal()
        self._audit_ok = bool(np.all(hidden <= np.maximum(goal - self.total_error, AUDIT_SMALL * goal)))
        c["audit"] = "passed" if self._audit_ok else "failed, refining"
        if not self._audit_ok:
            c["audit_failed"] = int(c.get("audit_failed", 0)) + 1
        # what the last failed audit extrapolated: part of the error of a run that ends before passing one
        c["audit_hidden"] = [0.0] * self.m if self._audit_ok else [float(v) for v in hidden]
        return None

    def _straddlers(self, sample: np.ndarray, room: int) -> tuple[np.ndarray, np.ndarray]:
        """Live boxes to add to the audit (rows) and the axis to split each across: boxes with no non-smooth
        signature that hold, along some axis, the whole extent of a box of a feature's lineage (a non-smooth
        signature or a wary ancestor) at least :data:`STRADDLE_RATIO` times narrower there, and meet it along the
        others.  The lineage refined across a feature there (a slab, a ridge, a jump along that axis); the wide
        neighbour's node lines along that axis may all miss it where it continues into that box
        (``benchmarks/stress.py``, seed 31: ``0.84987 < x1 < 0.89992`` in 4-D at 1e-6, converged with half of
        the slab missing in boxes ``[0.25, 0.75] x [0.5, 1] x ...`` between their node lines at 0.84 and 0.92,
        beside neighbours refined down to its faces).  At most ``room`` and :data:`STRADDLE_MAX`, the largest
        ``|value|`` first."""
        st = self.store
        none = (np.zeros(0, np.intp), np.zeros(0, np.intp))
        flags = st["flags"]
        feat = np.nonzero((flags & (_NON_SMOOTH | FLAG_WARY)) != 0)[0]
        wide = np.nonzero((flags & _NON_SMOOTH) == 0)[0]
        if feat.size == 0 or wide.size == 0 or room <= 0:
            return none
        err = st["error"][feat]
        err = err[:, 0] if self.m == 1 else (err * self.key_weight).max(axis=1)
        feat = feat[np.argsort(-err, kind="stable")[:STRADDLE_FEATURES]]
        c, h = st["centre"], st["halfw"]
        flo, fhi, fh = (c[feat] - h[feat]), (c[feat] + h[feat]), h[feat]
        wlo, whi, wh = (c[wide] - h[wide]), (c[wide] + h[wide]), h[wide]
        tol = 1e-12 * np.maximum(1.0, np.abs(c).max())
        found = np.full(len(wide), -1, np.intp)
        for j in range(len(feat)):
            inside = (wlo <= flo[j] + tol) & (whi >= fhi[j] - tol)                      # (n, d)
            meet = (wlo <= fhi[j] + tol) & (whi >= flo[j] - tol)                         # (n, d)
            narrow = wh >= STRADDLE_RATIO * fh[j][None, :]
            ax = inside & narrow
            hit = ax.any(axis=1) & meet.all(axis=1) & (found < 0)
            if hit.any():
                found[hit] = np.argmax(ax[hit], axis=1)
        rows = np.nonzero(found >= 0)[0]
        if rows.size == 0:
            return none
        w = np.abs(st["value"][wide[rows]])
        w = w[:, 0] if self.m == 1 else (w * self.key_weight).max(axis=1)
        # (the sample's regions among them are split across the feature and cost nothing more)
        w = np.where(np.isin(wide[rows], sample), np.inf, w)
        n_in = int(np.isin(wide[rows], sample).sum())
        pick = rows[np.argsort(-w, kind="stable")[:n_in + min(room, STRADDLE_MAX)]]
        return wide[pick], found[pick]

    def _keep_probe_floors(self, idx: np.ndarray, parents: dict, new: np.ndarray, nch: int) -> None:
        """After the audit's split of the parents ``idx`` (children ``new``, block layout), the children of a parent
        whose probes deviated (:data:`FLAG_PROBE`) share at least that parent's error: the audit's split is a
        second node set at the parent's scale, and children whose nodes and probes miss the feature as the
        parent's did show nothing of it gone (``exp(-|x|^2) + 0.11`` beyond ``|x - (0,0,0,1)|_1 < 0.266`` on
        [0, 1]^4 at 1e-4: a probed half-box's floor within the goal, its audit children 2e-6, converged reporting
        0.22 of its true error)."""
        pf = (parents["flags"] & FLAG_PROBE) != 0
        if not pf.any():
            return
        st, k = self.store, len(idx)
        rows = np.concatenate([idx, new]).reshape(nch, k)[:, pf]                  # (nch, kp)
        err = st["error"][rows]                                                    # (nch, kp, m)
        short = np.maximum(parents["error"][pf] - err.sum(axis=0), 0.0)            # (kp, m)
        if not (short > 0).any():
            return
        err = err + short[None, :, :] / nch
        self._set_errors(rows.ravel(), err.reshape(-1, err.shape[2]))
        kept = int((short > 0).any(axis=1).sum())
        self.checks["probe_floors_kept"] = int(self.checks.get("probe_floors_kept", 0)) + kept

    def _keep_corner_floors(self, rows: np.ndarray) -> None:
        """Give the audit's children ``rows`` that hold a domain vertex where a corner check found a jump
        (``checks["corner_floors"]``: the vertex and the floor it set) at least that floor.  The audit's split is a
        second node set at the parent's scale, coarser than the check's smallest box that found the jump: its
        children's nodes and probes miss the jump as the parent's did, and without the floor the run reported
        1e-5 of its error (a jump of 0.4 % filling ``|x - v|_1 < 0.26`` at a vertex of the unit cube beside
        ``exp(0.3 sum x)``, 3-D, 1e-4: the check's floor 7.4e-5, the audit's children 4e-10, the true error
        1.1e-5)."""
        entries = [e for e in self.checks.get("corner_floors", []) if len(e) == self.domain.dim + self.m]
        if not entries or rows.size == 0:
            return
        st, d = self.store, self.domain.dim
        g = {name: st[name][rows] for name in self.geometry.columns}
        lo, hi = self.geometry.engine_bounds(g)
        e = np.asarray(entries, dtype=float)
        v, fl = e[:, :d], e[:, d:]
        tol = 1e-12 * np.maximum(1.0, np.abs(v).max())
        inside = ((lo[:, None, :] <= v[None, :, :] + tol) & (v[None, :, :] <= hi[:, None, :] + tol)).all(axis=2)
        if not inside.any():
            return
        need = np.where(inside[:, :, None], fl[None, :, :], 0.0).max(axis=1)          # (rows, m)
        raise_ = (need > st["error"][rows]).any(axis=1)
        if not raise_.any():
            return
        r = rows[raise_]
        self._set_errors(r, np.maximum(st["error"][r], need[raise_]))
        self.checks["corner_floors_kept"] = int(self.checks.get("corner_floors_kept", 0)) + int(raise_.sum())

    def _lattice_hidden(self, idx: np.ndarray, new_rows: np.ndarray, parents: dict, kids: dict,
                        q: np.ndarray) -> None:
        """After a failed lattice check (:meth:`_audit_check`) and the split into four that followed it: what the
        lattice measured the box's rule missed (``vol * mean(f - P)``, signed) beyond the split's correction
        (children's sum minus the box's value) is error no estimate holds where it is more than the children's
        estimates (their nodes can miss a slab between the box's nodes as the box's did: the split then measures
        nothing and the audit passed, 2-D stress runs 290x beyond their goal).  The box is remembered with what is
        left (``checks["lattice_groups"]``) and the lattice points that carry it (``checks["lattice_hits"]``: those
        whose residual is at least :data:`LATTICE_HIT_SHARE` of the box's largest, each with its share); the
        children holding them get :data:`AUDIT_LATTICE_MARGIN` times their share as a floor added to their
        estimates and a probe signature, and the audit counts it as missed.  :meth:`_carry_lattice_hits` follows it
        down the splits inside the box."""
        S, res, ref = self._lattice_miss
        self._lattice_miss = None
        k, m = len(idx), q.shape[2]
        corr = q[:, 0, :].reshape(4, k, m).sum(axis=0) - parents["value"]
        left = S - corr                                                                     # (k, m), signed
        kid_err = self.store["error"][np.concatenate([idx, new_rows])].reshape(4, k, m).sum(axis=0)
        hidden = (AUDIT_LATTICE_MARGIN * np.abs(left) > kid_err).any(axis=1)
        if not hidden.any():
            return
        # (a group recorded before the points' range was kept, as in an older checkpoint: the whole box is its range)
        d = self.domain.dim
        groups = [list(g_) + list(np.subtract(g_[:d], g_[d:2 * d])) + list(np.add(g_[:d], g_[d:2 * d]))
                  if len(g_) == 2 * d + 2 * m else list(g_) for g_ in self.checks.get("lattice_groups") or []]
        hits = list(self.checks.get("lattice_hits") or [])
        mag = np.abs(res).max(axis=2)                                                       # (k, n)
        for i in np.nonzero(hidden)[0]:
            sel = mag[i] >= LATTICE_HIT_SHARE * mag[i].max()
            share = mag[i, sel] / mag[i, sel].sum()
            pts = parents["centre"][i] + parents["halfw"][i] * ref[sel]
            hits += np.concatenate([pts, np.full((len(share), 1), len(groups)), share[:, None]], axis=1).tolist()
            groups.append(np.concatenate([parents["centre"][i], parents["halfw"][i], left[i],
                                          np.abs(left[i]), pts.min(axis=0), pts.max(axis=0)]).tolist())
        self.checks["lattice_groups"], self.checks["lattice_hits"] = groups, hits
        self._lattice_floors(np.concatenate([idx, new_rows]), kids)
        self._missed = self._missed + AUDIT_LATTICE_MARGIN * np.abs(left[hidden]).sum(axis=0)
        self.checks["lattice_hidden"] = int(self.checks.get("lattice_hidden", 0)) + int(hidden.sum())

    def _orphan_leaves(self) -> np.ndarray:
        """Rows of the live boxes the audit checks again for a lattice check's hidden error whose points are all
        gone (their boxes refined finer than the lattice) while much of it is left (:meth:`_lattice_hidden`): the
        rest of a slab lies in boxes no point of it lies in.  The largest such boxes inside the checked box, at most
        :data:`LATTICE_ORPHAN_BOXES`, among those that meet an axis line through the check's points that carried the
        error (their range on some axis; ``checks["lattice_groups"]`` keeps it) where any does: those points' boxes
        are refined around them, and the largest boxes of the checked box lay beside the feature (a slab worth 3e-4
        of the integral, read by one point of the first region's lattice, held between the nodes of five boxes along
        it while the largest boxes of the domain were checked: converged 188x beyond its goal at 1e-6, now 0.18x
        after 197,893 evaluations instead of 50,103); the box is forgotten (a failed check there starts a new
        one)."""
        groups = self.checks.get("lattice_groups")
        if not groups:
            return np.zeros(0, np.int64)
        G = np.asarray(groups, dtype=float)
        d, m = self.domain.dim, self.m
        H = np.asarray(self.checks.get("lattice_hits") or [], dtype=float).reshape(-1, d + 2)
        left, first = np.abs(G[:, 2 * d:2 * d + m]), G[:, 2 * d + m:2 * d + 2 * m]
        orphan = (left > LATTICE_HIT_LEFT * first).any(axis=1)
        orphan[H[:, d].astype(int)] = False
        if not orphan.any():
            return np.zeros(0, np.int64)
        st = self.store
        c, h = st["centre"], st["halfw"]
        out = []
        for gi in np.nonzero(orphan)[0]:
            gc, gh = G[gi, :d], G[gi, d:2 * d]
            inside = np.all(np.abs(c - gc) + h <= gh * (1 + 1e-12), axis=1)
            inside &= h.max(axis=1) >= gh.min() / LATTICE_HIT_FINE
            if G.shape[1] >= 4 * d + 2 * m:                     # the range of the points that carried it
                plo, phi = G[gi, 2 * d + 2 * m:3 * d + 2 * m], G[gi, 3 * d + 2 * m:4 * d + 2 * m]
                meets = inside & np.any((c - h <= phi) & (c + h >= plo), axis=1)
                if meets.any():
                    inside = meets
            rows = np.nonzero(inside)[0]
            rows = rows[np.argsort(-np.prod(h[rows], axis=1), kind="stable")][:LATTICE_ORPHAN_BOXES]
            out.append(rows)
            G[gi, 2 * d:2 * d + m] = 0.0
        self.checks["lattice_groups"] = G.tolist()
        self.checks["lattice_orphans"] = int(self.checks.get("lattice_orphans", 0)) + int(orphan.sum())
        return np.unique(np.concatenate(out)).astype(np.int64)

    def _lattice_floors(self, rows: np.ndarray, g: dict) -> None:
        """Add to the store's regions ``rows`` (boxes ``g``, just written) the lattice's hidden error of the points
        they hold (:meth:`_lattice_hidden`), with a probe signature."""
        add = self._hit_floors(g, self.store["error"].shape[1])
        hit = (add > 0).any(axis=1)
        if not hit.any():
            return
        st = self.store
        r = rows[hit]
        self._set_errors(r, st["error"][r] + add[hit])
        st["flags"][r] = st["flags"][r] | FLAG_PROBE

    def _hit_floors(self, g: dict, m: int) -> np.ndarray:
        """(b, m): :data:`AUDIT_LATTICE_MARGIN` times the hidden error left of the lattice points each box of ``g``
        holds."""
        out = np.zeros((len(g["centre"]), m))
        hits = self.checks.get("lattice_hits")
        if not hits:
            return out
        H = np.asarray(hits, dtype=float)
        G = np.asarray(self.checks["lattice_groups"], dtype=float)
        d = self.domain.dim
        owner = self._owners(H[:, :d], g["centre"], g["halfw"])
        ok = owner >= 0
        if ok.any():
            gid = H[ok, d].astype(int)
            np.add.at(out, owner[ok], AUDIT_LATTICE_MARGIN * np.abs(G[gid, 2 * d:2 * d + m]) * H[ok, d + 1:d + 2])
        return out

    @staticmethod
    def _owners(pts: np.ndarray, centre: np.ndarray, halfw: np.ndarray) -> np.ndarray:
        """Index of the first box (``centre``, ``halfw``) holding each point, -1 for none."""
        inside = np.all(np.abs(pts[None, :, :] - centre[:, None, :]) <= halfw[:, None, :], axis=2)   # (b, p)
        owner = np.argmax(inside, axis=0)
        return np.where(inside.any(axis=0), owner, -1)

    def _carry_lattice_hits(self, parents: dict, kids: dict, child_sum: np.ndarray,
                            err: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Splits inside a box whose lattice check left hidden error (:meth:`_lattice_hidden`) measure it: their
        corrections (children's sum minus parent) are taken off what is left, and once no more than
        :data:`LATTICE_HIT_LEFT` of it is, the box and its points are forgotten; otherwise
        the children holding its points get their share of what is left added to their estimates.  Returns the
        children's errors and which of them got some."""
        none = np.zeros(len(err), dtype=bool)
        groups = self.checks.get("lattice_groups")
        if not groups or self.geometry.kind != "box":
            return err, none
        G = np.asarray(groups, dtype=float)
        d, m = self.domain.dim, err.shape[1]
        c, h = parents["centre"], parents["halfw"]
        within = np.all(np.abs(c[:, None, :] - G[None, :, :d]) + h[:, None, :]
                        <= G[None, :, d:2 * d] * (1 + 1e-12), axis=2)                    # (k, g)
        if within.any():
            corr = child_sum - parents["value"]
            G[:, 2 * d:2 * d + m] -= within.T.astype(float) @ corr
            left, first = G[:, 2 * d:2 * d + m], G[:, 2 * d + m:2 * d + 2 * m]
            done = np.all(np.abs(left) <= LATTICE_HIT_LEFT * first, axis=1)
            G[done, 2 * d:2 * d + m] = 0.0
            self.checks["lattice_groups"] = G.tolist()
            if done.any():
                H = np.asarray(self.checks.get("lattice_hits") or [], dtype=float).reshape(-1, d + 2)
                self.checks["lattice_hits"] = H[~done[H[:, d].astype(int)]].tolist()
        hits = self.checks.get("lattice_hits")
        if hits:
            # a point whose box is finer than the lattice (its node lines closer than the lattice's) is the
            # rule's to see from there on
            H = np.asarray(hits, dtype=float)
            G = np.asarray(self.checks["lattice_groups"], dtype=float)
            kid = self._owners(H[:, :d], kids["centre"], kids["halfw"])
            fine = np.zeros(len(H), dtype=bool)
            at = kid >= 0
            fine[at] = (kids["halfw"][kid[at]].max(axis=1)
                        < G[H[at, d].astype(int), d:2 * d].min(axis=1) / LATTICE_HIT_FINE)
            if fine.any():
                self.checks["lattice_hits"] = H[~fine].tolist()
        add = self._hit_floors(kids, m)
        none = (add > 0).any(axis=1)
        return err + add, none

    def _audit_check(self, idx: np.ndarray, parents: dict, w_total: float, per: int) -> bool:
        """The 2-D audit's first, cheaper step (tensor Gauss-Kronrod boxes ``parents``, rows ``idx``): a quasi-Monte
        Carlo estimate of what each sampled box's rule misses, ``vol * mean(f - P)`` over the :data:`AUDIT_LATTICE`
        points of a Fibonacci lattice in the box (:func:`_fibonacci_lattice`), where ``P`` is the tensor interpolant
        of the box's own ``15^2`` node values, whose integral is the rule's value (the K15 rule is interpolatory):
        ``integral(f - P)`` is the rule's true error; ``f - P`` is the interpolation error where ``f`` is smooth
        (the estimate is then tiny) and the feature itself where a slab, a ridge or a bump lies between the nodes.
        The lattice's points have ``N`` distinct coordinates on each axis (and along the diagonals: ``N`` is
        prime), so it crosses each gap between the rule's node lines many times, where a split into four
        Gauss-Kronrod boxes (900 evaluations) has 30 node lines per axis.  The estimate counts
        :data:`AUDIT_LATTICE_MARGIN` times: a feature that covers a few lattice points is measured only roughly
        (a bump of width 0.029 at (0.25, 0.0128): ``D`` read 1.0e-6 against a true 2.6e-6).  It costs the node
        values again where the run does not hold them (it keeps those of up to :data:`NODE_CACHE_REGIONS` live
        regions, :meth:`_cache_nodes`) and the lattice: ``N`` or ``225 + N`` evaluations a box against ``4 * 225``.

        The audit passes here when what the parents' estimates missed by this measure, extrapolated to the
        partition by value share as in the full audit, fits the goal; the boxes stay as they are, their estimates
        raised to the measure where it is larger (as a split audit's children's corrected estimates are).  Otherwise (a
        lattice value that is not finite, or the budget cannot pay for this step and the full audit after it)
        returns False and the full audit follows.  Measured (``benchmarks/stress.py --dims 2``, 80 runs per
        tolerance, seed 31; Genz smooth families, 2-D, 10 draws, tuning seeds 7, 8, 9): silent wrong answers
        7 -> 7 at 1e-4 and 8 -> 8 at 1e-6, none added run for run (with the margin 1: one added, the bump above
        at 2.1 times its goal; with two interleaved lattices of 2 x 89 or 2 x 144 points instead, five and four
        added, thin oblique slabs); Genz smooth 2-D evaluations against the first release 3.82x -> 2.56x at 1e-4,
        2.84x -> 2.07x at 1e-6, none silent; Genz C0 and discontinuous 2-D (240 runs) 0 silent before and after,
        evaluations -4 %.  A second opinion from the four quarters with a 10-point Gauss-Legendre tensor rule
        (400 evaluations) cost about as little but added two silent answers at 1e-6 (a ridge at 0.017 from a face,
        the bump above)."""
        if "nodes_1d" not in self.rule.extra:
            return False
        k = len(idx)
        lx, ly = _lattice_basis(AUDIT_LATTICE, tuple(float(v) for v in self.rule.extra["nodes_1d"]))
        n = lx.shape[0]
        cached = np.zeros(k, dtype=bool)
        fr = None
        if self._node_cache is not None:
            rows, values = self._node_cache
            pos = {int(r): i for i, r in enumerate(rows)}
            at = np.array([pos.get(int(r), -1) for r in idx])
            cached = at >= 0
            if cached.any():
                fr = np.empty((k, *values.shape[1:]))
                fr[cached] = values[at[cached]]
        if self.evaluations + self.rule.size * int((~cached).sum()) + n * k + per * k > self.settings.budget:
            return False                                       # the full audit after it must stay affordable
        before = self.evaluations
        if not cached.all():                                   # node values the cache does not hold: again
            geo = {name: parents[name][~cached] for name in self.geometry.columns}
            _, _, again = self._evaluate(geo)
            self.evaluations += again.shape[0] * again.shape[1]
            if fr is None:
                fr = np.empty((k, *again.shape[1:]))
            fr[~cached] = again
        ref = _fibonacci_lattice(AUDIT_LATTICE)                                 # (n, 2) in [-1, 1]^2
        t = (parents["centre"][:, None, :] + parents["halfw"][:, None, :] * ref[None]).reshape(-1, 2)
        fv = self._values_at(t).reshape(k, n, -1)
        self.evaluations += fv.shape[0] * fv.shape[1]
        p1 = len(self.rule.extra["nodes_1d"])
        interp = np.einsum("ni,kijm,nj->knm", lx, fr.reshape(k, p1, p1, -1), ly)
        vol = self.geometry.volume(parents)
        D = AUDIT_LATTICE_MARGIN * np.abs((fv - interp).mean(axis=1)) * vol[:, None]
        c_ = self.checks
        c_["audit_checks"] = int(c_.get("audit_checks", 0)) + 1
        c_["audit_check_evaluations"] = int(c_.get("audit_check_evaluations", 0)) + int(self.evaluations - before)
        c_["audit_evaluations"] += int(self.evaluations - before)
        ok = bool(np.isfinite(D).all())
        if ok:
            missed = np.maximum(D - parents["error"], 0.0).sum(axis=0)
            w = np.abs(parents["value"])
            w = w[:, 0] if self.m == 1 else (w * self.key_weight).max(axis=1)
            w_sample = float(w.sum())
            scale = w_total / w_sample if w_sample > 0 else float(self.store.n) / max(1, k)
            goal = self.goal()
            ok = bool(np.all(missed * scale <= np.maximum(goal - self.total_error, AUDIT_SMALL * goal)))
        if not ok:
            c_["audit_check_failed"] = int(c_.get("audit_check_failed", 0)) + 1
            if np.isfinite(D).all():                           # read by _lattice_hidden after the split
                self._lattice_miss = ((fv - interp).mean(axis=1) * vol[:, None], fv - interp, ref)
            return False
        c_["audits"] += 1
        c_["audit_regions"] += int(k)
        c_["audit"] = "passed"
        c_["audit_hidden"] = [0.0] * self.m
        self._audit_ok = True
        # as the corrected estimates of a split audit's children do, the boxes' estimates take what the lattice
        # measured beyond them (a slab that it saw and that fits the goal is still reported; 2-D stress set at
        # 1e-4: true error within the reported one in 67 -> 71 of 80 runs, evaluations +0.04 %)
        if (D > parents["error"]).any():
            st = self.store
            self._set_errors(idx, np.maximum(parents["error"], D))
            self.queue.rebuild(st["key"], 1)
            self._exact_totals()
        return True

    def _cache_nodes(self, rows: np.ndarray, fr: np.ndarray) -> None:
        """Keep the node values ``fr`` of the regions just written to ``rows`` beside those of the other live
        regions kept so far, for the 2-D audit's lattice check, while the rule is the 2-D tensor Gauss-Kronrod and
        they are at most :data:`NODE_CACHE_REGIONS` regions (beyond it, those just written if they fit): small runs
        then pay the check's lattice only."""
        if not (AUDIT_LATTICE and self.domain.dim == 2 and "nodes_1d" in self.rule.extra
                and len(rows) <= NODE_CACHE_REGIONS):
            self._node_cache = None
            return
        rows = np.asarray(rows, np.int64)
        if self._node_cache is not None and fr.shape[1:] == self._node_cache[1].shape[1:]:
            old_rows, old_values = self._node_cache
            keep = ~np.isin(old_rows, rows)
            if int(keep.sum()) + len(rows) <= NODE_CACHE_REGIONS:
                self._node_cache = (np.concatenate([old_rows[keep], rows]),
                                    np.concatenate([old_values[keep], fr]))
                return
        self._node_cache = (rows.copy(), fr.copy())

    def _cache_corner_nodes(self, rows: np.ndarray, g: dict, fr: np.ndarray) -> None:
        """Keep the node values ``fr`` of the Genz-Malik boxes ``g`` just written to ``rows`` that hold a vertex of
        the domain (at most ``2^d`` live at a time), and forget those of the rows just rewritten that do not: the
        domain-corner checks (:meth:`_domain_corners`) read a box's centre and corner nodes and its smooth models
        from them instead of evaluating the integrand there again."""
        if (self.geometry.kind != "box" or "corner5" not in self.rule.extra.get("groups", {})
                or not has_probes(self.rule) or "centre" not in g or self.store is None):
            return
        rows = np.asarray(rows, np.int64)
        at_lo, at_hi = self._at_domain_faces(g)
        holds = (at_lo | at_hi).all(axis=1)
        box = np.concatenate([g["centre"], g["halfw"]], axis=1)
        if self._corner_cache is not None and fr.shape[1:] == self._corner_cache[1].shape[1:]:
            old_rows, old_values, old_box = self._corner_cache
            keep = ~np.isin(old_rows, rows)
            self._corner_cache = (np.concatenate([old_rows[keep], rows[holds]]),
                                  np.concatenate([old_values[keep], fr[holds]]),
                                  np.concatenate([old_box[keep], box[holds]]))
        else:
            self._corner_cache = (rows[holds], fr[holds].copy(), box[holds])

    def _domain_bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """The domain's lower and upper corners in engine coordinates (the geometry's own: the same before and
        after a resume, where the live regions' extremes could differ from them in the last digit)."""
        if self._domain_box is None:
            self._domain_box = self.geometry.map_extent()
        return self._domain_box

    def _domain_tol(self) -> np.ndarray:
        """Per axis (d,): how far apart two engine coordinates may lie and still be the same point (1e-12 of the
        domain's scale, for the last digits a chain of halvings may leave)."""
        dlo, dhi = self._domain_bounds()
        return 1e-12 * np.maximum(1.0, np.abs(dlo) + np.abs(dhi))

    def _at_domain_faces(self, g: dict) -> tuple[np.ndarray, np.ndarray]:
        """Per box of ``g`` and axis (k, d): whether its lower / upper end lies on the domain's
        (:meth:`_domain_tol`)."""
        lo, hi = self.geometry.engine_bounds(g)
        dlo, dhi = self._domain_bounds()
        tol = self._domain_tol()
        return np.abs(lo - dlo) <= tol, np.abs(hi - dhi) <= tol

    def _corner_nodes(self, rows: np.ndarray, c: np.ndarray, h: np.ndarray,
                      use: np.ndarray) -> tuple[np.ndarray | None, np.ndarray]:
        """The node values kept for the live rows ``rows`` (boxes ``c``, ``h``) where ``use``
        (:meth:`_cache_corner_nodes`): (values (j, p, m), the index into them of each row; -1 where none is kept
        for that very box)."""
        at = np.full(len(rows), -1, dtype=np.intp)
        if self._corner_cache is None or not use.any():
            return None, at
        crow, values, box = self._corner_cache
        where = {int(r): i for i, r in enumerate(crow)}
        for j in np.nonzero(use)[0]:
            i = where.get(int(rows[j]), -1)
            if i >= 0 and np.array_equal(box[i], np.concatenate([c[j], h[j]])) and values.shape[2] == self.m:
                at[j] = i
        return values, at

    def _rank_corners(self, g: dict, fr: np.ndarray, pv: np.ndarray | None, probe: np.ndarray) -> None:
        """Score the domain's vertices by how far the sharpest smooth model misses the first region's vertex
        probes (:func:`~cubage.engine.estimate.vertex_misses`), when that region is the whole domain (one
        Genz–Malik box, probed): :meth:`_domain_corners` checks a box holding several domain vertices at the
        best-scored one (``checks["corner_rank"]``, in :func:`~cubage.engine.geometry.vertex_signs` order)."""
        if (fr.shape[0] != 1 or pv is None or not probe[0] or self.geometry.kind != "box"
                or "diagonal" in self.rule.extra or not has_probes(self.rule) or self.domain.dim > 12):
            return
        grp = self.rule.extra["groups"]["corner5"]
        nv = grp[1] - grp[0]
        self._first_probes = (self.geometry.probe_points(g, _estimate.PROBE_POSITION).copy(), pv[0, :nv, :].copy())
        axes, pairs = self._node_lines(fr)
        score = _estimate.vertex_misses(fr[:, 0, :], fr[:, grp[0]:grp[1], :], pv[:, :nv, :],
                                        float(np.abs(self.rule.nodes[grp[0]]).max()),
                                        np.abs(fr).max(axis=1), axes, pairs)
        self.checks["corner_rank"] = [float(v) for v in score[0]]

    def _domain_corners(self) -> str | None:
        """Before an audit: probe the domain's vertices in the live boxes holding them that no probe has looked
        at (Genz–Malik boxes; tensor rules probe every region).  Returns ``"audit"`` when none deviates (the
        audit follows), None when one did (its floor raised the estimate: the goal is checked again), or
        ``"budget-spent"`` when the probes cannot be paid.

        A feature cut off near a vertex of the domain (a jump on ``x + y + z > 2.87`` in the unit cube) lies
        beyond the corner nodes of every box holding that vertex until the partition refines there, and only
        probes see it; but boxes are probed only below a non-smooth signature, and a coarse ancestor's probe
        holds its vertices to the allowance of its own scale (``1/|x| + 0.01 (x + y + z > 2.87)`` at 1e-6:
        ``[0.5, 1]^2 x [0, 1]`` was probed and agreed, its descendants never were, and the run converged 3.2x
        beyond its goal with the corner missing).  Each such box gets the two probes of the diagonal through the
        domain's vertex (and the second probe per vertex on it) with the centre and the two corner nodes on that
        diagonal (:func:`~cubage.engine.estimate.probe_errors`), 7 evaluations (5 from the second level on: the
        vertex probe and the centre of the level above are read as this box's vertex probe and opposite probe, at
        their own positions on its diagonal, 2^-20 of its half-width beside its own probes, ``checks["corner_reused"]``;
        the vertex probe is evaluated again once it lies :data:`SHIFT_MAX` away; at the first level the first
        region's vertex probe is read likewise where it lies within :data:`SHIFT_MAX` of the box's own, up to about
        three bisections per axis, ``_first_probes``, ``checks["corner_first_reused"]``), one fewer at every level:
        no mid probe towards the opposite vertex (``checks["corner_mid_spared"]``; the check is of the domain's
        vertex, and the direction away from it keeps its long check; smooth Genz families 4-6-D at 1e-4, tuning
        seeds 7, 8, 9, 10 draws: corner evaluations 20,493 -> 16,065).  A check that agreed bounds a jump
        at the vertex only by its allowance there (the cubic's own terms, which shrink with the square of the
        box's size): where that allowance times the box's volume beyond its corner node exceeds the vertex's share
        of :data:`AUDIT_SMALL` times the goal, the box of half the size holding the vertex is checked in turn, up to
        :data:`CORNER_LEVELS` times (``1/|x| + 0.01`` beyond ``1 - x + y + z < 0.13``: ``[0.75, 1] x [0, 0.25] x
        [0, 0.5]`` read a deviation of 0.0142 against an allowance of 0.0155).  At most ``7 * CORNER_LEVELS * 2^d``
        evaluations per audit.  A deviation found at any of these scales is a jump of about its size at the vertex
        that may fill all of the real box beyond its corner node: that, besides the probe floor, is the box's floor.
        Boxes flagged non-smooth are skipped (they are refined anyway), and so are boxes inside one whose check at
        the same domain vertex passed at an earlier audit (``checks["corner_seen"]``: centre, half-widths and the
        vertex's signs): the audit's split makes such boxes right after the check.  A box whose own vertex probes
        agreed (probed) is checked from half its size down: its probes were the check at its own scale, and let a
        jump pass within that scale's allowance (``exp(-|x|^2) + 0.1`` beyond ``x + y + z > 2.8``, one region at
        1e-4: converged 3.2x beyond its goal; ``+ 0.01`` near ``(0, 1, 0, 1)`` in 4-D at 1e-6: 10.8x).  A box
        holding several domain vertices (the first region and the audit's children of it) is checked at the one
        whose first-region probe the smooth models missed most (:meth:`_rank_corners`), not the first of them.
        From the second level on, a check is read with the one above it (the probe at the vertex is the same point
        at both): the jump the two deviations admit under a smooth model whose residual shrinks at least
        :data:`CORNER_DECAY` times per halving caps the allowance, and a deviation that shrank less than
        :data:`CORNER_STEADY` times under every model (values of one sign) is a jump's."""
        if self.geometry.kind != "box" or "diagonal" in self.rule.extra or not has_probes(self.rule):
            return "audit"
        st, d = self.store, self.domain.dim
        g = {name: st[name] for name in self.geometry.columns}
        at_lo, at_hi = self._at_domain_faces(g)
        tol = self._domain_tol()
        # a box holds a domain vertex when every axis ends at the domain's bound (its sign on that axis)
        holds = (at_hi | at_lo).all(axis=1)
        holds &= (st["flags"] & _NON_SMOOTH) == 0
        rows = np.nonzero(holds)[0]
        # a box holding several domain vertices takes the one whose probe in the first region the smooth models
        # missed most (a jump there adds to that vertex's miss alone; the first of them without a ranking)
        signs = vertex_signs(d)
        can = ((signs[None, :, :] > 0) & at_hi[rows][:, None, :]) | ((signs[None, :, :] < 0) & at_lo[rows][:, None, :])
        rank = np.asarray(self.checks.get("corner_rank", ()), dtype=float)
        score = rank if rank.shape == (len(signs),) else np.zeros(len(signs))
        pick = np.argmax(np.where(can.all(axis=2), score[None, :], -1.0), axis=1)
        sgn_all = np.where(at_hi, 1.0, -1.0)
        sgn_all[rows] = signs[pick]
        seen = [e for e in self.checks.get("corner_seen", []) if len(e) == 3 * d]
        if rows.size and seen:
            # a box inside one checked at an earlier audit at the same domain vertex is covered: the checks there
            # went down the scales at that vertex (an audit's split makes such boxes right after the check)
            old = np.asarray(seen, dtype=float)
            vert = g["centre"][rows] + g["halfw"][rows] * sgn_all[rows]
            overt = old[:, :d] + old[:, d:2 * d] * old[:, 2 * d:]
            same = (np.abs(vert[:, None, :] - overt[None, :, :]) <= tol).all(axis=2)
            inside = (g["halfw"][rows][:, None, :] <= old[None, :, d:2 * d] + tol).all(axis=2)
            rows = rows[~(same & inside).any(axis=1)]
        if rows.size == 0:
            return "audit"
        sgn = sgn_all[rows]
        k = rows.size
        if self.evaluations + 7 * k > self.settings.budget:
            self.message = ("the error estimate met the goal, but no budget was left to probe the domain's "
                            "corners before claiming convergence; raise the budget to complete the check")
            return "budget-spent"
        c, h = g["centre"][rows], g["halfw"][rows]
        grp = self.rule.extra["groups"]["corner5"]
        a = float(np.abs(self.rule.nodes[grp[0]]).max())
        T, M = _estimate.PROBE_POSITION, _estimate.PROBE_MID
        pos = np.array([0.0, a, -a, T, -T, M, -M])
        coef = _estimate.diagonal_cubic(a)
        # share of a box beyond the plane through its corner node across the diagonal (where a jump hides from
        # every node) and the hidden error each domain vertex may keep
        beyond = (d * (1.0 - a)) ** d / math.factorial(d) / 2 ** d
        share = AUDIT_SMALL * self.goal() / 2 ** d
        fl = np.zeros((k, self.m))
        jump = np.zeros((k, self.m))
        dv = np.zeros(k, dtype=bool)
        todo = np.arange(k)
        vol0 = self.geometry.volume({"centre": c, "halfw": h})
        # a probed box's own vertex probes were its check at its own scale: its checks start at half the size
        probed = (st["flags"][rows] & FLAG_PROBED) != 0
        # the others start at their own size, where their centre and corner nodes are the rule's: read from the
        # node values kept (:meth:`_cache_corner_nodes`) with the box's axis lines and pair groups, whose
        # separable and plane-wave models then may explain the probes too, as they do a region's vertex probes
        nodes, at = self._corner_nodes(rows, c, h, ~probed)
        vidx = ((sgn < 0) * (1 << np.arange(d - 1, -1, -1))[None, :]).sum(axis=1)
        c[probed] = c[probed] + 0.5 * h[probed] * sgn[probed]
        h[probed] = 0.5 * h[probed]
        # each box's signed deviation from each smooth model at the level above (this call): plain f and the
        # transforms of probe_errors' models (log|f| and powers of |f|)
        lams = _estimate.probe_powers(d)
        wcub = _estimate._lagrange_weights(np.array([-T, -a, 0.0, a]), T)
        prev = np.full((1 + len(lams), k, self.m), np.nan)
        nv = 2 ** d
        # from the second level on, two of a check's seven values are the level above's: its probe at the domain's
        # vertex (a point 2^-20 of that box's half-width from the vertex, within SHIFT_MAX of this box's own probe
        # for three levels) and its centre (this box's opposite vertex, 2^-20 of its half-width beside its
        # opposite probe): the checks read them at their own positions on the diagonal
        above = np.full((k, 2, self.m), np.nan)                 # the level above's vertex probe and centre
        # per box and axis: how far the probe value read for the domain's vertex lies from it, in units of its own
        # probe's distance ((1 - T) of the half-width): 1 for its own probe, 2^n for the probe n levels above, the
        # first region's ratio of half-widths for the first region's probe (first level)
        rr = np.ones((k, d))
        first = self._first_probes
        if first is not None and (first[0].shape != (nv, d) or first[1].shape[1] != self.m):
            first = None
        for level in range(CORNER_LEVELS):
            if todo.size == 0:
                break
            if self.evaluations + 7 * todo.size > self.settings.budget:
                break
            cc, hh, ss = c[todo], h[todo], sgn[todo]
            t = cc[:, None, :] + pos[None, :, None] * (hh * ss)[:, None, :]
            known = at[todo] >= 0 if level == 0 else np.zeros(todo.size, dtype=bool)
            # (never the mid probe towards the opposite vertex, -M: NaN, no short check that way; the checks are of
            # the domain's vertex, and the opposite direction keeps its long check)
            fv = np.full((todo.size, len(pos), self.m), np.nan)
            if known.any():
                fk = nodes[at[todo][known]]
                vk = vidx[todo][known]
                r_ = np.arange(len(vk))
                fv[known, 0] = fk[:, 0]
                fv[known, 1] = fk[r_, grp[0] + vk]
                fv[known, 2] = fk[r_, grp[0] + nv - 1 - vk]
            # positions on the diagonal of the values read for the vertex probe (per box) and the opposite one
            o_pos = -T
            if level == 0:
                # the first region's probe at the domain's vertex, where it lies within SHIFT_MAX of the box's own
                reuse = np.zeros(todo.size, dtype=bool)
                if first is not None:
                    vert = cc + hh * ss
                    near = np.abs(first[0][None, :, :] - vert[:, None, :]).max(axis=2).argmin(axis=1)
                    with np.errstate(divide="ignore", invalid="ignore"):
                        r0 = np.abs(vert - first[0][near]) / ((1.0 - T) * hh)
                    reuse = ((np.abs(r0 - 1.0).max(axis=1) * (1.0 - T) <= SHIFT_MAX)
                             & np.isfinite(first[1][near]).all(axis=1))
                    rr[todo[reuse]] = r0[reuse]
                    fv[reuse, 3] = first[1][near[reuse]]
                for sel, cols in ((known & ~reuse, [3, 4, 5]), (known & reuse, [4, 5]),
                                  (~known & ~reuse, [0, 1, 2, 3, 4, 5]), (~known & reuse, [0, 1, 2, 4, 5])):
                    if sel.any():
                        fv[np.ix_(sel, cols)] = self._values_at(t[np.ix_(sel, cols)].reshape(-1, d)).reshape(
                            int(sel.sum()), len(cols), -1)
                spent = fv.shape[0] * 6 - 3 * int(known.sum()) - int(reuse.sum())
                self.checks["corner_first_reused"] = (int(self.checks.get("corner_first_reused", 0))
                                                      + int(reuse.sum()))
            else:
                rr[todo] *= 2.0
                reuse = (rr[todo].max(axis=1) - 1.0) * (1.0 - T) <= SHIFT_MAX
                fv[:, [0, 1, 2, 5]] = self._values_at(t[:, [0, 1, 2, 5]].reshape(-1, d)).reshape(todo.size, 4, -1)
                if (~reuse).any():
                    fv[~reuse, 3] = self._values_at(t[~reuse, 3])
                fv[:, 4] = above[todo, 1]
                o_pos = -1.0
                fv[reuse, 3] = above[todo[reuse], 0]
                rr[todo[~reuse]] = 1.0
                spent = todo.size * 4 + int((~reuse).sum())
                self.checks["corner_reused"] = (int(self.checks.get("corner_reused", 0))
                                                + todo.size + int(reuse.sum()))
            # the vertex probe's position on the diagonal (the mean of its axes' where it lies off the diagonal)
            # and the largest distance between it and the box's own along any axis, in half-widths
            t_pos = np.where(reuse, 1.0 - (1.0 - T) * rr[todo].mean(axis=1), T)
            shift = np.stack([np.where(reuse, (1.0 - T) * np.abs(rr[todo] - 1.0).max(axis=1), 0.0),
                              np.full(todo.size, 0.0 if level == 0 else 1.0 - T)], axis=1)
            above[todo, 0], above[todo, 1] = fv[:, 3], fv[:, 0]
            self.checks["corner_mid_spared"] = int(self.checks.get("corner_mid_spared", 0)) + int(todo.size)
            self.evaluations += spent
            self.checks["corner_probes"] = int(self.checks.get("corner_probes", 0)) + spent
            node = fv[:, :3, :]
            scale = np.maximum(np.abs(node).max(axis=1), np.asarray(self.checks["f_scale"]))
            with np.errstate(over="ignore", invalid="ignore"):
                big = np.where(scale > 0, _estimate.PROBE_WILD * scale, np.inf)[:, None, :]
                pr = np.clip(fv[:, 3:, :], -big, big)
            f_plus = node[:, 1:3, :]                           # towards the vertex, towards its opposite
            vol = self.geometry.volume({"centre": cc, "halfw": hh})
            f1, d1 = _estimate.probe_errors(node[:, 0, :], f_plus, f_plus[:, ::-1, :], pr[:, 0:2, :], a, vol,
                                            np.abs(node).max(axis=1), f_mid=pr[:, 2:4, :], dim=d, shift=shift)
            again = known & d1
            if again.any():
                fk = nodes[at[todo][again]]
                axes, pairs = self._node_lines(fk)
                vk = vidx[todo][again]
                f1[again], d1[again] = _estimate.probe_errors(
                    node[again, 0, :], f_plus[again], f_plus[again, ::-1, :], pr[again, 0:2, :], a, vol[again],
                    np.abs(node[again]).max(axis=1), f_mid=pr[again, 2:4, :], dim=d, axes=axes, pairs=pairs,
                    vertices=np.stack([vk, nv - 1 - vk], axis=1))
                self.checks["corner_explained"] = (int(self.checks.get("corner_explained", 0))
                                                   + int(again.sum() - d1[again].sum()))
            # two of the box's 2^d vertices were probed: the floor is their share of a full probe's mean
            fl[todo] = np.maximum(fl[todo], f1 * (2.0 / 2 ** d))
            dv[todo] |= d1
            # the largest jump the check at the domain's vertex lets pass (the cubic's allowance there) times the
            # volume beyond the corner node: where it exceeds the vertex's share of the goal, look again at the
            # box of half the size holding the vertex (its allowance shrinks with the square of its size)
            xs = np.array([o_pos, -a, 0.0, a])
            coef_l = coef if o_pos == -T else np.linalg.inv(np.vander(xs, 4, increasing=True))
            wcub_l = np.stack([wcub if tp == T and o_pos == -T else _estimate._lagrange_weights(xs, tp)
                               for tp in t_pos]) if todo.size else np.zeros((0, 4))
            tp_ = t_pos[:, None]
            with np.errstate(invalid="ignore"):
                cf = np.einsum("ij,jkm->ikm", coef_l, np.stack([pr[:, 1, :], node[:, 2, :], node[:, 0, :],
                                                                  node[:, 1, :]]))
                allow = _estimate.PROBE_CURVATURE * np.abs(cf[2]) * T * T + np.abs(cf[3]) * T ** 3
                sdev = pr[:, 0, :] - (cf[0] + cf[1] * tp_ + cf[2] * tp_ ** 2 + cf[3] * tp_ ** 3)
                dev = np.abs(sdev)
                # read with the level above: the probe at the vertex is the same point at every level (within
                # 2^-20 of the box), so a jump there adds the same J to both levels' signed deviations e from a
                # smooth model, while the model's residual shrinks by some rho >= CORNER_DECAY per halving (h^4
                # for the cubic once asymptotic): J = (rho e_L - e_(L-1)) / (rho - 1), at most the larger of |e_L|
                # and its value at rho = CORNER_DECAY.  The models: the cubic of f and, where the values share
                # one sign, the cubics of log|f| and of the powers of probe_errors mapped back (the residual is
                # read in f: a jump adds to f's value whatever the transform); the smallest such bound, where
                # below the cubic's allowance, replaces it (a Gaussian's or corner peak's checks stop a level or
                # two sooner: 3-D smooth Genz families at 1e-4, seeds 7-9, corner evaluations 9,772 -> 8,078)
                line = np.stack([pr[:, 1, :], node[:, 2, :], node[:, 0, :], node[:, 1, :]])
                esg = [sdev]
                sg = np.sign(node[:, 0, :])
                one = (sg != 0) & (np.sign(line) == sg[None]).all(axis=0) & (np.sign(pr[:, 0, :]) == sg)
                for lam in lams:
                    fwd, back = _estimate._power_transform(lam, sg)
                    with np.errstate(all="ignore"):
                        pred = back(np.einsum("kj,jkm->km", wcub_l, fwd(line)))
                    esg.append(np.where(one, pr[:, 0, :] - pred, np.nan))
                esg = np.stack(esg)
                if CORNER_DECAY > 1.0:
                    e1, e2 = esg, prev[:, todo]
                    joint = np.maximum(np.abs(e1), np.abs(CORNER_DECAY * e1 - e2) / (CORNER_DECAY - 1.0))
                    joint = np.where(np.isfinite(joint), joint, np.inf).min(axis=0)
                    allow = np.where(np.isfinite(joint), np.fmin(allow, joint), allow)
                    # and a deviation that did not shrink from the level above under any model is a jump's (a
                    # smooth residual shrinks): where its size, over all of the real box beyond its corner node,
                    # is worth the vertex's share of the goal, the check deviated ((1 + 0.3 sum x)^-4 + 0.01
                    # beyond x + y + z < 0.2 at 1e-6: the jump inflated the allowance of the larger boxes' checks
                    # through their nodes and filled the smaller boxes; converged 53x beyond its goal)
                    # (where the values share one sign: the cubic of f alone misses a wave that is not yet
                    # asymptotic by more at the smaller box, Genz's oscillatory family at 1e-4 in 3-D)
                    fin = np.isfinite(e1) & np.isfinite(e2)
                    steady = (np.where(fin, np.abs(e1) > np.abs(e2) / CORNER_STEADY, True).all(axis=0)
                              & fin[0] & fin[1:].any(axis=0))
                    size = np.where(fin, np.abs(e1), np.inf).min(axis=0)
                    hit = (steady & (size * (vol0[todo] * beyond)[:, None] > share[None, :])).any(axis=1)
                    d1 = d1 | hit
                    dv[todo] |= hit
            prev[:, todo] = esg
            # a deviating check found a jump of about its deviation at the vertex, which may fill all of the real
            # box beyond its corner node (a floor from the small box's volume alone let 1e-3 beyond
            # x + y + z > 2.8 beside exp(-|x|^2) converge 3.2x beyond its goal)
            jump[todo] = np.maximum(jump[todo], np.where(d1[:, None] & np.isfinite(dev), dev, 0.0))
            with np.errstate(invalid="ignore"):
                bound = np.where(np.isfinite(allow), allow, 0.0) * (vol * beyond)[:, None]
            more = ~d1 & (bound > share[None, :]).any(axis=1)
            todo = todo[more]
            c[todo] = c[todo] + 0.5 * h[todo] * sgn[todo]
            h[todo] = 0.5 * h[todo]
        fl = np.maximum(fl, jump * (vol0 * beyond)[:, None])
        # (a check that deviated covers nothing: the boxes split from that box are checked in turn)
        self.checks["corner_seen"] = seen + np.concatenate([g["centre"][rows], g["halfw"][rows], sgn],
                                                           axis=1)[~dv].tolist()
        if not dv.any():
            return "audit"
        hit = rows[dv]
        self._set_errors(hit, np.maximum(st["error"][hit], fl[dv]))
        st["flags"][hit] = st["flags"][hit] | FLAG_PROBE
        # the jump found at each vertex, kept for the audit's split of the box (see _keep_corner_floors)
        vert = g["centre"][hit] + g["halfw"][hit] * sgn[dv]
        old = {tuple(e[:d]): e for e in self.checks.get("corner_floors", []) if len(e) == d + self.m}
        for v, f in zip(vert.tolist(), fl[dv].tolist()):
            old[tuple(v)] = v + f
        self.checks["corner_floors"] = list(old.values())
        self.checks["corner_deviated"] = int(self.checks.get("corner_deviated", 0)) + int(dv.sum())
        self._audit_ok = False
        self.queue.rebuild(st["key"], 1)
        self._exact_totals()
        return None

    def _depth_add(self, depth: np.ndarray, key: np.ndarray) -> None:
        key = np.where(np.isfinite(key), key, 0.0)
        top = int(depth.max()) + 1 if depth.size else 0
        if top > self._depth_err.size:
            self._depth_err = np.concatenate([self._depth_err, np.zeros(max(top, 2 * self._depth_err.size))])
        self._depth_err += np.bincount(depth, weights=key, minlength=self._depth_err.size)

    def _smooth_so_far(self) -> bool:
        """No split disagreed with its parent or looked non-asymptotic, and no live region carries a signature."""
        c = self.checks
        return bool(c["disagreed"] == 0 and c["lower_closer"] == 0 and not np.any(self._flagged()[0]))

    def _flagged(self) -> tuple[np.ndarray, np.ndarray]:
        """Live regions with a non-smooth / non-asymptotic signature, and their error share."""
        st = self.store
        fl = st["flags"] & _NON_SMOOTH
        err = st["error"]
        e = err[:, 0] if self.m == 1 else (err * self.key_weight).max(axis=1)
        return fl, e

    def _why_short(self) -> str:
        """Why a run that stopped short of its goal did, when non-smooth regions hold most of its error."""
        fl, e = self._flagged()
        total = float(e.sum())
        bad = fl != 0
        share = float(e[bad].sum()) / total if total > 0 else 0.0
        if share < 0.5:
            return ""
        i = int(np.argmax(np.where(bad, e, -1.0)))
        g = {name: self.store[name][i:i + 1] for name in self.geometry.columns}
        lo, hi = self.geometry.user_bounds(g)
        where = " x ".join(f"[{a:.6g}, {b:.6g}]" for a, b in zip(lo[0], hi[0]))
        n = int(bad.sum())
        text = (f"{100 * share:.0f} % of the error estimate sits in {n} region{'' if n == 1 else 's'} where the "
                f"integrand is not smooth at their scale (a jump, kink or singularity; the worst at {where}); "
                "bisection reduces such an error slowly, so this goal may be out of reach: put region boundaries "
                "on the feature, transform it away, or loosen the goal")
        if not bool(self.geometry.splittable(g)[0]) and e[i] > 0.1 * total:
            # bisected to floating-point resolution and still holding a tenth of the error: an integrable
            # singularity's error falls with the region's width (x^p, p > -1: like width^(1 + p)), a
            # non-integrable one's does not
            text += (f"; that region is as narrow as floating point allows and still holds {100 * e[i] / total:.0f} "
                     "% of the error: the integral may diverge there (a non-integrable singularity), or the "
                     "singularity is too strong for bisection and needs a transformation")
        return text

    def trust(self, worst: int = 3) -> dict:
        """How far to trust the current result (JSON-ready; issue 12 item 5).

        Keys
        ----
        audit : str
            ``"passed"``, ``"failed, refining"``, ``"not run"`` or why impossible.
        audits, audit_regions, audit_evaluations : int
            Audits done, regions they split, evaluations they cost.
        audit_checks, audit_checks_failed : int
            Only for 2-D tensor Gauss-Kronrod runs: lattice checks of the audit's sample
            (:meth:`_audit_check`, their evaluations are part of ``audit_evaluations``) and those that did not
            pass (the full audit split followed).
        audit_reduced : int
            Only for a warm start (scans) whose start partition passed its own audit, smooth: audits
            that took :data:`WARM_AUDIT_SHARE` of the usual sample (absent otherwise).
        splits : int
            Splits done (each one compares the parent with its children).
        disagreed : int
            Splits whose children disagreed with the parent beyond its estimate
            (the estimates of that lineage were then corrected).
        lower_closer : int
            Splits where the parent's lower-degree rule was closer to its
            children than the rule itself (non-asymptotic regime).
        flagged_regions : int
            Live regions carrying such a signature (or rule differences that
            do not shrink with degree).
        flagged_error_share : float
            Their share of the total error estimate.
        smooth : bool
            True when no split disagreed and no live region is flagged.
        worst : list of dict
            Up to ``worst`` flagged regions with the largest error:
            ``lower``, ``upper`` (user coordinates), ``error``, ``signatures``.
        note : str
            Error estimates are heuristics, not bounds.
        """
        c = {k: v for k, v in self.checks.items()}
        out = {"audit": c["audit"], "audits": int(c["audits"]), "audit_regions": int(c["audit_regions"]),
               "audit_evaluations": int(c["audit_evaluations"]), "splits": int(c["splits"]),
               "disagreed": int(c["disagreed"]), "lower_closer": int(c["lower_closer"]),
               "flagged_regions": 0, "flagged_error_share": 0.0, "smooth": True, "worst": [],
               "note": "error estimates are heuristic, not guaranteed bounds"}
        if c.get("audit_reduced"):
            out["audit_reduced"] = int(c["audit_reduced"])
        if c.get("audit_check_evaluations"):
            # 2-D: lattice checks (Run._audit_check) run before the split, and those that did not pass
            out["audit_checks"] = int(c.get("audit_checks", 0))
            out["audit_checks_failed"] = int(c.get("audit_check_failed", 0))
        if self.store is None:
            return out
        fl, e = self._flagged()
        bad = np.nonzero(fl)[0]
        total = float(e.sum())
        out["flagged_regions"] = int(bad.size)
        out["flagged_error_share"] = float(e[bad].sum() / total) if total > 0 and bad.size else 0.0
        out["smooth"] = self._smooth_so_far()
        if bad.size:
            top = bad[np.argsort(-e[bad], kind="stable")[:worst]]
            g = {name: self.store[name][top] for name in self.geometry.columns}
            lo, hi = self.geometry.user_bounds(g)
            for j, i in enumerate(top):
                out["worst"].append({
                    "lower": [float(v) for v in lo[j]], "upper": [float(v) for v in hi[j]],
                    "error": float(self.store["error"][i].max()),
                    "signatures": [text for bit, text in _SIGNATURES if fl[i] & bit]})
        return out

    # -- observation -----------------------------------------------------------
    def snapshot(self, top: int = 10, map_points: int = 2000) -> Snapshot:
        """A consistent picture of the run now (safe to call from any thread)."""
        with self._lock:
            m = self.m or 1
            st = self.store
            if st is None:
                nan = np.full(m, np.nan)
                lo, hi = self.geometry.map_extent()
                return Snapshot(0, 0, nan, nan, nan, 0, self.elapsed(), self.status, 0.0, (), np.zeros(0),
                                np.zeros((0, self.domain.dim)), np.zeros((0, self.domain.dim)), lo, hi,
                                np.zeros((0, 2 + 2 * m)), self.message, self.settings.rel_tol,
                                self.settings.abs_tol, self.settings.budget)
            idx, _ = self.queue.top(top)
            g = {name: st[name][idx] for name in st.columns}
            ulo, uhi = self.geometry.user_bounds(g)
            tops = tuple(TopRegion(ulo[i], uhi[i], g["value"][i].copy(), g["error"][i].copy(), int(g["depth"][i]),
                                   g["verts"][i].copy() if "verts" in g else None) for i in range(len(idx)))
            n = st.n
            sample = np.unique(np.linspace(0, n - 1, min(n, map_points)).astype(np.int64))
            gs = {name: st[name][sample] for name in self.geometry.columns}
            centres, sizes = self.geometry.map_coords(gs)
            lo, hi = self.geometry.map_extent()
            depth_err = np.maximum(self._depth_err[: int(st["depth"].max()) + 1 if n else 0], 0.0) \
                if n < 200_000 else np.maximum(np.trim_zeros(self._depth_err, "b"), 0.0)
            el = self.elapsed()
            status = "paused" if (self.paused and not self.done) else self.status
            return Snapshot(self.step_count, self.evaluations, self.total_value.copy(), self.total_error.copy(),
                            self.goal(), n, el, status, self.evaluations / el if el > 0 else 0.0, tops,
                            depth_err.copy(), centres.copy(), sizes.copy(), lo, hi, np.array(self._hist),
                            self.message, self.settings.rel_tol, self.settings.abs_tol, self.settings.budget)

    def result(self) -> Result:
        """The current estimate (final once the run is over)."""
        with self._lock:
            if self.store is None:
                m = self.m or 1
                v = np.full(m, np.nan)
                return Result(float(v[0]) if m == 1 else v, float(v[0]) if m == 1 else v, 0, 0, self.status,
                              self.elapsed(), 0, self.rule_name, self.message, v, v, self.trust())
            vals = self.store["value"].sum(axis=0)
            errs = np.maximum(self.store["error"].sum(axis=0), self._trend())
            if self.done and self.status != "converged" and "audit_hidden" in self.checks:
                errs = np.maximum(errs, np.asarray(self.checks["audit_hidden"], dtype=float))
            status = self.status if self.done else ("paused" if self.paused else "running")
            scalar = self.m == 1
            return Result(float(vals[0]) if scalar else vals.copy(), float(errs[0]) if scalar else errs.copy(),
                          self.evaluations, self.store.n, status, self.elapsed(), self.step_count,
                          self.rule_name, self.message, vals.copy(), errs.copy(), self.trust())

    def __iter__(self) -> Iterator[Snapshot]:
        """Step until done, yielding a snapshot at most every ``snapshot_interval``
        seconds (and always the last one)."""
        while True:
            if self._pause.is_set() and not self._stop.is_set():
                yield self.snapshot()
                while self._pause.is_set() and not self._stop.is_set():
                    time.sleep(0.05)
                continue
            more = self.step()
            now = time.perf_counter()
            if not more:
                yield self.snapshot()
                return
            if now - self._last_snap >= self.snapshot_interval:
                self._last_snap = now
                yield self.snapshot()

    def run(self, observer: Callable[[Snapshot], None] | None = None) -> Result:
        """Run to the end, calling ``observer(snapshot)`` at the snapshot rate.

        Raises :class:`IntegrandError` when the integrand fails (the run's
        state stays as it was before the failing step)."""
        if observer is None:
            while self.step():
                while self._pause.is_set() and not self._stop.is_set():
                    time.sleep(0.05)
        else:
            for snap in self:
                observer(snap)
        return self.result()

    # -- checkpoints ---------------------------------------------------------------
    def save_checkpoint(self, path) -> None:
        """Write the whole state atomically (see :mod:`cubage.engine.checkpoint`)."""
        from cubage.engine.checkpoint import save_run
        with self._lock:
            save_run(self, path)

    @classmethod
    def from_checkpoint(cls, path, f: Callable, domain, *, evaluator=None, fingerprint: str | None = None,
                        snapshot_interval: float = 0.25, **overrides) -> Run:
        """Continue a run saved by :meth:`save_checkpoint`.

        ``domain`` and the integrand identity must match the checkpoint's (a
        :class:`~cubage.engine.checkpoint.CheckpointError` says otherwise).  Goal
        settings (tolerances, budget, time limit) may be overridden; the
        path-deciding ones (rule, split, queue, batch, estimate) may not.
        """
        from cubage.engine.checkpoint import load_run
        return load_run(cls, path, f, domain, evaluator=evaluator, fingerprint=fingerprint,
                        snapshot_interval=snapshot_interval, overrides=overrides)


def integrate(f: Callable, domain, *, rel_tol: float = 1e-6, abs_tol: float = 0.0,
              budget: int = DEFAULT_BUDGET, time_limit: float | None = None, rule: str | None = None,
              evaluator=None, raise_on_failure: bool = True, **options) -> Result:
    """Integrate a vectorised ``f`` over ``domain`` to the goal.

    Parameters
    ----------
    f : callable
        ``f(X)``, ``X`` of shape (n, d) float64, returns (n,) or (n, m).
    domain : Box or Simplex
        Bounds of a box may be infinite.
    rel_tol, abs_tol : float
        Stop when the summed error estimate <= max(abs_tol, rel_tol*|value|)
        (for every component of a vector integrand).
    budget : int
        Budget of integrand evaluations.
    time_limit : float, optional
        Seconds of wall time.
    rule : str, optional
        ``"genz-malik"`` (Genz & Malik 1980), ``"gauss-kronrod"`` (tensor
        product of the 7-point Gauss / 15-point Kronrod pair) or
        ``"grundmann-moller"`` (Grundmann & Möller 1978, simplices); the
        default depends on domain and dimension (see
        :func:`cubage.engine.rules.default_rule`).
    evaluator : callable, optional
        How to evaluate batches (see :mod:`cubage.engine.parallel`).
    **options
        Further :class:`Settings` fields: ``degree``, ``split``, ``queue``,
        ``batch``, ``estimate``, ``max_regions``, ``batch_points``,
        ``memory_ceiling`` (bytes or ``"4G"``; default half the machine's memory),
        and the declared features ``breaks``, ``cuts``, ``singular`` (region
        boundaries on kinks, jumps and singularities; see
        :mod:`cubage.engine.partition`).

    Returns
    -------
    Result
        ``value``, ``error`` (a heuristic estimate, not a bound),
        ``evaluations``, ``regions``, ``status`` and more.
    """
    run = Run(f, domain, rel_tol=rel_tol, abs_tol=abs_tol, budget=budget, time_limit=time_limit,
              rule=rule, evaluator=evaluator, **options)
    try:
        return run.run()
    except IntegrandError:
        if raise_on_failure:
            raise
        return run.result()
