"""The audit before a run may say ``converged``.

A sample of the regions holding most of the value, the region with the largest error estimate and the wide
boxes beside a feature's lineage (:meth:`AuditChecks._straddlers`) are split (in 2-D first checked on a lattice,
:mod:`cubage.engine.lattice`); the hidden error the sample extrapolates must stay within the goal.  The
probe and corner floors of the audited boxes are kept for their children.  The audit's sample sizes and
its pass threshold are here; the domain-corner checks that follow it are in :mod:`cubage.engine.corners`."""

from __future__ import annotations

import numpy as np

from cubage.engine.flags import _NON_SMOOTH, FLAG_AUDITED, FLAG_PROBE, FLAG_PROBED, FLAG_WARY, FLAG_WATCH

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
#: the audit adds the wide neighbours of a feature's lineage (:meth:`Run._straddlers`): boxes at least this many
#: times wider along an axis than a box of that lineage whose extent there they hold
STRADDLE_RATIO = 8.0
#: at most this many such boxes per audit, and read from at most this many boxes of the lineage (largest errors)
STRADDLE_MAX = 8
STRADDLE_FEATURES = 64
#: The 2-D audit first measures each sampled tensor Gauss-Kronrod box's missed error on a Fibonacci lattice of
#: this many points (a prime Fibonacci number; :meth:`Run._audit_check`); 0: always the full split into four boxes
AUDIT_LATTICE = 233


class AuditChecks:
    """The audit (a mixin of :class:`~cubage.engine.run.Run`).

    Reads ``rule``, ``geometry``, ``domain``, ``settings``, ``store``, ``queue``, ``m``, ``evaluations``,
    ``key_weight``, ``total_error``, ``_missed``; writes ``_audit_ok``, ``_lattice_miss``, ``message``,
    counters in ``checks`` and the floors of the store's rows it keeps.  Calls the loop's
    :meth:`_evaluate`, :meth:`_replace`, :meth:`_per_split`, :meth:`_exact_totals`, :meth:`_set_errors`,
    :meth:`_flagged` and :meth:`goal` (:mod:`cubage.engine.run`), the probes, the lattice check, the
    singular bookkeeping and the warm start's share.
    """

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
        # (sorting pays from a few thousand boxes on: 3-D kink, 0.38 -> 0.08 s per audit)
        near = _Near(c[wide, 0], wh[:, 0], 1e-9 * (1.0 + np.abs(c).max() + np.abs(h).max())) \
            if len(wide) >= 4096 else None
        for j in range(len(feat)):
            # the boxes still without a feature that meet this one (few), then the axes along which they hold it;
            # tested among the boxes whose centre along the first axis is near enough to meet it there (_Near)
            cand = None if near is None else near.within(flo[j, 0] - tol, fhi[j, 0] + tol)
            if cand is None:
                meet = np.nonzero(((wlo <= fhi[j] + tol) & (whi >= flo[j] - tol)).all(axis=1) & (found < 0))[0]
            else:
                meet = cand[((wlo[cand] <= fhi[j] + tol) & (whi[cand] >= flo[j] - tol)).all(axis=1)
                            & (found[cand] < 0)]
            if meet.size == 0:
                continue
            inside = (wlo[meet] <= flo[j] + tol) & (whi[meet] >= fhi[j] - tol)          # (n, d)
            narrow = wh[meet] >= STRADDLE_RATIO * fh[j][None, :]
            ax = inside & narrow
            hit = ax.any(axis=1)
            if hit.any():
                found[meet[hit]] = np.argmax(ax[hit], axis=1)
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


class _Near:
    """The boxes (centres ``centre`` (n,) and half-widths ``halfw`` (n,) along one axis) that may meet an
    interval ``[lo, hi]`` along it: a box meets it there when ``centre - halfw <= hi`` and ``centre + halfw >=
    lo``, so its centre lies in ``[lo - halfw, hi + halfw]``; grouped by half-width (a bisection has few) and
    sorted by centre within each group, those centres are two binary searches per group away.  ``slack``
    widens each window beyond the rounding of ``centre -+ halfw`` (a superset: the caller tests the boxes
    found exactly).  With more than :attr:`GROUPS` half-widths, :meth:`within` gives None (test them all)."""

    GROUPS = 64

    def __init__(self, centre: np.ndarray, halfw: np.ndarray, slack: float):
        widths, which = np.unique(halfw, return_inverse=True)
        self.groups = []
        if len(widths) > self.GROUPS:
            return
        for g, w in enumerate(widths):
            idx = np.nonzero(which == g)[0]
            order = np.argsort(centre[idx], kind="stable")
            self.groups.append((float(w) + slack, centre[idx][order], idx[order]))

    def within(self, lo: float, hi: float) -> np.ndarray | None:
        """Indices (ascending) of the boxes whose centre is within their half-width (plus the slack) of
        ``[lo, hi]``; None with too many half-widths."""
        if not self.groups:
            return None
        parts = []
        for reach, cs, idx in self.groups:
            a = int(np.searchsorted(cs, lo - reach, side="left"))
            b = int(np.searchsorted(cs, hi + reach, side="right"))
            if b > a:
                parts.append(idx[a:b])
        return np.sort(np.concatenate(parts)) if parts else np.zeros(0, np.intp)
