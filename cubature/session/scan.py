"""Scans: one integral over a grid of constant values, warm-started, parallel, resumable.

A scan integrates ``f(X; p)`` at every point ``p`` of a Cartesian grid
(:class:`cubage.problem.scan_table.ScanGrid`), each point to the same goal.

The order rule (documented, deterministic)
------------------------------------------
1. The grid points are put on one *path* that visits them in boustrophedon
   order: the last constant varies fastest, and its direction reverses every
   time a slower constant steps (a reflected mixed-radix Gray code), so two
   consecutive points of the path are grid neighbours.
2. The path is cut into ``chains`` contiguous pieces of (nearly) equal length.
   The number of chains depends only on the number of points
   (:func:`default_chains`, one chain per :data:`POINTS_PER_CHAIN` points) or
   on the caller's choice — never on the number of workers.
3. The first point of each chain starts cold (the whole domain, or the
   partition aligned with its features).  Every other point starts from the
   final partition of the point before it on the path (its nearest finished
   neighbour on the chain) when that point converged and had the same
   features (issue 13: :meth:`ExprSource.features` at each point's own
   constants), after shaping (:func:`_seed`), and cold otherwise.  With
   ``warm=False`` every point starts cold.

So every point's result depends only on its constants and on the point before
it on its chain: the same for any worker count and any order in which the
chains happen to finish.  Chains are independent and run in parallel over
worker processes (joblib's process pool) or a dask cluster; within a chain the
points run one after another.

Warm start
----------
A warm-started point evaluates every region of the start partition with its
own constants (``Run(start=...)``), then runs the engine's usual error control.
The partition handed on is shaped first (:func:`_seed`), from what the
finished neighbour measured; none of this touches the estimate, only which
regions the next point evaluates first:

* merged (:func:`coarsen`): sibling boxes whose errors were tiny, and above all
  those whose errors *fell* since the point before (each start region's error
  now against then: its trend) -- refinement that followed a feature (a peak
  moving with the parameter) would otherwise accumulate along the chain --
  while no merged box is predicted above a quarter of the largest error the
  neighbour left unsplit (such a box would be split again at once); and the
  sibling pairs an audit split only to check the partition (issue 12), which
  would otherwise pile up along the chain;
* split ahead (:func:`_refine_ahead`): half as many regions as the neighbour
  had to split after its own start, those with the largest errors -- a scan
  growing harder along its path would otherwise evaluate each of them once
  more only to split it.

The estimate stays the engine's: a warm-started point meets the same goal
with the same checks as a cold one.  Error estimates are heuristic, not bounds.

Where the warm start's evaluations go (``benchmarks/scan.py``, full scans, a
shared 2-core machine; fractions of the cold scan's evaluations): a cold run
evaluates about 2N regions to end with N (2.09 N on the smooth scan, with its
audit), a warm one at least the N it ends with, so about 1/2 is the floor of
reuse.  Smooth scan (growing harder along its path): start partitions 0.43,
refinement 0.05, audits 0.01 (0.49 in all; no sibling pair of a converged
partition there could be merged without the merged box exceeding the error
level the partition was refined to, but the pairs an audit split only to check
are merged back -- kept, they piled up along the chain: 0.61).  Through a
zero: 0.45, 0.14, 0.02 (0.60).  Moving peak: 0.58, 0.08, 0.03 (0.69).  Merging
pays only where the integrand got easier (a feature moving away, a goal
loosening after a zero of the value).  What brought the smooth scan under 1/2
is the cheaper audit below (0.517 with the whole sample, 0.491 with half).

What a warm start carries over (``Run.partition()`` -> ``Run(start=...)``):
the regions' signature flags, the learnt wary-class counters and whether the
partition passed its audit with no non-smooth signature.  Start regions that
were non-smooth at the neighbour's constants join the wary class (as children
of such regions do in a cold run); they, the wary children whose own vertex
probes did not clear them, and the regions touching either get vertex probes,
two per vertex as the children of a non-smooth region get in a cold run (a
moving feature moves into them, and may sit just inside a face); regions far from any signature are not
probed again (a cold run does not probe children of smooth regions either).
The split check applies as usual, and so does the audit, with one exception:
a point that started from a partition which passed its audit smooth, and that
shows no signature itself (no split disagreeing with its parent or won by the
lower-degree rule, no flagged region, no failed audit), audits
``WARM_AUDIT_SHARE`` (half) of the usual sample -- the regions holding the
most value, as always; its trust report says ``audit_reduced``.

Checkpoints (run directories)
-----------------------------
With a run directory every finished point is appended to ``scan-points.jsonl``
(after the partition its successor starts from, ``scan-seed-<index>.npz``), and
the point each chain is working on is checkpointed to
``scan-current-<index>.npz`` every ``checkpoint_every`` seconds and when
stopped.  :func:`run_scan` on the same directory skips finished points and
continues current ones from their checkpoints, so a scan stopped and resumed
gives the same table, bit for bit, as one that ran through.
"""

from __future__ import annotations

import concurrent.futures as cf
import dataclasses
import functools
import hashlib
import json
import math
import os
import signal
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from cubage.engine.checkpoint import CheckpointError, write_atomic
from cubage.engine.geometry import BoxGeometry
from cubage.engine.run import _NON_SMOOTH, FLAG_AUDITED, IntegrandError, Run
from cubage.problem.scan_table import ScanGrid, grid_from_mapping

__all__ = ["scan", "run_scan", "ScanResult", "PointResult", "ExprSource", "CallableSource", "scan_path",
           "plan_chains", "default_chains", "coarsen", "POINTS_PER_CHAIN", "COARSEN_SHARE", "COARSEN_GROWTH",
           "COARSEN_CAP", "FALLING", "FALL_BELOW", "REFINE_AHEAD", "POINTS_FILE", "CSV_FILE", "SCAN_JSON", "LIVE_FILE"]

