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

import hashlib
import json
import math
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import numpy as np

from cubage.engine import estimate as _estimate
from cubage.engine.domains import Box, DomainError, Simplex
from cubage.engine.geometry import BoxGeometry, SimplexGeometry
from cubage.engine.regions import RegionStore
from cubage.engine.rules import box_rule, default_rule, simplex_rule

DEFAULT_BUDGET = 50_000_000

#: Status words of a finished (or paused/running) run.
STATUSES = {
    "running": "still working",
    "paused": "paused by request, resumable",
    "converged": "total error estimate met the goal",
    "budget-spent": "evaluation budget spent before the goal was met",
    "time-limit": "time limit reached before the goal was met",
    "stopped": "stopped on request before the goal was met",
    "region-limit": "region limit reached before the goal was met",
    "stalled": "no region can be split further (floating-point resolution) before the goal was met",
    "failed": "the integrand raised an error or returned a non-finite value",
}


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

    def shape_key(self) -> dict:
        """The settings that decide the sequence of regions (part of the fingerprint)."""
        key = {"rule": self.rule, "degree": self.degree, "split": self.split, "queue": self.queue,
               "batch": self.batch, "estimate": self.estimate, "batch_points": self.batch_points}
        key.update({k: v for k, v in (("breaks", self.breaks), ("cuts", self.cuts), ("singular", self.singular))
                    if v is not None})
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
                "steps": int(self.steps), "rule": self.rule, "message": self.message}


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


