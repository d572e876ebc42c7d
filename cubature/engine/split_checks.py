"""What a split carries past its own comparison of parent and children (:meth:`Run._replace`).

Blind floors: a parent whose own rule estimate is far above its children's saw a feature between their
node lines, and the children holding one of its node lines carry the discrepancy across that axis until a
split sees it (columns ``blind``, ``blind_axis``, ``blind_cuts``, ``blind_c``, ``blind_h``).  Lineage tails:
simplex children next to a singular face or vertex get at least the tail their lineage's last cycles of
splits extrapolate (:func:`~cubage.engine.estimate.lineage_tail`)."""

from __future__ import annotations

import numpy as np

from cubage.engine import estimate as _estimate
from cubage.engine.flags import FLAG_WARY

#: A split whose parent's own rule estimate is more than this many times its children's summed rule estimates
#: measured something its children's nodes cannot see (:meth:`Run._blind_floors`): a degree-7 rule's error falls by
#: 2^8 per halving where it is asymptotic, and on Genz's smooth families (tuning seeds 7, 8, 9, 3 draws, d = 2..6,
#: 1e-4 and 1e-6: 39,555 splits) no split whose discrepancy was above 1 % of the goal fell more than 2.5e4 times
#: (2-D) or 3.4e3 (3-D and up), and one above rounding 1e5 times (its discrepancy 8e-8 of the goal); on
#: benchmarks/stress.py the parents that saw a slab, jump or corner cube at a node line fell 1e6-1e13 times
BLIND_RATIO = 1e6
#: ... a descendant's split sees what its lineage measured when its discrepancy or one of its children's rule
#: estimates is at least this share of it
BLIND_SEEN = 0.1
#: ... and the children holding one of the measuring region's node lines carry it through at most this many
#: bisections across the axis it was measured across, each halving it (a bound on the carry, not a tuned figure:
#: the floor is then 2^-30 of what was measured; before, a fixed 3, tuned on the stress set, seed 31, on c8884fa:
#: silent answers 204 -> 194 with 2, -> 190 with 3, left slabs on a first box's node line unseen, see _blind_floors)
BLIND_CUTS = 30