#: One chain per this many points by default (see the order rule).
POINTS_PER_CHAIN = 50
#: Coarsening may add at most this multiple of the goal expected at the next point to the estimated error.
COARSEN_SHARE = 3.0
#: A merged box's error is predicted as this many times the summed errors of the boxes it merges
#: (each extrapolated by its trend when known), however many levels are merged at once: next to a
#: feature that moved away the boxes are thin slabs in which the integrand is nearly polynomial
#: along the merged axis, and a factor compounding per level would keep them.  Measured ratio
#: parent/children on smooth and peaked 3-D integrands: median 9-13, 95th percentile 100-1000.
COARSEN_GROWTH = 32.0
#: Pairs whose errors both fell since the previous point to at most FALL_BELOW times what they were (a
#: feature moving away): growth factor and multiple of the cap used for them instead.
FALLING = (2.0, 16.0)
FALL_BELOW = 0.7
#: A merged box may be estimated at most this multiple of the largest error its run left unsplit
#: (scaled by how much looser the next point's goal is expected to be).
COARSEN_CAP = 0.25
#: Share of the regions a warm point split after its start that its successor gets split ahead.
REFINE_AHEAD = 0.5
#: (These were chosen on benchmarks/scan.py's full scans, warm/cold evaluations smooth; through a zero;
#: moving peak; and on a moving kink |x - c| e^y, 50 points, where cold runs stop at ~10 regions: the
#: earlier rule, share and growth alone, (3, 8): 0.74; 0.72; 0.76 -- a cap of 0.25 added: 0.61; 0.60;
#: 0.77 -- trends, a growth compounding per merged level, 32: 0.58; 0.64; 0.71; kink 1.57 -- the same,
#: growth not compounding: 0.58; 0.64; 0.70; kink 1.17 -- growth 64: 0.57; 0.65; 0.71; kink 1.27 -- no
#: coarsening at all: 0.61; 0.73; 1.70.  After the engine's probe changes and with audit splits merged
#: back: growth 32: 0.53; 0.64; 0.67; kink 1.33 -- growth 64: 0.52; 0.65; 0.68; kink 1.50 -- FALL_BELOW
#: 0.7 (chosen): 0.52; 0.61; 0.68 -- FALL_BELOW 0.4: 0.53; 0.60; 0.73 -- REFINE_AHEAD 0, 0.25, 0.5
#: (chosen), 1 on the smooth scan: 0.54; 0.53; 0.53; 0.55.  With the warm start's probes of the
#: regions next to a signature (for honesty, Run._carried): 0.54; 0.62; 0.75.  Not probing around wary regions
#: their own probes cleared: 0.517; 0.602; 0.658 -- with the warm audit share (Run._warm_audit_share): 0.491;
#: 0.600; 0.658 -- and then REFINE_AHEAD 0.75 or 1 (largest errors, or errors times trends) on the smooth scan:
#: 0.492 to 0.514; counting only the splits that were not the audit's: 0.491.  After the probes' log|f| check,
#: with the second probe per vertex at a warm start (for honesty: a moving kink claimed convergence 30x off
#: without it): 0.492; 0.604; 0.693; kink 0.76.)

#: Seconds between updates of a current point's live file (``scan-live-<chain>.json``).
LIVE_INTERVAL = 1.0
#: Rows of convergence history kept in a live file.
LIVE_HISTORY = 200
#: A worker runs consecutive points of its chain for about this long before reporting back.
SEGMENT_SECONDS = 0.5

POINTS_FILE = "scan-points.jsonl"
CSV_FILE = "scan.csv"
SCAN_JSON = "scan.json"
#: A current point's live file, per chain (``LIVE_FILE.format(chain=c)``; followers glob ``chain="*"``).
LIVE_FILE = "scan-live-{chain}.json"


# --------------------------------------------------------------------------
# integrand sources: how each point's integrand is made (picklable)
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class ExprSource:
    """An expression integrand (``Problem.integrand_spec``) whose constants the scan sets.

    ``align`` (``"auto"``, ``"declared"``; None: no feature alignment) and ``feature_table`` (the
    problem's ``[features]`` table) give each point the features of issue 13 at its own constants
    (:meth:`features`); :meth:`from_problem` fills them in from a problem file.
    """

    spec: dict
    base_fingerprint: str
    align: str | None = None
    feature_table: dict | None = None

    @classmethod
    def from_problem(cls, problem) -> ExprSource:
        """The source of a problem file's scan, with the file's ``[features]`` and ``[method] align``."""
        import tomllib
        spec = getattr(problem, "spec", None)
        try:
            tables = tomllib.loads(spec.text) if spec is not None and spec.text else {}
        except (tomllib.TOMLDecodeError, AttributeError):
            tables = {}
        align = (tables.get("method") or {}).get("align", "auto")
        table = tables.get("features")
        src = cls(dict(problem.integrand_spec), problem.fingerprint(),
                  None if align == "off" else str(align), table if isinstance(table, dict) else None)
        if src.align is None or not src._may_align():
            return cls(dict(problem.integrand_spec), problem.fingerprint())
        blob = json.dumps({"align": src.align, "features": src.feature_table}, sort_keys=True, default=str)
        return dataclasses.replace(src, base_fingerprint=problem.fingerprint() + ":features:"
                                   + hashlib.sha256(blob.encode()).hexdigest()[:16])

    def _may_align(self) -> bool:
        """Whether any point could have features: a [features] table, or switching functions or
        singular factors in the expression (at any constants)."""
        if self.feature_table:
            return True
        if self.align != "auto":
            return False
        from cubage.problem.features import analyse
        s = self.spec
        found = analyse(s["source"], list(s["variables"]), s.get("constants") or {})
        return bool(found.planes or found.singular)

    def build(self, constants: dict) -> Callable:
        from cubage.problem.expr import compile_expression
        s = self.spec
        return compile_expression(s["source"], s["variables"], {**(s.get("constants") or {}), **constants})

    def fingerprint(self, constants: dict) -> str:
        return _point_fingerprint(self.base_fingerprint, constants)

    def features(self, constants: dict, domain) -> dict:
        """The engine's ``breaks``/``cuts``/``singular`` for the point with these constants: declared
        ones (the ``[features]`` table, read with the point's constants) and, with ``align="auto"``,
        the switching functions and singular factors of the expression at the point's constants.
        Raises :class:`ValueError` when a declared feature does not fit the domain at this point."""
        if self.align is None:
            return {}
        from cubage.engine.partition import normalise
        from cubage.problem.features import analyse, merge, parse_feature_table, to_engine
        s = self.spec
        variables = list(s["variables"])
        c = {**(s.get("constants") or {}), **constants}
        declared: dict = {}
        if self.feature_table:
            declared, errors = parse_feature_table(dict(self.feature_table), variables, c)
            if errors:
                raise ValueError(f"[features] {errors[0][0]}: {errors[0][1]}")
            normalise(domain, **declared)
        detected = to_engine(analyse(s["source"], variables, c), domain)[0] if self.align == "auto" else {}
        return merge(declared, detected)


@dataclass(frozen=True)
class CallableSource:
    """A Python integrand ``f(X, **constants)``, or a factory ``f(**constants) -> g(X)``."""

    f: Callable
    factory: bool = False

    def build(self, constants: dict) -> Callable:
        return self.f(**constants) if self.factory else functools.partial(self.f, **constants)

    def fingerprint(self, constants: dict) -> str:
        name = f"{getattr(self.f, '__module__', '?')}:{getattr(self.f, '__qualname__', repr(self.f))}"
        return _point_fingerprint(name, constants)