class Run:
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
        control follows.  Used by parameter scans (:mod:`cubage.session.scan`).
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

    def stop(self) -> None:
        """Stop after the current step; the result keeps the current estimate."""
        self._stop.set()
        self._pause.clear()

    @property
    def paused(self) -> bool:
        return self._pause.is_set()

    @property
    def done(self) -> bool:
        return self.status not in ("running", "paused")

    def set_goal(self, rel_tol: float | None = None, abs_tol: float | None = None,
                 budget: int | None = None, time_limit: float | None = None) -> None:
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
            new.validate()
            self.settings = new
            if self.status in ("converged", "budget-spent", "time-limit", "stopped") and self.store is not None:
                self.status = "running"
                self._stop.clear()

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

    def _evaluate(self, g: dict) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Rule values (k, r, m), |f|-rule (k, m), node values (k, p, m) of regions ``g``."""
        t = self.geometry.points(g)
        if hasattr(self.geometry, "to_user"):                    # per-piece maps (cubage.engine.partition)
            x, jac = self.geometry.to_user(g, t)
        else:
            x, jac = (self.geometry.map.to_user(t) if self.geometry.map is not None else (t, None))
        try:
            fx = self.evaluator(self.f, x) if self.evaluator is not None else self.f(x)
        except IntegrandError:
            raise
        except Exception as exc:  # the user's code: report, never crash the engine
            raise IntegrandError(f"integrand raised {type(exc).__name__}: {exc}") from exc
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
        if self.m is not None and fx.shape[1] != self.m:
            raise IntegrandError(f"integrand returned {fx.shape[1]} components, earlier {self.m}")
        bad = ~np.isfinite(fx)
        if bad.any():
            i = int(np.nonzero(bad.any(axis=1))[0][0])
            pt = ", ".join(f"{v:.17g}" for v in x[i])
            raise IntegrandError(f"integrand returned {fx[i][bad[i]][0]} at x = ({pt}); if that point is a "
                                 "removable singularity give the integrand its limit there (expressions: "
                                 "sin_over_x), or declare it singular=[{'point': [...]}] so that no node lies on it")
        if jac is not None:
            fx = fx * jac[:, None]
            if not np.isfinite(fx).all():
                i = int(np.nonzero(~np.isfinite(fx).all(axis=1))[0][0])
                pt = ", ".join(f"{v:.17g}" for v in x[i])
                raise IntegrandError(
                    f"integrand times the Jacobian of the variable map overflows at x = ({pt}); "
                    "the integrand must decay at infinity (or its singularity there be integrable)")
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

    def _errors(self, q: np.ndarray, absq: np.ndarray) -> np.ndarray:
        q3 = q[:, 2, :] if q.shape[1] > 2 else None
        return _estimate.region_errors(q[:, 0, :], q[:, 1, :], q3, absq, self.settings.estimate)

    def _keys(self, err: np.ndarray, tol: np.ndarray | None = None) -> np.ndarray:
        key = err[:, 0] if self.m == 1 else (err * self.key_weight).max(axis=1)
        if tol is not None:
            key = np.where(key > tol, key, -np.inf)
        return key

    def _axis_values(self, fr: np.ndarray, err: np.ndarray) -> np.ndarray:
        if fr.shape[2] == 1:
            return fr[:, :, 0]
        j = np.argmax(err * self.key_weight, axis=1)
        return fr[np.arange(fr.shape[0]), :, j]

    def partition(self) -> dict[str, np.ndarray]:
        """Copies of the regions' geometry and depth: the ``start`` of a warm-started run."""
        with self._lock:
            if self.store is None:
                g = self.geometry.root()
                return {**g, "depth": np.zeros(len(next(iter(g.values()))), np.int16)}
            return {name: self.store[name].copy() for name in (*self.geometry.columns, "depth")}

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

    def _start(self) -> None:
        g, q, absq, fr, depth = self._evaluate_start()
        self.m = q.shape[2]
        err = self._errors(q, absq)
        val = q[:, 0, :]
        scale = np.maximum(np.abs(val.sum(axis=0)), np.maximum(err.sum(axis=0), 1e-300))
        self.key_weight = (1.0 / scale) if self.m > 1 else np.ones(1)
        self.geometry.set_split_axes(g, self._axis_values(fr, err))
        cols = dict(self.geometry.columns)
        cols.update({"value": ((self.m,), np.float64), "error": ((self.m,), np.float64),
                     "key": ((), np.float64), "depth": ((), np.int16)})
        if self.settings.queue == "local":
            cols["tol"] = ((), np.float64)
        self.store = RegionStore(cols, capacity=1024)
        self.evaluations = fr.shape[0] * fr.shape[1]
        self.total_value = val.sum(axis=0)
        self.total_error = err.sum(axis=0)
        tol = None
        if self.settings.queue == "local":
            tol = np.full(len(val), float(self._keyed_goal()) / len(val))
            g["tol"] = tol
        key = self._keys(err, tol)
        self.store.append(**g, value=val, error=err, key=key, depth=depth)
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
        budget = (s.budget - self.evaluations) // per
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
                return "converged"
        elif np.all(self.total_error <= self.goal()):
            self._exact_totals()
            if np.all(self.total_error <= self.goal()):
                return "converged"
        if self.queue.idx.size == 0:
            return "stalled"
        per = self.geometry.children_per_split * self.rule.size
        if self.evaluations + per > s.budget:
            return "budget-spent"
        if s.time_limit is not None and self.elapsed() >= s.time_limit:
            return "time-limit"
        if s.max_regions is not None and self.store.n + self.geometry.children_per_split - 1 > s.max_regions:
            return "region-limit"
        return None

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
                if why is not None:
                    return self._finish(why)
                self._advance()
            except IntegrandError as exc:
                self.message = str(exc)
                self._finish("failed")
                raise
            return True

    def _finish(self, status: str) -> bool:
        if self.store is not None:  # a failure in the very first evaluation leaves no regions
            self._exact_totals()
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
        self.queue.pop(k)
        val = q[:, 0, :]
        nch = self.geometry.children_per_split
        err = self._errors(q, absq)
        self.geometry.set_split_axes(kids, self._axis_values(fr, err))
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
        cols = dict(kids, value=val, error=err, key=key, depth=depth)
        first = {name: a[:k] for name, a in cols.items()}
        rest = {name: a[k:] for name, a in cols.items()}
        st.put(idx, **first)
        new = st.append(**rest) if nch > 1 else np.zeros(0, np.int64)
        self.queue.push(np.concatenate([idx, new]), key)
        self.evaluations += fr.shape[0] * fr.shape[1]
        self.step_count += 1
        if self.step_count % 256 == 0:
            self._exact_totals()
        self._record()

    def _depth_add(self, depth: np.ndarray, key: np.ndarray) -> None:
        key = np.where(np.isfinite(key), key, 0.0)
        top = int(depth.max()) + 1 if depth.size else 0
        if top > self._depth_err.size:
            self._depth_err = np.concatenate([self._depth_err, np.zeros(max(top, 2 * self._depth_err.size))])
        self._depth_err += np.bincount(depth, weights=key, minlength=self._depth_err.size)

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
                              self.elapsed(), 0, self.rule_name, self.message, v, v)
            vals = self.store["value"].sum(axis=0)
            errs = self.store["error"].sum(axis=0)
            status = self.status if self.done else ("paused" if self.paused else "running")
            scalar = self.m == 1
            return Result(float(vals[0]) if scalar else vals.copy(), float(errs[0]) if scalar else errs.copy(),
                          self.evaluations, self.store.n, status, self.elapsed(), self.step_count,
                          self.rule_name, self.message, vals.copy(), errs.copy())

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
        ``batch``, ``estimate``, ``max_regions``, ``batch_points``.

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
