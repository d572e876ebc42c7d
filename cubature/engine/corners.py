"""Domain-corner checks: the boxes holding a vertex of the domain, checked level by level.

The node values of the Genz–Malik boxes holding a domain vertex are kept (:meth:`CornerChecks._cache_corner_nodes`,
with the first region's vertex probes, part of a checkpoint); before the run may say ``converged`` the boxes
at each vertex, each half the size of the last, are probed at the vertex and read against their nodes under
smooth models, and a deviation that matters to the goal floors the box
(:meth:`CornerChecks._domain_corners`).  Also the domain's bounds and the ranking of the first boxes' corners."""

from __future__ import annotations

import math

import numpy as np

from cubage.engine import estimate as _estimate
from cubage.engine.audit import AUDIT_SMALL
from cubage.engine.flags import _NON_SMOOTH, FLAG_PROBE, FLAG_PROBED
from cubage.engine.geometry import has_probes, vertex_signs
from cubage.engine.probes import SHIFT_MAX

#: boxes holding a domain vertex, each half the size of the last, that Run._domain_corners may check in turn
CORNER_LEVELS = 6
#: ... a check read with the one at the level above bounds a jump at the vertex by the two deviations, assuming a
#: smooth residual that shrinks at least this much per halving (:meth:`Run._domain_corners`)
CORNER_DECAY = 4.0
#: ... and a deviation that shrank less than this many times from the level above under every smooth model is a
#: jump's when it matters to the goal (a jump at the vertex keeps its size at every level)
CORNER_STEADY = 2.0


class CornerChecks:
    """Domain-corner checks (a mixin of :class:`~cubage.engine.run.Run`).

    Reads ``rule``, ``geometry``, ``domain``, ``settings``, ``store``, ``queue``, ``m``; writes
    ``_corner_cache`` and ``_first_probes`` (both part of a checkpoint), ``_domain_box``, ``_audit_ok``,
    ``message``, ``evaluations``, counters in ``checks`` and the flags and errors of the boxes it floors.
    Calls :meth:`_values_at`, :meth:`_exact_totals`, :meth:`_set_errors` and :meth:`goal`
    (:mod:`cubage.engine.run`) and :meth:`_node_lines` (:mod:`cubage.engine.probes`).
    """

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