def _point_fingerprint(base: str, constants: dict) -> str:
    blob = json.dumps({"base": base, "constants": {k: float(v).hex() for k, v in sorted(constants.items())}},
                      sort_keys=True)
    return hashlib.sha256(blob.encode()).hexdigest()


# --------------------------------------------------------------------------
# the order rule
# --------------------------------------------------------------------------

def scan_path(shape: tuple[int, ...]) -> list[int]:
    """Grid indices (C order) in boustrophedon order: consecutive entries are grid neighbours."""
    shape = tuple(int(s) for s in shape)
    n = math.prod(shape)
    if n == 0:
        return []
    idx = np.indices(shape).reshape(len(shape), -1).T      # C order
    snake = idx.copy()
    for ax in range(1, len(shape)):
        # reverse axis `ax` whenever the (already snaked) slower digits sum to an odd number
        flip = snake[:, :ax].sum(axis=1) % 2 == 1
        snake[flip, ax] = shape[ax] - 1 - idx[flip, ax]
    return [int(k) for k in np.ravel_multi_index(snake.T, shape)]


def default_chains(n_points: int) -> int:
    """The number of chains for ``n_points`` points: one per :data:`POINTS_PER_CHAIN` (at least one)."""
    return max(1, math.ceil(int(n_points) / POINTS_PER_CHAIN))


def plan_chains(shape: tuple[int, ...], chains: int) -> list[list[int]]:
    """The path cut into ``chains`` contiguous pieces of nearly equal length (longer ones first)."""
    path = scan_path(shape)
    c = max(1, min(int(chains), len(path)))
    q, r = divmod(len(path), c)
    out, at = [], 0
    for i in range(c):
        k = q + (1 if i < r else 0)
        out.append(path[at:at + k])
        at += k
    return out


# --------------------------------------------------------------------------
# coarsening a finished partition before it seeds its neighbour
# --------------------------------------------------------------------------