class SplitChecks:
    """Blind floors and lineage tails at every split (a mixin of :class:`~cubage.engine.run.Run`).

    Reads ``rule``, ``geometry``, ``domain``; writes ``_axis_node_cache`` (the rule's node coordinates
    along an axis, computed once per run) and counters in ``checks``; the children's columns it returns
    or fills in the ``kids`` arrays :meth:`_replace` passes.
    """

    def _blind_floors(self, parents: dict, kids: dict, raw: np.ndarray, D: np.ndarray, noise: np.ndarray,
                      err: np.ndarray) -> tuple[np.ndarray, dict]:
        """Children's errors (c k, m) raised to what their lineage measured and their nodes cannot see, and their
        store columns: the ``blind`` floor (c k, m), the axis that measurement was made across (``blind_axis``,
        c k; -1: none), the bisections across it left to carry it through (``blind_cuts``, c k) and the centre and
        half-width along that axis of the region that measured it (``blind_c``, ``blind_h``).

        A parent whose own rule saw a feature at one of its node lines (a slab, a thin jump layer, a corner cube
        between the nodes of its children) has a large rule estimate and a large discrepancy ``D`` with its
        children, whose nodes all miss the feature: their rule estimates fall to rounding, far more than a
        smooth integrand's can in one bisection (:data:`BLIND_RATIO`).  The split check raises them to ``D``,
        but the next split of such a child agrees with it (neither sees the feature) and the floor was gone:
        ``B + h [0.78022 < x0 < 0.78627]`` on the unit square at rel_tol 1e-6 converged 188 times beyond its
        goal with five boxes [0.75, 0.875] x ... estimated at 3e-16 each.  A bisection moves a box's node
        coordinates along its split axis only (along the others the children's are the parent's), so what the
        parent saw and its children cannot lies between their node lines across that axis, on one of the
        measuring region's own node lines there: the children holding one of those lines carry ``|D|`` as a
        floor (each child of a later split half of it; a child holding none of them drops it) and are bisected
        across that axis (:meth:`_replace`), each split halving the gaps between node lines there, until a split
        whose discrepancy or one of whose children's rule estimates is at least :data:`BLIND_SEEN` of the floor
        sees the feature and the split check takes over (:data:`BLIND_CUTS` bisections at most).  (Carried
        through splits along the rule's own axes instead, the floor lived on in thousands of boxes a jump face
        crossed: Genz's discontinuous family ran to its budget where it had converged, 11,291 -> 2e6 evaluations
        in 4-D at 1e-4.  Dropped after three bisections instead of where no measuring node line is left, a slab
        ``0.39596 < x0 < 0.39626`` on the unit square, on the first box's K15 node line 0.396108, converged at
        rel_tol 1e-4 and 1e-6 after 7,332 evaluations with the whole slab missing: it lies between the node
        lines of the boxes three bisections down, [0.375, 0.4375] x [0, 1].)  The 2-D audit's split into four
        is across both axes: its children carry the floor the same way, a quarter of it each."""
        nch, k, m = raw.shape
        none = dict(blind=np.zeros_like(err), blind_axis=np.full(nch * k, -1, np.int8),
                    blind_cuts=np.zeros(nch * k, np.int8), blind_c=np.zeros(nch * k), blind_h=np.zeros(nch * k))
        if self.geometry.kind != "box" or nch not in (2, 4) or (nch == 4 and self.domain.dim != 2):
            return err, none
        axis = parents["axis"].astype(np.intp)
        pb, pa = parents["blind"], parents["blind_axis"].astype(np.intp)
        seen = (D >= BLIND_SEEN * pb) | (raw.max(axis=0) >= BLIND_SEEN * pb)
        cuts = parents["blind_cuts"].astype(np.intp)
        across = (pa >= 0) & ((pa == axis) | (nch == 4))
        carry = (pb > 0) & ~seen & ((pa >= 0) & (~across | (cuts > 1)))[:, None]
        new = np.zeros_like(carry)
        if nch == 2:
            with np.errstate(over="ignore", invalid="ignore"):     # estimates beyond the float range: no such split
                new = (parents["raw"] > BLIND_RATIO * raw.sum(axis=0)) & (D > noise)
        isnew = new.any(axis=1)
        share = np.where(new, D, np.where(carry, pb / nch, 0.0))                       # (k, m)
        ax = np.where(isnew, axis, np.where(carry.any(axis=1), pa, -1))
        nc = np.where(isnew, BLIND_CUTS, np.where(carry.any(axis=1), cuts - across, 0))
        ax_c = np.where(isnew, parents["centre"][np.arange(k), axis], parents["blind_c"])
        ax_h = np.where(isnew, parents["halfw"][np.arange(k), axis], parents["blind_h"])
        if new.any():
            self.checks["blind_splits"] = int(self.checks.get("blind_splits", 0)) + int(isnew.sum())
        blind = np.tile(share, (nch, 1))
        ax_t, c_t, h_t = np.tile(ax, nch), np.tile(ax_c, nch), np.tile(ax_h, nch)
        # a carried floor stays only in the children that hold one of the measuring region's node lines across
        # its axis (the feature lies on one of them)
        old = np.tile(~isnew & carry.any(axis=1), nch)
        if old.any():
            rows = np.flatnonzero(old)
            a = ax_t[rows].astype(np.intp)
            lo = kids["centre"][rows, a] - kids["halfw"][rows, a]
            hi = kids["centre"][rows, a] + kids["halfw"][rows, a]
            lines = c_t[rows, None] + h_t[rows, None] * self._axis_nodes()[None, :]
            slack = 1e-12 * h_t[rows, None]
            holds = ((lines >= lo[:, None] - slack) & (lines <= hi[:, None] + slack)).any(axis=1)
            drop = rows[~holds]
            blind[drop] = 0.0
            ax_t[drop] = -1
        held = ax_t >= 0
        cols = dict(blind=blind, blind_axis=ax_t.astype(np.int8),
                    blind_cuts=np.where(held, np.tile(nc, nch), 0).astype(np.int8),
                    blind_c=np.where(held, c_t, 0.0), blind_h=np.where(held, h_t, 0.0))
        return np.maximum(err, blind), cols

    def _axis_nodes(self) -> np.ndarray:
        """The rule's node coordinates along one axis on [-1, 1] (the box rules are symmetric in the axes);
        computed once per run (the blind floors read them at every split that carries one)."""
        if self._axis_node_cache is None:
            self._axis_node_cache = np.unique(np.round(self.rule.nodes[:, 0], 15))
        return self._axis_node_cache

    def _lineage_tails(self, parents: dict, child_sum: np.ndarray, raw: np.ndarray, err: np.ndarray,
                       wary: np.ndarray, noise: np.ndarray,
                       D_abs: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Simplex children's errors raised to their lineage tails, their lineage windows, and what each parent
        held by its lineage (``D_abs``, the split's discrepancy, but for an audit's cycle of splits).

        Next to a singular face or vertex the split check sees little of a simplex region's error (a
        bisection along an edge in the face measures nothing; one across it, a quarter), so the corrected
        estimates stayed 3-5x below the true errors (``x^-1/2`` on the 3-D simplex; the 3-D Dirichlet
        case reported 0.14 in its regions against 0.64).  Each region carries the discrepancies of its
        last ``2 d`` ancestors' splits (its share of them, :func:`~cubage.engine.estimate.lineage_windows`;
        ``d`` successive longest-edge bisections cut a simplex across every direction once): the
        reductions of the last two cycles give the share ``rho`` of the error a cycle leaves
        (:func:`~cubage.engine.estimate.cycle_ratio`), and the children of a region with a non-smooth
        signature get at least the tail ``|R1| rho / (1 - rho)`` (:func:`~cubage.engine.estimate.lineage_tail`).
        Splits that measured nothing (``|D|`` within the split check's rounding ``noise``) are no entry of
        the window: along a singular face most splits are such halvings, unevenly spaced, and a window
        counted in splits read ratios of 0, 0.5, 1 or 2 (x0^-0.9, 3-D and 4-D: 0.4-0.6x of the true error
        reported); a window not yet full gives its ratio over half its entries
        (:func:`~cubage.engine.estimate.lineage_cycles`).  The ratios are compared per measured split
        (:func:`~cubage.engine.estimate.split_ratio`: the ``c``-th root of a ratio over ``c`` entries).
        ``rho`` is the larger of the lineage's own and the mean over the wary class's splits (each ratio
        clipped to [-1, 1] and weighted by the older cycle's reduction; learnt after
        :data:`~cubage.engine.estimate.WARY_MIN_SPLITS` splits of the class, measured or not), and no tail applies
        while that mean is at most :data:`~cubage.engine.estimate.TREND_SLOW`: smooth lineages measure small
        ratios (a degree-7 rule's error falls 2^8-fold per cycle).  Windows start as NaN (not measured)."""
        nch, k, m = raw.shape
        cycle = self.domain.dim
        D = parents["value"] - child_sum                         # signed: a lineage's reductions share a sign
        tot = raw.sum(axis=0)
        with np.errstate(divide="ignore", invalid="ignore"):
            share = np.where(tot[None] > 0, raw / tot[None], 1.0 / nch)
        if nch != self.geometry.children_per_split:
            # an audit's cycle of d bisections (along a face, about one split in d measures something): what the
            # parent held by the lineage's ratio r of this cycle's reduction to the newest one before it,
            # ``|D| / (1 - r)``, is what the audit compares with the parent's estimate, and the children get
            # their shares of the tail ``|D| r / (1 - r)``
            # (each crossing of a face removes only 1 - 2^(p - 1) of the error: 7 % for x0^-0.9, so ``D`` alone
            # passed audits of runs 2-6x beyond their goal at rel_tol 1e-1 and 1e-2); no class gate here: the
            # cycle audit is for runs whose flagged regions hold most of the error
            measured = np.abs(D) > noise
            prev = parents["dwin"][:, 0]
            with np.errstate(divide="ignore", invalid="ignore"):
                r = np.where(measured & np.isfinite(prev) & (prev != 0), D * np.sign(prev) / np.abs(prev), 0.0)
            r = np.clip(np.nan_to_num(r), 0.0, _estimate.LINEAGE_CAP)
            implied = np.abs(D) / (1.0 - r)
            tail = (share * (np.abs(D) * r / (1.0 - r))[None]).reshape(nch * k, m)
            # the children's windows start anew: a cycle holds 0, 1 or 2 crossings of a face, and as an entry
            # of their windows it skewed the ratios after it (x0^-1/4, 4-D, rel_tol 3e-2: the class read 0.34
            # against 2^(p - 1) = 0.59, and the run converged reporting 0.4x of its true error)
            blank = np.full((nch * k, 2 * cycle, m), np.nan)
            return np.where(wary[:, None], np.maximum(err, tail), err), blank, implied
        measured = np.abs(D) > noise                            # a split along a singular face: D is rounding
        window, children = _estimate.lineage_windows(D, parents["dwin"], share, measured)
        own = _estimate.split_ratio(window, cycle)               # (k, m) per measured split, NaN where none
        learn = np.isfinite(own) & measured & ((parents["flags"] & FLAG_WARY) != 0)[:, None]
        # the class's ratio: the mean of the clipped ratios weighted by the older cycle's reduction, so that the
        # lineages holding the error decide (an unweighted mean let a second component's smooth lineages hold a
        # face-singular component's below TREND_SLOW: x0^-1/2 beside x^-1/2 on every face reported 0.37x)
        older = np.abs(_estimate.lineage_cycles(window, cycle)[1])
        c = self.checks
        total = (np.asarray(c.get("lineage_weighted", [0.0] * m), float)
                 + np.where(learn, np.clip(own, -1, 1) * older, 0.0).sum(axis=0))
        weight = np.asarray(c.get("lineage_weight", [0.0] * m), float) + np.where(learn, older, 0.0).sum(axis=0)
        # the class is learnt after WARY_MIN_SPLITS of its splits, measured or not: along a face only one split
        # in about d measures something (counting those alone, x0^-1/2 on the 4-D simplex at rel_tol 3e-2
        # converged after 9,800 evaluations 3.1x beyond its goal with 9 of 16 counted)
        seen = np.isfinite(own) & ((parents["flags"] & FLAG_WARY) != 0)[:, None]
        count = np.asarray(c.get("lineage_splits", [0] * m), np.int64) + seen.sum(axis=0)
        c["lineage_weighted"] = [float(v) for v in total]
        c["lineage_weight"] = [float(v) for v in weight]
        c["lineage_splits"] = [int(v) for v in count]
        with np.errstate(divide="ignore", invalid="ignore"):
            learnt = np.where((count >= _estimate.WARY_MIN_SPLITS) & (weight > 0), total / weight, 0.0)
        # the tail applies once the wary class as a whole converges slowly per cycle (the trend floor's
        # TREND_SLOW): a smooth lineage's ratio can read high at coarse scales (a 2-D monomial vanishing on the
        # faces, depth 3: estimates raised 30x, +9 % evaluations), a singular face's class reads 0.65-0.85
        slow = learnt[None] > _estimate.TREND_SLOW
        rho = np.where(slow, np.fmax(np.nan_to_num(own, nan=0.0), learnt[None]), 0.0)
        c_kids = np.maximum(_estimate.lineage_cycles(children, cycle)[2], 1)
        tail = _estimate.lineage_tail(children, np.tile(rho, (nch, 1)) ** c_kids, cycle)
        return np.where(wary[:, None], np.maximum(err, tail), err), children, D_abs
