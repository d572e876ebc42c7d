"""Vertex probes: integrand values just inside a region's vertices (and, on Genz–Malik boxes, a second probe per
vertex and the face centres), read against the rule's nodes to find a feature where no node lies.

Which children get probed (suspects, explained children), the probe points and their values (shared between
the two children of one bisection, or read from the last explained children's probes), the floors the probes
set on a region's estimate (:func:`~cubage.engine.estimate.probe_errors`, the Genz–Malik models), and the
rule's node lines they are read against.  Singularities a probe reveals go to :mod:`cubage.engine.singular`."""

from __future__ import annotations

import numpy as np

from cubage.engine import estimate as _estimate
from cubage.engine.flags import _NON_SMOOTH, FLAG_WATCH
from cubage.engine.geometry import vertex_signs

#: vertex probes of explained children kept for their neighbours (:meth:`Run._explained_probes`): at most this many
#: times ``2^d``, the newest
VERTEX_MEMO = 8
#: a kept probe is read for a neighbour's vertex only where it lies within this many of the neighbour's half-widths
#: of the neighbour's own probe (two boxes of at most twice each other's width beside a shared vertex: 3 * 2^-20)
SHIFT_MAX = 2.0 ** -17


class Probes:
    """Vertex probes and their floors (a mixin of :class:`~cubage.engine.run.Run`).

    Reads ``rule``, ``geometry``, ``domain``, ``m``, ``_w``; writes ``_vertex_memo`` (the explained children's
    probes, part of a checkpoint) and counters in ``checks`` (``probes_shared``, ``second_probes_skipped``,
    ``mid_probes_spared``, ...).  Calls
    :meth:`_values_at` and :meth:`goal` (:mod:`cubage.engine.run`), :meth:`_domain_bounds`
    (:mod:`cubage.engine.corners`), :meth:`_looks_resolved` (:mod:`cubage.engine.rule_errors`) and
    :meth:`_note_singular`, :meth:`_singular_factors`, :meth:`_unexplained_wild`, :meth:`_explained`
    (:mod:`cubage.engine.singular`).
    """

    def _probe_values(self, g: dict, probe: np.ndarray, mid: bool = False,
                      faces: bool = True) -> np.ndarray | None:
        """Integrand values (kp, v, m) at the vertex probes of the regions ``probe`` (a boolean mask)
        of ``g``, in a second call; a non-finite value there is a signature (NaN), not a failure.
        None when the rule has no corner nodes or no region is selected.  ``mid`` (Genz–Malik): a second
        probe per vertex and, unless ``faces`` is False (:meth:`_face_values` takes them then), one just
        inside the centre of every face."""
        if not probe.any():
            return None
        sub = {name: a[probe] for name, a in g.items()}
        t = self.geometry.probe_points(sub, _estimate.PROBE_POSITION)
        if t is None:
            return None
        if mid and "diagonal" not in self.rule.extra:   # Genz-Malik: a second probe per vertex, node to probe
            kp, d = int(probe.sum()), t.shape[1]
            tm = self.geometry.probe_points(sub, _estimate.PROBE_MID)
            tf = [self._face_points(sub)] if faces else []
            t = np.concatenate([t.reshape(kp, -1, d), tm.reshape(kp, -1, d), *tf], axis=1).reshape(-1, d)
        return self._values_at(t).reshape(int(probe.sum()), -1, self.m or 1)

    def _suspect_probes(self, g: dict, probe: np.ndarray, fr: np.ndarray,
                        waves: _estimate.WaveFits | None = None) -> tuple[np.ndarray | None, int | None,
                                                                          np.ndarray | None]:
        """Probe values (kp, 2 v + 2 d, m) of the Genz-Malik suspects ``probe`` of ``g`` (node values ``fr``) and
        the evaluations they cost: the vertex probes, then the second probe per vertex and the face probes
        (:meth:`_faces_to_probe`) where the vertex probes leave room for a feature (NaN elsewhere).

        A suspect whose every vertex probe one smooth model read from its nodes predicts
        (:func:`~cubage.engine.estimate.vertex_misses`: the quadratics of ``f``, ``log|f|`` and the powers along
        the diagonal, the separable models of the axis lines, the plane wave of the pair groups) within
        :data:`~cubage.engine.estimate.PROBE_SKIP` times the goal per unit volume of the domain takes no second
        probes: a kink or jump beyond its corner nodes adds about its size at the vertex beyond it to that
        model's miss there, so what such a feature can hide in the box is at most that share of the goal.  For the
        same reason the others take their second probe per vertex only at the vertices the models miss so (the
        4-D diagonal kink's suspects: 7,700 of their 10,256 vertices spared, 167,783 -> 160,091 evaluations).
        Two suspects of one bisection share the vertices of the face between them (:meth:`_sibling_probes`); the
        third value is how far each value was read from the box's own probe (kp, 2 v + 2 d).  ``waves``: the
        plane waves of ``fr``'s boxes (:meth:`_wave_fits`), fitted once for these models and the checks of
        :meth:`_probe_floor`."""
        if self.geometry.kind == "box" and self.geometry.children_per_split == 2:
            pv, spent_v, shift_v = self._sibling_probes(g, probe)
        else:
            pv = self._probe_values(g, probe)
            spent_v = shift_v = None
        if pv is None:
            return None, None, None
        kp, nv, m = pv.shape
        d = self.domain.dim
        fp = fr[probe]
        grp = self.rule.extra["groups"]["corner5"]
        axes, pairs = self._node_lines(fp)
        miss = _estimate.vertex_misses(fp[:, 0, :], fp[:, grp[0]:grp[1], :], pv,
                                       float(np.abs(self.rule.nodes[grp[0]]).max()), np.abs(fp).max(axis=1),
                                       axes, pairs, None if waves is None else (waves, np.nonzero(probe)[0]))
        dlo, dhi = self._domain_bounds()
        # per vertex: a feature beyond the corner node towards a vertex adds to that vertex's miss
        each = ((miss <= _estimate.PROBE_SKIP * float(self.goal().min()) / float(np.prod(dhi - dlo)))
                & np.isfinite(pv).all(axis=2))
        tight = each.all(axis=1)
        out = np.full((kp, 2 * nv + 2 * d, m), np.nan)
        out[:, :nv] = pv
        more = ~tight
        sub = {name: a[probe] for name, a in g.items()}
        if more.any():
            part = {name: a[more] for name, a in sub.items()}
            pts = self.geometry.probe_points(part, _estimate.PROBE_MID).reshape(int(more.sum()), nv, d)
            take = ~each[more]
            mids = np.full((int(more.sum()), nv, m), np.nan)
            mids[take] = self._values_at(pts[take])
            out[more, nv:2 * nv] = mids
            self.checks["mid_probes_spared"] = int(self.checks.get("mid_probes_spared", 0)) + int((~take).sum())
        # the face probes where the diagonal checks of the face's vertices are less sharp than theirs
        need = np.zeros((kp, 2 * d), dtype=bool)
        if more.any():
            need[more] = self._faces_to_probe(fp[more], out[more, :2 * nv])
        out[:, 2 * nv:] = self._face_values(sub, need)
        self.checks["face_probes_spared"] = int(self.checks.get("face_probes_spared", 0)) + int((~need[more]).sum())
        self.checks["second_probes_skipped"] = int(self.checks.get("second_probes_skipped", 0)) + int(tight.sum())
        shift = np.zeros(out.shape[:2])
        if shift_v is not None:
            shift[:, :nv] = shift_v
        return (out, (kp * nv if spent_v is None else spent_v) + int((~each[more]).sum()) + int(need.sum()),
                shift)

    def _sibling_probes(self, g: dict, probe: np.ndarray) -> tuple[np.ndarray | None, int, np.ndarray | None]:
        """Vertex probe values (kp, 2^d, m) of the Genz-Malik boxes ``probe`` of the bisection children ``g``
        (block layout: the lower children, then the upper ones), the evaluations they cost, and how far each
        value was read from the box's own probe (kp, 2^d; in half-widths of the box; 0 for its own probes).

        Two children of one split share the ``2^(d-1)`` vertices of the face between them, and their probes there
        lie ``2 (1 - PROBE_POSITION)`` of a child's half-width apart across it: where both are probed, the upper
        child reads those vertices from the lower child's probes (2^-19 of its half-width away; the check
        allows for it, :func:`~cubage.engine.estimate.probe_errors` ``shift``, as for the neighbours of
        :meth:`_explained_probes`), a quarter fewer evaluations.  A jump exactly between the two points reads as
        a deviation of the upper child (a floor, never a miss)."""
        if not probe.any():
            return None, 0, None
        sub, t = self._vertex_probe_points(g, probe)
        if t is None:
            return None, 0, None
        kp, nv, d = t.shape
        m = self.m or 1
        k = len(probe) // 2
        c = g["centre"]
        pair = np.nonzero(probe[:k] & probe[k:])[0]                      # parents both of whose children are probed
        pos = np.cumsum(probe) - 1                                        # row of each probed child in t
        need = np.ones((kp, nv), dtype=bool)
        src = dst = np.zeros(0, np.intp)
        if pair.size:
            axis = np.argmax(np.abs(c[k + pair] - c[pair]), axis=1)         # the split axis of each pair
            signs = vertex_signs(d)
            lo_rows, hi_rows = pos[pair], pos[k + pair]
            # the upper child's vertices on the shared face (sign -1 on the split axis) and the lower child's same
            # points (sign +1 there, the other signs equal)
            vv = np.arange(nv)
            bit = (1 << (d - 1 - axis))[:, None]                             # (p, 1)
            face = signs[:, axis].T < 0                                       # (p, nv)
            hv = np.broadcast_to(vv[None, :], face.shape)[face].reshape(pair.size, -1)          # (p, nv/2)
            lv = hv & ~bit
            dst = (np.repeat(hi_rows, hv.shape[1]), hv.ravel())
            src = (np.repeat(lo_rows, lv.shape[1]), lv.ravel())
            need[dst] = False
        pv = np.full((kp, nv, m), np.nan)
        pv[need] = self._values_at(t[need])
        shift = np.zeros((kp, nv))
        if pair.size:
            pv[dst] = pv[src]
            h = sub["halfw"][dst[0]]
            shift[dst] = (np.abs(t[src] - t[dst]) / h).max(axis=1)
            self.checks["probes_shared"] = int(self.checks.get("probes_shared", 0)) + int(dst[0].size)
        return pv, int(need.sum()), shift

    def _vertex_probe_points(self, g: dict, sel: np.ndarray) -> tuple[dict, np.ndarray | None]:
        """The boxes ``sel`` (a boolean mask) of ``g`` and their vertex probe points (ks, 2^d, d), in
        :func:`~cubage.engine.geometry.vertex_signs` order; None when the geometry takes no probes."""
        sub = {name: a[sel] for name, a in g.items()}
        t = self.geometry.probe_points(sub, _estimate.PROBE_POSITION)
        if t is None:
            return sub, None
        d = self.domain.dim
        return sub, t.reshape(int(sel.sum()), 2 ** d, d)

    def _face_points(self, g: dict) -> np.ndarray:
        """Points (k, 2 d, d) just inside the centre of every face of the boxes ``g`` (order ``+e_0, -e_0, +e_1,
        ...``): the axis lines through the centre carry five nodes each, so a kink parallel to a face in its last
        few per cent shows there, free of the other axes' curvature that can hide it on the diagonals."""
        d = g["centre"].shape[1]
        eye = np.repeat(np.eye(d), 2, axis=0) * np.tile([1.0, -1.0], d)[:, None]        # +e0, -e0, +e1, ...
        return g["centre"][:, None, :] + _estimate.PROBE_POSITION * g["halfw"][:, None, :] * eye[None]

    def _face_values(self, g: dict, need: np.ndarray) -> np.ndarray:
        """Values (k, 2 d, m) at the face probes ``need`` (k, 2 d) of the boxes ``g``; NaN (no data) elsewhere."""
        out = np.full((*need.shape, self.m or 1), np.nan)
        if need.any():
            out[need] = self._values_at(self._face_points(g)[need])
        return out

    def _explained_probes(self, g: dict, light: np.ndarray) -> tuple[np.ndarray | None, int, np.ndarray | None]:
        """Vertex probe values (kl, 2^d, m) of the Genz–Malik boxes ``light`` of ``g`` (children a known singularity
        explains, :meth:`_explained`), the evaluations they cost, and how far each value was read from the box's
        own probe (kl, 2^d; in half-widths of the box, the largest over the axes; 0 for its own probes).

        A vertex that one of the last explained children probed (``_vertex_memo``, the newest
        :data:`VERTEX_MEMO` times ``2^d``) is read from that probe when the two probe points lie within
        :data:`SHIFT_MAX` half-widths of each other: the lineage beside a singular face splits the face's box
        again and again, and each new explained child shares the vertices of its face away from the singularity
        with the one before it (``x0^(-1/2) (x1 + x2 + x3)`` on [0, 1]^4: 8 of its 16), probed there 3 * 2^-20
        of its half-width across the face they share.  The check allows for the shift
        (:func:`~cubage.engine.estimate.probe_errors` ``shift``); a jump exactly on that face reads as a
        deviation (a floor, never a miss)."""
        sub, t = self._vertex_probe_points(g, light)
        if t is None:
            return None, 0, None
        kl, nv, d = t.shape
        m = self.m or 1
        h = sub["halfw"][:, None, :]
        v = sub["centre"][:, None, :] + h * vertex_signs(d)[None]
        pv = np.full((kl, nv, m), np.nan)
        shift = np.zeros((kl, nv))
        found = np.zeros((kl, nv), dtype=bool)
        memo = self._vertex_memo
        if memo is not None and memo[0].shape[1] == d and memo[2].shape[1] == m and len(memo[0]):
            mv, mt, mf = memo
            step = max(1, 4_000_000 // (nv * len(mv) * d))
            for i in range(0, kl, step):
                vi, hi, ti = v[i:i + step], h[i:i + step], t[i:i + step]
                close = (np.abs(vi[:, :, None, :] - mv[None, None]) <= 1e-6 * hi[:, :, None, :]).all(axis=3)
                with np.errstate(invalid="ignore", divide="ignore"):
                    sh = np.where(close, (np.abs(mt[None, None] - ti[:, :, None, :]) / hi[:, :, None, :]).max(axis=3),
                                  np.inf)
                j = np.argmin(sh, axis=2)
                sh = np.take_along_axis(sh, j[:, :, None], axis=2)[:, :, 0]
                ok = sh <= SHIFT_MAX
                pv[i:i + step][ok] = mf[j[ok]]
                shift[i:i + step][ok] = sh[ok]
                found[i:i + step] = ok
        need = ~found
        if need.any():
            pv[need] = self._values_at(t[need])
            new = (v[need], t[need], pv[need])
            if memo is not None and memo[0].shape[1] == d and memo[2].shape[1] == m:
                new = tuple(np.concatenate([o, n]) for o, n in zip(memo, new))
            keep = VERTEX_MEMO * nv
            self._vertex_memo = tuple(a[-keep:].copy() for a in new)
        self.checks["probes_shared"] = int(self.checks.get("probes_shared", 0)) + int(found.sum())
        return pv, int(need.sum()), shift

    def _probe_floor(self, g: dict, fr: np.ndarray, pv: np.ndarray | None, probe: np.ndarray,
                     shift: np.ndarray | None = None,
                     waves: _estimate.WaveFits | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                                       np.ndarray]:
        """Error floors (k, m), signature flags (k,), the axis to bisect (k,; -1 for the rule's choice) and
        the regions to watch (k,; those only the remainder allowance cleared, whose children get the short
        checks) from what the rule's differences miss: the vertex probes of the regions ``probe``
        (:meth:`_vertex_floor`) and, for tensor Gauss–Kronrod boxes, every box's per-axis decay check
        (:func:`~cubage.engine.estimate.axis_kink_errors`: a kink across the middle of a box biases its
        15-, 7- and 8-point rules alike, and no probe sees it).  Where the decay check sets the larger
        floor, the box is bisected across the axis it points to.  ``waves``: the plane waves
        of ``fr``'s boxes (:meth:`_wave_fits`), if already in use."""
        floor, deviates, steer, watch = self._vertex_floor(g, fr, pv, probe, shift, waves)
        if "diagonal" not in self.rule.extra or fr.shape[0] == 0:
            return floor, deviates, steer, watch
        vol = self.geometry.volume(g)
        kf, kinked, per_axis = _estimate.axis_kink_errors(fr, self.rule.extra["nodes_1d"], self.rule.extra["wk_1d"],
                                                          vol, np.abs(fr).max(axis=1))
        own = kinked & (kf > floor).any(axis=1)
        steer = np.where(own, np.argmax(per_axis, axis=1), steer)
        return np.maximum(floor, kf), deviates | kinked, steer, watch

    def _vertex_floor(self, g: dict, fr: np.ndarray, pv: np.ndarray | None, probe: np.ndarray,
                      shift: np.ndarray | None = None,
                      waves: _estimate.WaveFits | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                                        np.ndarray]:
        """Error floors (k, m), deviation flags (k,), the axis the deviating probes point to (k,; -1
        for none, :func:`~cubage.engine.estimate.probe_axis`) and the regions only the remainder allowance
        cleared (k,) from the vertex probes of the regions ``probe`` (``shift``: :meth:`_explained_probes`;
        ``waves``: :meth:`_wave_fits` of ``fr``)."""
        k, m = fr.shape[0], fr.shape[2]
        floor = np.zeros((k, m))
        deviates = np.zeros(k, dtype=bool)
        steer = np.full(k, -1, dtype=np.intp)
        remainder_watch = np.zeros(k, dtype=bool)
        if pv is None:
            return floor, deviates, steer, remainder_watch
        fp = fr[probe]
        vol = self.geometry.volume({name: arr[probe] for name, arr in g.items()})
        # a value far above the integrand's magnitude on the region's nodes and on the first region's is clipped
        # to PROBE_WILD times that magnitude where a power law climbs to it (a singularity just inside the vertex
        # then costs a bounded floor instead of an unbounded one; elsewhere a feature no node reached keeps its
        # value, _unexplained_wild), and a thin layer along a face that no node reaches (a value of 1 where
        # every node reads 1e-14) still raises the region's estimate
        # (an integrand that is 0 on every node has no magnitude to compare with: any finite value is data, as
        # when a jump leaves the nodes outside a small support)
        scale = np.maximum(np.abs(fp).max(axis=1), np.asarray(self.checks["f_scale"]))
        with np.errstate(over="ignore", invalid="ignore"):     # a bound beyond the float range is no bound
            big = np.where(scale > 0, _estimate.PROBE_WILD * scale, np.inf)
            self._note_singular({name: arr[probe] for name, arr in g.items()}, pv, big, fp)
            over = np.isfinite(pv) & (np.abs(pv) > big[:, None, :])
            over &= ~self._unexplained_wild(fp, pv, over)[:, :, None]
            wild = over.any(axis=(1, 2))     # clipped: the excess is no jump's size
            pv = np.where(over, np.clip(pv, -big[:, None, :], big[:, None, :]), pv)
        if "diagonal" in self.rule.extra:                       # tensor rule: nodes all along each diagonal
            diag = self.rule.extra["diagonal"]
            fl, dv, ex = _estimate.extrapolation_errors(fp[:, diag, :], self.rule.extra["diagonal_t"], pv, vol,
                                                        np.abs(fp).max(axis=1), by_vertex=True)
        else:
            fl, dv, ex, watch = self._genz_malik_probes(fp, pv, vol, wild, shift,
                                                        None if waves is None else (waves, np.nonzero(probe)[0]))
            # a region only the remainder allowance cleared is watched: its children get the short checks
            remainder_watch[probe] = watch & ~dv
            if dv.any():
                # a known singularity explains a region's deviations when f times its power law shows none
                sub = {name: arr[probe][dv] for name, arr in g.items()}
                w, wp = self._singular_factors(sub, pv.shape[1])
                ok = np.isfinite(w).all(axis=1) & np.isfinite(wp).all(axis=1)
                if ok.any():
                    _, dvm, _, _ = self._genz_malik_probes(fp[dv][ok] * w[ok][:, :, None],
                                                        pv[dv][ok] * wp[ok][:, :, None], vol[dv][ok],
                                                        shift=None if shift is None else shift[dv][ok])
                    rows = np.nonzero(dv)[0][ok][~dvm]
                    fl[rows], dv[rows], ex[rows] = 0.0, False, 0.0
                    self.checks["singular_explained"] = int(self.checks.get("singular_explained", 0)) + len(rows)
        floor[probe] = fl
        deviates[probe] = dv
        steer[probe] = _estimate.probe_axis(ex, vertex_signs(ex.shape[1].bit_length() - 1))   # 2^d vertices
        return floor, deviates, steer, remainder_watch

    def _genz_malik_probes(self, fp: np.ndarray, pv: np.ndarray, vol: np.ndarray, wild: np.ndarray | None = None,
                           shift: np.ndarray | None = None,
                           waves: tuple | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Floors (k, m), deviation flags (k,), per-vertex excess (k, v) and the boxes that only the remainder
        allowance cleared (k,; :func:`~cubage.engine.estimate.probe_errors` ``watch``) of Genz–Malik boxes with
        node values ``fp`` and probe values ``pv`` (vertex probes, then mid probes and face probes when taken).
        ``wild`` (k,): boxes whose probe values were clipped (:data:`~cubage.engine.estimate.PROBE_WILD`); their
        floors are not capped (:func:`~cubage.engine.estimate.beyond_cap` reads the excess as the feature's size).
        ``shift`` (k, probes): where a value was read beside its probe
        (:func:`~cubage.engine.estimate.probe_errors`).  ``waves`` ``(fits, index)``: the plane waves of these
        boxes' node values, each box's row in ``fits`` (:func:`~cubage.engine.estimate.probe_errors`)."""
        if wild is None:
            wild = np.zeros(len(fp), dtype=bool)
        grp = self.rule.extra["groups"]["corner5"]
        nv = grp[1] - grp[0]
        if pv.shape[1] > nv:
            # rows whose second probes were not taken (children a known singularity explains: vertex probes only)
            only = np.isnan(pv[:, nv:]).all(axis=(1, 2))
            if only.all():
                pv = pv[:, :nv]
                shift = None if shift is None else shift[:, :nv]
            elif only.any():
                fl, dv, ex, wt = self._genz_malik_probes(fp[~only], pv[~only], vol[~only], wild[~only],
                                                         None if shift is None else shift[~only],
                                                         None if waves is None else (waves[0], waves[1][~only]))
                fl1, dv1, ex1, wt1 = self._genz_malik_probes(fp[only], pv[only, :nv], vol[only], wild[only],
                                                             None if shift is None else shift[only, :nv],
                                                             None if waves is None else (waves[0], waves[1][only]))
                out = (np.empty((len(fp), *fl.shape[1:])), np.empty(len(fp), bool), np.empty((len(fp), nv)),
                       np.empty(len(fp), bool))
                for o, a_, b_ in zip(out, (fl, dv, ex, wt), (fl1, dv1, ex1, wt1)):
                    o[~only], o[only] = a_, b_
                return out
        fc = fp[:, grp[0]:grp[1], :]
        a = float(np.abs(self.rule.nodes[grp[0]]).max())
        fmid = pv[:, nv:2 * nv] if pv.shape[1] > nv else None
        axes, pairs = self._node_lines(fp)
        watch: list = []
        fl, dv, ex = _estimate.probe_errors(fp[:, 0, :], fc, fc[:, ::-1, :], pv[:, :nv], a, vol,
                                            np.abs(fp).max(axis=1), by_vertex=True, f_mid=fmid, axes=axes,
                                            pairs=pairs, watch=watch,
                                            shift=None if shift is None else shift[:, :nv], waves=waves)
        if dv.any():
            # a feature the probes see beyond a resolved box's nodes lies outside their hull: its share of the
            # box is at most the slab beyond the outermost nodes (:func:`~cubage.engine.estimate.beyond_nodes`)
            q = np.einsum("rp,kpm->krm", self._w, fp) * vol[:, None, None]
            absq = np.abs(np.einsum("p,kpm->km", self.rule.weights, np.abs(fp))) * vol[:, None]
            fl = _estimate.beyond_cap(fl, ex, vol, _estimate.beyond_nodes(self.rule.nodes),
                                      self._looks_resolved(q, absq) & ~wild,
                                      _estimate.corner_share(a, self.domain.dim),
                                      (fp.max(axis=1) - fp.min(axis=1)).sum(axis=1))
        if pv.shape[1] > 2 * nv:
            f_ax2, f_ax3, l2, l3 = axes
            ff, fd = _estimate.face_errors(fp[:, 0, :], f_ax2, f_ax3, pv[:, 2 * nv:], l2, l3, vol,
                                           np.abs(fp).max(axis=1))
            fl, dv = np.maximum(fl, ff), dv | fd
        return fl, dv, ex, watch[0]

    def _wave_fits(self, fr: np.ndarray) -> _estimate.WaveFits:
        """The plane waves of the Genz–Malik boxes with node values ``fr`` (k, p, m), each fitted when first read
        (:class:`~cubage.engine.estimate.WaveFits`): :meth:`_suspect_probes` and :meth:`_probe_floor` of one
        step read the same boxes' waves."""
        (f_ax2, f_ax3, l2, l3), (f_pair, l4) = self._node_lines(fr)
        return _estimate.WaveFits(fr[:, 0, :], f_ax2, f_ax3, f_pair, l2, l3, l4)

    def _node_lines(self, fp: np.ndarray) -> tuple[tuple, tuple]:
        """The smooth models' inputs from Genz–Malik node values ``fp`` (k, p, m): ``axes`` = (values on the
        axis lines at ``l2`` and ``l3``, ``l2``, ``l3``) and ``pairs`` = (pair-group values, ``l4``)."""
        groups = self.rule.extra["groups"]
        g2, g3, g4 = groups["axis2"], groups["axis3"], groups["pair4"]
        axes = (fp[:, g2[0]:g2[1], :], fp[:, g3[0]:g3[1], :], float(np.abs(self.rule.nodes[g2[0]]).max()),
                float(np.abs(self.rule.nodes[g3[0]]).max()))
        return axes, (fp[:, g4[0]:g4[1], :], float(np.abs(self.rule.nodes[g4[0]]).max()))

    def _faces_to_probe(self, fp: np.ndarray, pv: np.ndarray) -> np.ndarray:
        """Faces (k, 2 d) of Genz–Malik boxes (node values ``fp``, vertex and mid probe values ``pv``) whose
        centre probe sees a kink parallel to them more sharply than their vertices' diagonal checks do
        (:func:`~cubage.engine.estimate.faces_to_probe`)."""
        grp = self.rule.extra["groups"]["corner5"]
        nv = grp[1] - grp[0]
        fc = fp[:, grp[0]:grp[1], :]
        (f_ax2, f_ax3, l2, l3), _ = self._node_lines(fp)
        return _estimate.faces_to_probe(fp[:, 0, :], fc, fc[:, ::-1, :], pv[:, :nv], pv[:, nv:2 * nv],
                                        f_ax2, f_ax3, float(np.abs(self.rule.nodes[grp[0]]).max()), l2, l3,
                                        vertex_signs(self.domain.dim))

    def _suspects(self, parents: dict, q: np.ndarray, absq: np.ndarray, kids: dict | None = None) -> np.ndarray:
        """Children (of the split ``parents``, values ``q``) whose vertices to probe.

        A tensor rule's regions are all probed (``2^d`` values beside ``15^d`` nodes); Genz–Malik
        children are probed when they look resolved although their parent showed a non-smooth signature
        or is watched (:data:`FLAG_WATCH`: a descendant of such a region that was not probed yet, because
        its estimate was still large; a feature near its faces would otherwise escape every probe).
        """
        nch = self.geometry.children_per_split
        if "diagonal" in self.rule.extra:
            return np.ones(q.shape[0], dtype=bool)
        suspect = np.tile((parents["flags"] & (_NON_SMOOTH | FLAG_WATCH)) != 0, nch)
        if suspect.any() and kids is not None:
            suspect &= ~self._explained(parents, kids)
        if suspect.any():
            suspect &= self._looks_resolved(q, absq)
        return suspect