def _row_keys(*cols: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(np.concatenate(cols, axis=1))
    return a.view(np.dtype((np.void, a.dtype.itemsize * a.shape[1]))).ravel()


def coarsen(part: dict, error: np.ndarray, lower: np.ndarray, upper: np.ndarray, allowance: float, *,
            growth: float | None = None, passes: int = 64, cap: float = math.inf,
            trend: np.ndarray | None = None, checked: np.ndarray | None = None) -> dict:
    """Merge pairs of sibling boxes whose errors were tiny, within an error allowance.

    Two boxes of the same shape that are neighbours along one axis and fill
    the dyadic box one level up form a pair.  A merged box's error is
    predicted as ``growth`` times the summed errors of the original boxes in
    it (extrapolated by their trends when known; :data:`FALLING` for pairs
    whose errors both fell).
    Pairs are merged cheapest first (the predicted increase, ties by index),
    each box at most once per pass, while no merged box exceeds ``cap`` and
    the summed increase stays within ``allowance``; passes repeat on the
    merged boxes.  Deterministic.

    Parameters
    ----------
    part : dict
        ``centre``, ``halfw``, ``depth`` (optional ``flags``, ``wary``) of box regions (engine
        coordinates), as :meth:`Run.partition`.
    error : ndarray, shape (n,)
        The regions' error estimates (priority-key units; NaN: unknown, never merged).
    lower, upper : ndarray
        The engine box (:meth:`BoxGeometry.map_extent`).
    allowance : float
        Largest predicted increase of the total error.
    growth : float, optional
        Predicted error of a merged box over the summed errors of the boxes in it (default
        :data:`COARSEN_GROWTH`).
    cap : float
        Largest predicted error of one merged box: a box above the error level its run left unsplit
        would be split again at once.
    trend : ndarray, shape (n,), optional
        Each box's error now over its error at the previous point of the chain (NaN: unknown).  A
        scan growing harder along its path needs every box it has, while a feature moving away
        leaves boxes behind it whose errors fall from point to point.
    checked : ndarray of bool, shape (n,), optional
        Boxes an audit split only to check the partition (and that showed nothing): pairs of them are
        merged back first, at no predicted cost beyond their own errors, so that audits do not pile
        regions up along a chain.

    Returns
    -------
    dict
        The merged partition, with ``error`` (the boxes' errors now; merged boxes as predicted) and,
        when ``part`` has them, ``flags`` (the union of the merged boxes') and ``wary`` (copied).
    """
    growth = COARSEN_GROWTH if growth is None else float(growth)
    c = np.asarray(part["centre"], float).copy()
    h = np.asarray(part["halfw"], float).copy()
    dep = np.asarray(part.get("depth", np.zeros(len(c))), np.int64).copy()
    fl = np.asarray(part["flags"], np.uint8).copy() if "flags" in part else None
    e0 = np.asarray(error, float).copy()          # estimated errors now (NaN: unknown, never merged)
    e = np.where(np.isnan(e0), np.inf, e0)        # ... extrapolated to the next point
    down = np.zeros(len(e), bool)                 # errors falling from point to point
    if trend is not None:
        tr = np.asarray(trend, float)
        down = np.isfinite(tr) & (tr <= FALL_BELOW)
        e = e * np.where(np.isfinite(tr), np.maximum(tr, 0.0), 1.0)
    le, le0 = e.copy(), e0.copy()                 # summed errors of the original boxes inside each box
    chk = np.zeros(len(e), bool) if checked is None else np.asarray(checked, bool).copy()
    lower, upper = np.asarray(lower, float), np.asarray(upper, float)
    width = upper - lower
    unit = 2.0 ** 40
    spent = 0.0
    for _ in range(passes):
        n = len(c)
        if n < 2:
            break
        ci = np.rint((c - lower) / width * unit).astype(np.int64)
        hi = np.rint(h / width * unit).astype(np.int64)
        if (hi <= 0).any():
            break                               # finer than the integer grid: leave as it is
        keys = _row_keys(ci, hi)
        order = np.argsort(keys, kind="stable")
        sk = keys[order]
        ii, jj, aa = [], [], []
        for a in range(c.shape[1]):
            pos = (ci[:, a] - hi[:, a]) // (2 * hi[:, a])
            low = np.nonzero(pos % 2 == 0)[0]
            cj = ci[low].copy()
            cj[:, a] += 2 * hi[low, a]
            k2 = _row_keys(cj, hi[low])
            loc = np.minimum(np.searchsorted(sk, k2), n - 1)
            hit = sk[loc] == k2
            ii.append(low[hit])
            jj.append(order[loc[hit]])
            aa.append(np.full(int(hit.sum()), a))
        lo_i, hi_j, ax_a = np.concatenate(ii), np.concatenate(jj), np.concatenate(aa)
        if lo_i.size == 0:
            break
        both = down[lo_i] & down[hi_j]
        undo = chk[lo_i] & chk[hi_j]
        gp = np.where(undo, 1.0, np.where(both, FALLING[0], growth))
        with np.errstate(invalid="ignore"):
            pred = gp * (le[lo_i] + le[hi_j])
            cost = np.where(undo, 0.0, np.maximum(pred - e[lo_i] - e[hi_j], 0.0))
        o = np.lexsort((ax_a, lo_i, cost))
        o = o[np.isfinite(pred[o]) & (undo[o] | (pred[o] <= np.where(both[o], FALLING[1] * cap, cap)))]
        lo_i, hi_j, ax_a, cost, pred, gp = lo_i[o], hi_j[o], ax_a[o], cost[o], pred[o], gp[o]
        used = np.zeros(n, bool)
        take = []
        for t in range(lo_i.size):
            i, j = lo_i[t], hi_j[t]
            if used[i] or used[j]:
                continue
            if spent + cost[t] > allowance:
                break
            spent += cost[t]
            used[i] = used[j] = True
            take.append(t)
        if not take:
            break
        t = np.array(take)
        lo_i, hi_j, ax_a, pred, gp = lo_i[t], hi_j[t], ax_a[t], pred[t], gp[t]
        keep = ~used
        nh = h[lo_i].copy()
        nh[np.arange(len(ax_a)), ax_a] *= 2.0
        c = np.concatenate([c[keep], 0.5 * (c[lo_i] + c[hi_j])])
        h = np.concatenate([h[keep], nh])
        e = np.concatenate([e[keep], pred])
        le = np.concatenate([le[keep], le[lo_i] + le[hi_j]])
        e0 = np.concatenate([e0[keep], gp * (le0[lo_i] + le0[hi_j])])
        le0 = np.concatenate([le0[keep], le0[lo_i] + le0[hi_j]])
        down = np.concatenate([down[keep], down[lo_i] & down[hi_j]])
        chk = np.concatenate([chk[keep], np.zeros(len(lo_i), bool)])
        dep = np.concatenate([dep[keep], np.maximum(dep[lo_i], dep[hi_j]) - 1])
        if fl is not None:
            fl = np.concatenate([fl[keep], fl[lo_i] | fl[hi_j]])
    out = {"centre": c, "halfw": h, "axis": np.zeros(len(c), np.int8),
           "depth": np.maximum(dep, 0).astype(np.int16), "error": e0}
    if fl is not None:
        out["flags"] = fl
    if "wary" in part:
        out["wary"] = np.asarray(part["wary"], np.float64).copy()
    if "audited" in part:
        out["audited"] = np.asarray(part["audited"]).copy()
    return out


def _trend(run: Run, start: dict | None) -> np.ndarray:
    """Per region of ``run``'s store: its error now over its error at the previous point of the chain.

    Known for the start regions this point never split (their rows still hold them; ``start["error"]``
    holds their errors at the previous point); NaN for every other region.  Depends only on the start
    and on the finished run, so a resumed point gives the same trends.
    """
    st = run.store
    out = np.full(st.n, np.nan)
    if start is None or "error" not in start or run.geometry.kind != "box":
        return out
    before = np.asarray(start["error"], float)
    n = before.size
    if n != len(start["centre"]) or st.n < n:
        return out
    same = (np.all(st["centre"][:n] == np.asarray(start["centre"]), axis=1)
            & np.all(st["halfw"][:n] == np.asarray(start["halfw"]), axis=1))
    now = np.where(np.isfinite(st["key"][:n]), st["key"][:n], 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(before > 0, now / before, np.where(now > 0, np.inf, 1.0))
    out[:n] = np.where(same & np.isfinite(before), t, np.nan)
    return out


def _seed(run: Run, previous: np.ndarray | None = None, start: dict | None = None) -> dict | None:
    """The start partition a finished point hands to its successor (None: the successor starts cold).

    The coarsening allowance is :data:`COARSEN_SHARE` of the goal expected at the successor: the larger
    of this point's goal and the goal at the value extrapolated linearly from this point and the one
    before it on the chain (``previous``, its values) -- so that a point whose value passed near zero
    (a tiny relative goal, a very fine partition) does not hand that partition on whole.  No merged box
    may be predicted above :data:`COARSEN_CAP` times the largest error this point left unsplit (times
    the same loosening of the goal).  ``start`` (the partition this point started from) gives the
    regions' trends (:func:`_trend`) and how many regions to split ahead (:func:`_refine_ahead`).
    """
    if run.status != "converged" or run.store is None:
        return None
    part = run.partition()
    key = run.store["key"]
    err = np.where(np.isfinite(key), key, 0.0)
    if type(run.geometry) is not BoxGeometry:
        # simplices, and boxes from a feature-aligned start (sub-boxes between break values, graded
        # axes): split ahead, never merged -- a merge could straddle a break value
        return _refine_ahead(run, part, err, np.full(len(err), np.nan), start)[0]
    lo, hi = run.geometry.map_extent()
    now = float((run.goal() * run.key_weight).min())
    goal = run.goal()
    if previous is not None and np.shape(previous) == np.shape(run.total_value):
        s = run.settings
        guess = 2.0 * run.total_value - np.asarray(previous, float)
        goal = np.maximum(goal, np.maximum(s.abs_tol, s.rel_tol * np.abs(guess)))
    nxt = float((goal * run.key_weight).min())
    allowance = COARSEN_SHARE * nxt
    loosen = nxt / now if now > 0 else 1.0
    cap = COARSEN_CAP * float(err.max(initial=0.0)) * loosen
    trend = _trend(run, start)
    fl = run.store["flags"]
    checked = ((fl & FLAG_AUDITED) != 0) & ((fl & _NON_SMOOTH) == 0)
    part, err, trend, checked = _refine_ahead(run, part, err, trend, start, checked)
    return coarsen(part, err, lo, hi, allowance, cap=cap, trend=trend, checked=checked)


def _refine_ahead(run: Run, part: dict, err: np.ndarray, trend: np.ndarray, start: dict | None,
                  checked: np.ndarray | None = None) -> tuple[dict, np.ndarray, np.ndarray, np.ndarray | None]:
    """Split ahead, in the partition handed on, the regions the successor will most likely split.

    A point that started warm and then split ``s`` regions shows how fast the scan grows harder along
    its path; its successor will probably split about as many, and first those with the largest
    errors now.  Handing on those regions' children instead saves evaluating each parent once
    more only to split it.  The :data:`REFINE_AHEAD` share of ``s`` regions with the largest errors
    are split (ties: lower index first); their children's errors are unknown (NaN: never merged).
    """
    first = next((name for name in ("centre", "verts") if name in (start or {})), None)
    if first is None or run.geometry.kind != ("box" if first == "centre" else "simplex"):
        return part, err, trend, checked
    n0 = len(start[first])
    k = int(REFINE_AHEAD * max(0, run.store.n - n0) / max(1, run.geometry.children_per_split - 1))
    k = min(k, len(err))
    if k <= 0:
        return part, err, trend, checked
    order = np.argsort(-err, kind="stable")[:k]
    pick = np.zeros(len(err), bool)
    pick[order] = True
    idx = np.nonzero(pick)[0]
    cols = run.geometry.columns
    kids = run.geometry.split({name: np.asarray(part[name])[idx] for name in cols})
    nch = run.geometry.children_per_split
    out = {name: np.concatenate([np.asarray(part[name])[~pick], kids[name]]) for name in cols}
    out["depth"] = np.concatenate([part["depth"][~pick], np.tile(part["depth"][idx] + 1, nch)]).astype(np.int16)
    if "flags" in part:
        out["flags"] = np.concatenate([part["flags"][~pick], np.tile(part["flags"][idx], nch)]).astype(np.uint8)
    if "wary" in part:
        out["wary"] = part["wary"]
    if "audited" in part:
        out["audited"] = part["audited"]
    return (out, np.concatenate([err[~pick], np.full(nch * len(idx), np.nan)]),
            np.concatenate([trend[~pick], np.full(nch * len(idx), np.nan)]),
            None if checked is None else np.concatenate([checked[~pick], np.zeros(nch * len(idx), bool)]))


# --------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------

@dataclass
class PointResult:
    """The outcome of one grid point.

    ``value``/``error`` are floats for a scalar integrand, arrays of shape (m,)
    for a vector one.  ``warm_from`` is the grid index of the point whose
    partition this one started from (None: cold).  ``trust`` copies the
    engine result's trust checks where the engine provides them.
    """

    index: int
    constants: dict
    value: float | np.ndarray
    error: float | np.ndarray
    evaluations: int
    regions: int
    status: str
    seconds: float
    warm_from: int | None = None
    message: str = ""
    trust: dict | None = None

    @property
    def converged(self) -> bool:
        return self.status == "converged"

    def to_json(self) -> dict:
        from cubage.session.jsonio import json_number, json_safe  # the project's one rule for NaN/inf in JSON

        def num(v):
            a = np.asarray(v, dtype=float)
            if a.ndim == 0:
                return json_number(a)
            return [json_number(x) for x in a]
        rec = {"index": int(self.index), "constants": dict(self.constants), "value": num(self.value),
               "error": num(self.error), "evaluations": int(self.evaluations), "regions": int(self.regions),
               "status": self.status, "seconds": round(float(self.seconds), 6), "warm_from": self.warm_from,
               "message": self.message}
        if self.trust is not None:
            rec["trust"] = json_safe(self.trust)     # bounds of regions on an infinite axis are infinite
        return rec

    @classmethod
    def from_json(cls, rec: dict) -> PointResult:
        from cubage.session.jsonio import number_from_json

        def arr(v):
            if isinstance(v, list):
                return np.array([number_from_json(x) for x in v], dtype=float)
            return number_from_json(v)
        return cls(int(rec["index"]), {k: float(v) for k, v in rec["constants"].items()}, arr(rec["value"]),
                   arr(rec["error"]), int(rec["evaluations"]), int(rec["regions"]), str(rec["status"]),
                   float(rec["seconds"]), rec.get("warm_from"), str(rec.get("message", "")), rec.get("trust"))


@dataclass
class ScanResult:
    """All points of a scan, in grid order (C order of the grid).

    ``table`` is a structured numpy array with one field per scanned constant,
    then ``value``, ``error``, ``evaluations``, ``status`` (first component
    for a vector integrand; see ``points`` for all of them).
    """

    grid: ScanGrid
    points: list[PointResult]
    warm: bool
    chains: int
    stopped: bool = False
    notes: list[str] = field(default_factory=list)

    @property
    def converged(self) -> bool:
        """Whether every point met its goal."""
        return len(self.points) == self.grid.size and all(p.converged for p in self.points)

    @property
    def evaluations(self) -> int:
        return sum(p.evaluations for p in self.points)

    @property
    def table(self) -> np.ndarray:
        dt = [(n, "f8") for n in self.grid.names] + [("value", "f8"), ("error", "f8"), ("evaluations", "i8"),
                                                     ("status", "U16")]
        rows = [tuple(p.constants[n] for n in self.grid.names)
                + (float(np.atleast_1d(p.value)[0]), float(np.atleast_1d(p.error)[0]), p.evaluations, p.status)
                for p in self.points]
        return np.array(rows, dtype=dt)

    def to_json(self) -> dict:
        return {"grid": self.grid.to_json(), "warm_start": self.warm, "chains": self.chains,
                "points_total": self.grid.size, "points_done": len(self.points),
                "converged": self.converged, "evaluations": self.evaluations,
                "error_note": "heuristic estimates, not guaranteed bounds",
                "points": [p.to_json() for p in self.points]}

    def csv_text(self) -> str:
        """The table as CSV (all components; numbers in full precision)."""
        m = max((np.atleast_1d(p.value).size for p in self.points), default=1)
        vcols = ["value", "error"] if m == 1 else [f"{w}_{j}" for j in range(m) for w in ("value", "error")]
        head = ["index", *self.grid.names, *vcols, "evaluations", "regions", "status", "seconds", "warm_from"]
        lines = [",".join(head)]
        for p in self.points:
            v, e = np.atleast_1d(p.value), np.atleast_1d(p.error)
            ve = [repr(float(v[0])), repr(float(e[0]))] if m == 1 else \
                [repr(float(x)) for j in range(m) for x in (v[j], e[j])]
            lines.append(",".join([str(p.index), *(repr(p.constants[n]) for n in self.grid.names), *ve,
                                   str(p.evaluations), str(p.regions), p.status, f"{p.seconds:.3f}",
                                   "" if p.warm_from is None else str(p.warm_from)]))
        return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------
# one point (runs in the caller's process or in a worker)
# --------------------------------------------------------------------------

@dataclass
class _Job:
    index: int
    constants: dict
    source: object
    domain: object
    settings: dict
    start: dict | None
    warm_from: int | None
    checkpoint: str | None = None        # current-point checkpoint (run directories)
    checkpoint_every: float = 60.0
    stop_file: str | None = None
    want_seed: bool = True
    previous: np.ndarray | None = None   # values of the point before this one on its chain
    live: str | None = None               # file showing this point's progress to watchers (run directories)


class _Stopped(Exception):
    """The point was stopped before it finished (its checkpoint holds its state)."""


def _trust(res) -> dict | None:
    t = getattr(res, "trust", None)
    if t is None:
        return None
    if hasattr(t, "to_json"):
        t = t.to_json()
    try:
        return json.loads(json.dumps(t, default=float))
    except (TypeError, ValueError):
        return None


def _solve(job: _Job, stop_event: threading.Event | None = None, observer: Callable | None = None,
           evaluator=None):
    """Integrate one point; returns (PointResult, seed partition or None, stopped flag).

    A point whose features (issue 13: :meth:`ExprSource.features` at its constants) differ from those
    its predecessor's partition was aligned with starts cold, from its own aligned partition.
    """
    f = job.source.build(job.constants)
    fp = job.source.fingerprint(job.constants)
    features_of = getattr(job.source, "features", None)
    try:
        feats = features_of(job.constants, job.domain) if features_of is not None else {}
    except ValueError as exc:
        nan = math.nan
        return PointResult(job.index, job.constants, nan, nan, 0, 0, "failed", 0.0, None,
                           _misfit_message(job.constants, exc)), None, False
    fkey = _features_key(feats)
    if job.start is not None and not np.array_equal(np.asarray(job.start.get("features_key", _features_key({}))),
                                                    fkey):
        job = dataclasses.replace(job, start=None, warm_from=None)    # a feature moved: rebuild the partition
    settings = {**job.settings, **feats}
    run = None
    if job.checkpoint and os.path.exists(job.checkpoint):
        try:
            run = Run.from_checkpoint(job.checkpoint, f, job.domain, evaluator=evaluator, fingerprint=fp,
                                      **_goal_only(settings))
        except CheckpointError:
            run = None                    # another point's or a damaged file: start this point afresh
    if run is None:
        try:
            run = Run(f, job.domain, evaluator=evaluator, fingerprint=fp, start=job.start, **settings)
        except ValueError as exc:
            nan = math.nan
            return PointResult(job.index, job.constants, nan, nan, 0, 0, "failed", 0.0, None,
                               _misfit_message(job.constants, exc)), None, False
    last_ck = time.monotonic()
    last_poll = 0.0
    last_live = -math.inf
    stopped = False
    try:
        while True:
            if not run.step():
                break
            now = time.monotonic()
            if observer is not None:
                observer(job, run, now)
            if stop_event is not None and stop_event.is_set():
                stopped = True
                break
            if job.stop_file is not None and now - last_poll >= 0.2:
                last_poll = now
                if os.path.exists(job.stop_file):
                    stopped = True
                    break
            if job.live and now - last_live >= LIVE_INTERVAL:
                last_live = now
                _write_live(job, run)
            if job.checkpoint and job.checkpoint_every > 0 and now - last_ck >= job.checkpoint_every:
                run.save_checkpoint(job.checkpoint)
                last_ck = time.monotonic()
    except IntegrandError:
        pass                                  # status "failed", message set by the engine
    if stopped:
        if job.checkpoint and run.store is not None:
            run.save_checkpoint(job.checkpoint)     # mid-run state: continuing it is bit-identical
        res = run.result()
        return PointResult(job.index, job.constants, res.value, res.error, res.evaluations, res.regions,
                           "stopped", res.seconds, job.warm_from, res.message, _trust(res)), None, True
    res = run.result()
    seed = _seed(run, job.previous, job.start) if job.want_seed else None
    if seed is not None:
        seed["features_key"] = fkey
    pr = PointResult(job.index, job.constants, res.value, res.error, res.evaluations, res.regions, res.status,
                     res.seconds, job.warm_from, res.message, _trust(res))
    return pr, seed, False


def _misfit_message(constants: dict, exc: Exception) -> str:
    """The message of a point whose features do not fit the domain at its constants (it is not integrated)."""
    where = ", ".join(f"{n} = {float(v):.10g}" for n, v in constants.items())
    return (f"not integrated: the features at {where} do not fit the domain ({exc}); declare features that fit "
            "every point of the scan")


def _features_key(feats: dict) -> np.ndarray:
    """A digest (uint8 array, kept in a seed file) of a point's features: equal digests, same alignment."""
    blob = json.dumps(feats, sort_keys=True, default=float)
    return np.frombuffer(hashlib.sha256(blob.encode()).digest(), np.uint8).copy()


def _write_live(job: _Job, run: Run) -> None:
    """The current point's progress for watchers: small, constant size, replaced atomically."""
    snap = run.snapshot(top=0, map_points=1)
    h = np.asarray(snap.history, dtype=float)
    if len(h) > LIVE_HISTORY:
        h = h[np.unique(np.linspace(0, len(h) - 1, LIVE_HISTORY).astype(np.int64))]
    m = snap.components

    def num(x):
        x = float(x)
        return x if math.isfinite(x) else None
    rec = {"index": job.index, "constants": job.constants, "evaluations": int(snap.evaluations),
           "value": [num(v) for v in snap.value], "error": [num(v) for v in snap.error],
           "goal": [num(v) for v in snap.goal], "regions": int(snap.regions), "warm_from": job.warm_from,
           "history": [[num(r[0]), num(r[2]), num(r[2 + m])] for r in h], "updated": time.time()}
    try:
        write_atomic(Path(job.live), (json.dumps(rec, allow_nan=False) + "\n").encode("utf-8"))
    except OSError:
        pass                                   # a display aid: never end the scan over it


def _identity(source, domain, grid: ScanGrid, settings: dict, warm: bool, chains: int) -> str:
    """What decides a scan's points besides the goal: grid, integrand, domain, method, chains, warm start."""
    base = source.fingerprint({})
    method = {k: v for k, v in sorted(settings.items()) if k not in ("rel_tol", "abs_tol", "budget", "time_limit")}
    blob = json.dumps({"grid": grid.to_json(), "integrand": base, "domain": domain.to_json(), "method": method,
                       "warm": bool(warm), "chains": int(chains)}, sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()


def _goal_only(settings: dict) -> dict:
    return {k: settings[k] for k in ("rel_tol", "abs_tol", "budget", "time_limit") if k in settings}


def _ignore_interrupts() -> None:
    """In a worker process: Ctrl-C reaches the whole process group, but only the scan's own process decides
    how to stop (it asks the workers through the halt request, so that they checkpoint their points)."""
    if threading.current_thread() is not threading.main_thread() or os.getpid() == _DRIVER_PID:
        return
    try:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    except (ValueError, OSError):
        pass


_DRIVER_PID: int | None = None      # the process running run_scan (set there; never the workers)


def _solve_segment(jobs: list[_Job], seconds: float) -> list[tuple]:
    """Points of one chain in a row, in a worker: at least one, then more while under ``seconds``.

    Each point after the first starts from the seed its predecessor made (the order rule), exactly as
    the caller's process would have started it.  Returns ``_solve``'s triples.
    """
    _ignore_interrupts()
    out = []
    t0 = time.monotonic()
    for i, job in enumerate(jobs):
        if i > 0:
            prev, seed = out[-1][0], out[-1][1]
            job = dataclasses.replace(job, start=seed, warm_from=prev.index if seed is not None else None,
                                      previous=np.atleast_1d(np.asarray(prev.value, float)))
        out.append(_solve(job))
        if out[-1][2] or time.monotonic() - t0 >= seconds:
            break
    return out


# --------------------------------------------------------------------------
# run-directory files of a scan
# --------------------------------------------------------------------------

class _ScanFiles:
    """The scan's own files in a run directory (the rest belongs to :mod:`cubage.session.run_directory`)."""

    def __init__(self, path):
        self.path = Path(path)

    def seed_file(self, index: int) -> Path:
        return self.path / f"scan-seed-{index}.npz"

    def current(self, index: int) -> Path:
        return self.path / f"scan-current-{index}.npz"

    def live(self, c: int) -> Path:
        return self.path / LIVE_FILE.format(chain=c)

    @property
    def stop_file(self) -> Path:
        from cubage.session.run_directory import HALT_REQUEST
        return self.path / HALT_REQUEST

    def claim(self, identity: str) -> None:
        """Record which scan this folder holds, or refuse a folder that holds another one."""
        p = self.path / SCAN_JSON
        self.path.mkdir(parents=True, exist_ok=True)
        try:
            held = json.loads(p.read_text(encoding="utf-8")).get("identity")
        except FileNotFoundError:
            held = None
        except (OSError, ValueError, AttributeError):
            raise CheckpointError(f"{p}: unreadable; this folder's scan cannot be continued") from None
        if held is None:
            if (self.path / POINTS_FILE).exists():
                raise CheckpointError(f"{self.path}: holds scan points but no {SCAN_JSON}; choose a new folder")
            write_atomic(p, (json.dumps({"identity": identity}) + "\n").encode("utf-8"))
        elif held != identity:
            raise CheckpointError(f"{self.path}: holds another scan (its grid, integrand, domain, method, chains "
                                  "or warm start differ); choose a new folder")

    def read_points(self) -> dict[int, PointResult]:
        out: dict[int, PointResult] = {}
        p = self.path / POINTS_FILE
        try:
            fd = os.open(p, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
        except FileNotFoundError:
            return out
        with os.fdopen(fd, "r", encoding="utf-8") as fh:
            for line in fh:
                try:
                    rec = json.loads(line)
                    pr = PointResult.from_json(rec)
                except (ValueError, KeyError, TypeError):
                    continue                   # a torn last line after a crash
                out[pr.index] = pr
        return out

    def append_point(self, pr: PointResult) -> None:
        p = self.path / POINTS_FILE
        fd = os.open(p, os.O_RDWR | os.O_APPEND | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), 0o644)
        size = os.fstat(fd).st_size
        torn = size > 0 and os.pread(fd, 1, size - 1) != b"\n"      # a line cut short by a crash
        with os.fdopen(fd, "a", encoding="utf-8") as fh:
            fh.write(("\n" if torn else "") + json.dumps(pr.to_json(), allow_nan=False) + "\n")
            fh.flush()
            os.fsync(fh.fileno())

    def save_seed(self, index: int, seed: dict | None) -> None:
        arrays = {} if seed is None else {k: np.asarray(v) for k, v in seed.items()}
        arrays["point"] = np.array([index], np.int64)
        write_atomic(self.seed_file(index), lambda fh: np.savez(fh, **arrays))

    def drop_seed(self, index: int | None) -> None:
        if index is not None:
            self.seed_file(index).unlink(missing_ok=True)

    def load_seed(self, index: int) -> tuple[bool, dict | None]:
        """(found, seed): the partition finished point ``index`` handed to its successor (None: cold)."""
        try:
            with np.load(self.seed_file(index), allow_pickle=False) as z:
                arrays = {k: z[k] for k in z.files}
        except (OSError, ValueError, EOFError):
            return False, None
        if int(arrays.pop("point", np.array([-1]))[0]) != index:
            return False, None
        return True, (arrays or None)


# --------------------------------------------------------------------------
# the driver
# --------------------------------------------------------------------------

def _executor(workers, cluster=None):
    if cluster is not None:
        return cluster.get_executor() if hasattr(cluster, "get_executor") else cluster
    from joblib.externals.loky import get_reusable_executor

    from cubage.engine.parallel import worker_setup
    init, args = worker_setup()            # quiet workers that end with this process (issue 10 item 15a)
    return get_reusable_executor(max_workers=int(workers), initializer=init, initargs=args)


def run_scan(source, domain, grid: ScanGrid, settings: dict, *, warm: bool = True, chains: int | None = None,
             workers: int = 1, cluster=None, run_dir=None, checkpoint_every: float = 60.0,
             on_point: Callable[[PointResult, int, int], None] | None = None,
             on_step: Callable | None = None, stop_event: threading.Event | None = None,
             evaluator=None) -> ScanResult:
    """Integrate every grid point; see the module docstring for the order rule.

    Parameters
    ----------
    source : ExprSource or CallableSource
        How a point's integrand is made from its constants.
    domain : Box or Simplex
    grid : ScanGrid
    settings : dict
        :class:`cubage.Settings` fields (the goal and method of every point).
    warm : bool
        Warm-start points from their predecessor's partition (default) or start each cold.
    chains : int, optional
        Number of chains (default :func:`default_chains`).  Results depend on it, never on ``workers``.
    workers : int
        Processes running chains at once (1: all in this process).
    cluster : dask.distributed.Client, optional
        Run the chains on a dask cluster instead of local processes.
    run_dir : path, optional
        Folder for the scan's checkpoint files (see the module docstring); continues what it holds.
    checkpoint_every : float
        Seconds between checkpoints of the current points (0: only when stopped).
    on_point : callable, optional
        ``on_point(point, done, total)`` as each point finishes (in the caller's thread).
    on_step : callable, optional
        ``on_step(job, run, now)`` after each engine step of the current point (``workers=1`` only).
    stop_event : threading.Event, optional
        Set it to stop: current points are checkpointed, ``ScanResult.stopped`` is True.
    evaluator : callable, optional
        With ``workers=1``: how each point evaluates its batches (for example
        ``cubage.engine.parallel.make_evaluator(workers=2)``), so that a point's own evaluation is
        parallel while the chains run one after another.  Results are the same as without it.
    """
    if evaluator is not None and (workers > 1 or cluster is not None):
        raise ValueError("evaluator= parallelises each point's evaluation and needs workers=1 (the chains run "
                         "here); workers > 1 or a cluster run the chains in parallel instead")
    global _DRIVER_PID
    _DRIVER_PID = os.getpid()
    n = grid.size
    nchains = default_chains(n) if chains is None else max(1, min(int(chains), n))
    plan = plan_chains(grid.shape, nchains)
    files = _ScanFiles(run_dir) if run_dir is not None else None
    if files is not None:
        files.claim(_identity(source, domain, grid, settings, warm, nchains))
    done: dict[int, PointResult] = files.read_points() if files is not None else {}
    done = {k: v for k, v in done.items() if 0 <= k < n}
    pos = [0] * len(plan)
    seeds: dict[int, tuple[int | None, dict | None]] = {}
    for c, chain in enumerate(plan):
        while pos[c] < len(chain) and chain[pos[c]] in done:
            pos[c] += 1
        if 0 < pos[c] < len(chain):
            prev = chain[pos[c] - 1]
            found, seed = files.load_seed(prev) if files is not None else (False, None)
            if not found and done[prev].converged and warm:
                raise CheckpointError(f"{run_dir}: the partition saved by point {prev} is missing; "
                                      "the scan cannot continue bit for bit")
            seeds[c] = (prev, seed)
    total = n
    count = [len(done)]
    stopped = [False]

    def segment_for(c: int) -> list[_Job]:
        jobs = [job_for(c)]
        for j in range(pos[c] + 1, len(plan[c])):
            k = plan[c][j]
            jobs.append(_Job(k, grid.point(k), source, domain, dict(settings), None, None,
                             checkpoint=str(files.current(k)) if files is not None else None,
                             checkpoint_every=checkpoint_every,
                             stop_file=str(files.stop_file) if files is not None else None,
                             want_seed=warm and j + 1 < len(plan[c]),
                             live=str(files.live(c)) if files is not None else None))
        return jobs

    def job_for(c: int) -> _Job:
        k = plan[c][pos[c]]
        prev, seed = seeds.get(c, (None, None))
        start = seed if (warm and seed is not None) else None
        before = np.atleast_1d(np.asarray(done[prev].value, float)) if prev is not None else None
        return _Job(k, grid.point(k), source, domain, dict(settings), start,
                    prev if start is not None else None, previous=before,
                    checkpoint=str(files.current(k)) if files is not None else None,
                    checkpoint_every=checkpoint_every,
                    stop_file=str(files.stop_file) if files is not None else None,
                    want_seed=warm and pos[c] + 1 < len(plan[c]),
                    live=str(files.live(c)) if files is not None else None)

    def finished(c: int, pr: PointResult, seed) -> None:
        if files is not None:
            # order matters for a crash at any moment: this point's seed, then its line, then the old files
            if pos[c] + 1 < len(plan[c]):
                files.save_seed(pr.index, seed)
            files.append_point(pr)
            files.drop_seed(plan[c][pos[c] - 1] if pos[c] > 0 else None)
            files.current(pr.index).unlink(missing_ok=True)
        done[pr.index] = pr
        seeds[c] = (pr.index, seed)
        pos[c] += 1
        count[0] += 1
        if on_point is not None:
            on_point(pr, count[0], total)

    if workers <= 1 and cluster is None:
        for c in range(len(plan)):
            while pos[c] < len(plan[c]) and not stopped[0]:
                if stop_event is not None and stop_event.is_set():
                    stopped[0] = True
                    break
                pr, seed, was_stopped = _solve(job_for(c), stop_event, on_step, evaluator)
                if was_stopped:
                    stopped[0] = True
                    break
                finished(c, pr, seed)
    else:
        ex = _executor(workers, cluster)
        running: dict = {}
        for c in range(len(plan)):
            if pos[c] < len(plan[c]):
                running[ex.submit(_solve_segment, segment_for(c), SEGMENT_SECONDS)] = c
        try:
            while running:
                if stop_event is not None and stop_event.is_set() and files is not None \
                        and not files.stop_file.exists():
                    files.stop_file.touch()
                ready, _ = cf.wait(list(running), timeout=0.2, return_when=cf.FIRST_COMPLETED)
                for fut in ready:
                    c = running.pop(fut)
                    for pr, seed, was_stopped in fut.result():
                        if was_stopped:
                            stopped[0] = True
                            break
                        finished(c, pr, seed)
                    if stopped[0] or (stop_event is not None and stop_event.is_set()):
                        stopped[0] = True
                    elif pos[c] < len(plan[c]):
                        running[ex.submit(_solve_segment, segment_for(c), SEGMENT_SECONDS)] = c
        finally:
            for fut in running:
                fut.cancel()
        if files is not None:
            files.stop_file.unlink(missing_ok=True)
    pts = [done[k] for k in sorted(done)]
    return ScanResult(grid, pts, warm, len(plan), stopped=stopped[0] or len(pts) < n)


def scan(f: Callable, domain, grid, *, factory: bool = False, rel_tol: float = 1e-6, abs_tol: float = 0.0,
         budget: int | None = None, time_limit: float | None = None, rule: str | None = None, warm: bool = True,
         chains: int | None = None, workers: int = 1, cluster=None, run_dir=None,
         on_point: Callable | None = None, evaluator=None, **options) -> ScanResult:
    """Integrate ``f`` over ``domain`` at every point of a grid of constants.

    Parameters
    ----------
    f : callable
        ``f(X, **constants)`` returning (n,) or (n, m) for ``X`` of shape (n, d);
        with ``factory=True``, ``f(**constants)`` returns the integrand ``g(X)``.
        With ``workers > 1`` it must be picklable (lambdas are, through joblib).
    domain : Box or Simplex
    grid : dict or ScanGrid
        ``{name: values}``; several names scan the Cartesian grid (the last varies fastest).
    rel_tol, abs_tol, budget, time_limit, rule, **options
        The goal and method of every point, as in :func:`cubage.integrate`
        (``budget`` and ``time_limit`` apply to each point).
    warm : bool
        Start each point from its neighbour's final partition (the order rule of
        :mod:`cubage.session.scan`); False starts every point cold.
    chains, workers, cluster, run_dir, on_point, evaluator
        See :func:`run_scan`.

    Returns
    -------
    ScanResult
        ``points`` (one :class:`PointResult` each, in grid order), ``table`` (a
        structured array), ``converged`` (every point met its goal).  Errors are
        heuristic estimates, not guaranteed bounds.

    Examples
    --------
    >>> import numpy as np, cubage
    >>> res = cubage.scan(lambda X, a: np.exp(-a * (X**2).sum(1)), cubage.Box([0, 0], [1, 1]),
    ...                   {"a": np.linspace(0.5, 2, 4)}, rel_tol=1e-8)
    >>> res.table["value"].shape
    (4,)
    """
    from cubage.engine.run import DEFAULT_BUDGET
    g = grid_from_mapping(grid)
    settings = dict(rel_tol=rel_tol, abs_tol=abs_tol, budget=budget or DEFAULT_BUDGET, time_limit=time_limit,
                    rule=rule, **options)
    return run_scan(CallableSource(f, factory), domain, g, settings, warm=warm, chains=chains, workers=workers,
                    evaluator=evaluator,
                    cluster=cluster, run_dir=run_dir, on_point=on_point)

