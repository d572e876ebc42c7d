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

The loop is here; the checks that keep its error control honest are one concept a module, each a mixin of
:class:`Run`: :mod:`~cubage.engine.rule_errors` (a region's estimate from its rule values),
:mod:`~cubage.engine.probes` (vertex probes and their floors), :mod:`~cubage.engine.singular` (singular points and
faces the probes reveal), :mod:`~cubage.engine.split_checks` (blind floors and lineage tails at every split),
:mod:`~cubage.engine.audit` (the audit before ``converged``), :mod:`~cubage.engine.lattice` (the 2-D audit's lattice
check), :mod:`~cubage.engine.corners` (the domain-corner checks) and :mod:`~cubage.engine.warm` (warm start from a
partition); the region flags are in :mod:`~cubage.engine.flags`.
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
from cubage.engine.audit import AUDIT_LATTICE as AUDIT_LATTICE  # re-exported
from cubage.engine.audit import AuditChecks
from cubage.engine.corners import CornerChecks
from cubage.engine.domains import Box, DomainError, Simplex
from cubage.engine.flags import (
    _NON_SMOOTH,
    _SIGNATURES,
    FLAG_DISAGREED,
    FLAG_LOWER_CLOSER,
    FLAG_NON_ASYMPTOTIC,
    FLAG_PROBE,
    FLAG_PROBED,
    FLAG_WARY,
    FLAG_WATCH,
)
from cubage.engine.flags import FLAG_AUDITED as FLAG_AUDITED  # re-exported
from cubage.engine.geometry import BoxGeometry, SimplexGeometry, has_probes
from cubage.engine.lattice import LatticeChecks
from cubage.engine.lattice import _fibonacci_lattice as _fibonacci_lattice  # re-exported
from cubage.engine.lattice import _lattice_basis as _lattice_basis  # re-exported
from cubage.engine.probes import Probes
from cubage.engine.regions import RegionStore
from cubage.engine.rule_errors import RuleErrors
from cubage.engine.rules import box_rule, default_rule, simplex_rule
from cubage.engine.singular import Singularities
from cubage.engine.split_checks import SplitChecks
from cubage.engine.statuses import STATUSES as STATUSES  # re-exported: cubage.STATUSES
from cubage.engine.warm import WARM_AUDIT_SHARE as WARM_AUDIT_SHARE  # re-exported
from cubage.engine.warm import WarmStart
from cubage.engine.warm import touching as touching  # re-exported

DEFAULT_BUDGET = 50_000_000
#: Seconds an integrand call in progress may still take after a stop request or the time limit.
STOP_GRACE_SECONDS = 2.0


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


def _callable_name(f) -> str:
    return getattr(f, "fingerprint", None) or f"{getattr(f, '__module__', '?')}:{getattr(f, '__qualname__', repr(f))}"


class Run(Probes, Singularities, RuleErrors, SplitChecks, AuditChecks, LatticeChecks, CornerChecks, WarmStart):
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
        spent = shift = waves = None
        if "diagonal" in self.rule.extra:
            pv = self._probe_values(kids, suspect, mid=True, faces=False)
        else:
            if "pair4" in self.rule.extra.get("groups", {}):     # Genz-Malik: the plane waves, fitted once for
                waves = self._wave_fits(fr)                          # the probes' models and their checks
            pv, spent, shift = self._suspect_probes(kids, suspect, fr, waves)
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
                                            shift=shift, waves=waves)
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
                 spent: int | None = None, shift: np.ndarray | None = None,
                 waves: _estimate.WaveFits | None = None) -> tuple[np.ndarray, np.ndarray, int]:
        """Write the children of the split parents ``idx`` into the store (the parent's row is reused,
        the other children appended) after the split check; returns (children's keys, appended rows,
        number of surprises: parents whose children disagreed with them beyond their estimate, plus
        children whose vertex probes raised their estimate).  ``spent``: the probes evaluated, when not
        every entry of ``pv`` was; ``shift``: where a probe value was read beside the probe
        (:meth:`_explained_probes`); ``waves``: the plane waves of ``fr``'s boxes (:meth:`_wave_fits`)."""
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
        floor, deviates, steer, watched = self._probe_floor(kids, fr, pv, probe, shift, waves)
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
