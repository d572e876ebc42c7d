"""Point singularities and singular faces read from wild vertex probes, and what they explain.

A probe far beyond its box's nodes that climbs like a power law marks a singular point or face
(``checks["singular_vertices"]``, ``checks["singular_faces"]``, ``checks["singular_powers"]``); a wild probe
with no power law behind it is kept as read (a feature no node reached).  A known singularity explains the
non-asymptotic signature of the boxes beside it that do not touch it (their checks read ``f |x - s|^p``;
their children are not watched).  Used by the vertex probes (:mod:`cubage.engine.probes`), the rule
estimates (:mod:`cubage.engine.rule_errors`) and the audit."""

from __future__ import annotations

import numpy as np

from cubage.engine import estimate as _estimate
from cubage.engine.flags import _NON_SMOOTH, FLAG_NON_ASYMPTOTIC
from cubage.engine.geometry import vertex_signs

#: point singularities remembered from wild vertex probes (:meth:`Run._note_singular`), and as many faces
SINGULAR_VERTICES = 16
#: a face of a Genz-Malik box is remembered as singular when the probes of two or more of its vertices, and of
#: no vertex off it, read beyond this many times the nodes' magnitude (sqrt of PROBE_WILD: x0^(-1/2) reads
#: 200-700 times its nodes at every depth) ...
SINGULAR_RATIO = 100.0
#: ... and each of them climbs from its diagonal's corner node at least this many times as steeply (in log|f| per
#: unit of the diagonal) as it climbed from the centre to that node: a power law near the face, not a steep
#: smooth factor (exp(c x) climbs evenly)
SINGULAR_STEEP = 4.0
#: a point singularity's power (:meth:`Run._singular_power`) is its probe's growth from the corner node, which must
#: match the growth from the centre to that node within this share: then f |x - s|^p is what the checks of the
#: boxes away from it read (:meth:`Run._singular_factors`)
SINGULAR_POWER_MATCH = 0.25


class Singularities:
    """Singular points and faces (a mixin of :class:`~cubage.engine.run.Run`).

    Reads ``rule``, ``domain``, ``geometry``; keeps what it learns in ``checks`` (``singular_vertices``,
    ``singular_faces``, ``singular_powers``: the only state it writes).  Calls
    :meth:`_face_points` (:mod:`cubage.engine.probes`).
    """

    def _unexplained_wild(self, fp: np.ndarray, pv: np.ndarray, over: np.ndarray) -> np.ndarray:
        """(k, probes): the vertex probes of Genz–Malik boxes (node values ``fp``, probe values ``pv``) that read
        beyond :data:`~cubage.engine.estimate.PROBE_WILD` times the nodes (``over``) where no power law climbs
        from the centre through the corner node to the probe (:meth:`_singular_power`): no singularity there but
        a feature no node reached, as a narrow cube of a large value cut off the domain's corner (its clipped
        value let the box at the vertex shrink until the bounded floor met the goal, the cube never resolved:
        ``benchmarks/stress.py``, seed 31, 5-D and 6-D corners, converged with the whole feature missing)."""
        out = np.zeros(over.shape[:2], dtype=bool)
        if "diagonal" in self.rule.extra or "corner5" not in self.rule.extra.get("groups", {}):
            return out
        nv = 2 ** self.domain.dim
        for i, v in zip(*np.nonzero(over[:, :nv].any(axis=2))):
            out[i, v] = self._singular_power(fp[i], pv[i], int(v)) is None
        return out

    def _singular_factors(self, g: dict, n_probes: int = 0) -> tuple[np.ndarray, np.ndarray]:
        """``|x - s|^p`` at the nodes (k, p) and at the ``n_probes`` probes (k, n_probes; the layout of
        :meth:`_probe_values`) of the Genz–Malik boxes ``g``, with ``s`` the known point singularity nearest each
        box and ``p`` its power (:meth:`_note_singular`); NaN for boxes that touch it, or where none is known.
        Away from ``s``, ``f |x - s|^p`` is smooth where ``f`` is but for ``s`` (``1/|x|``: a constant)."""
        k, d = len(g["centre"]), self.domain.dim
        npts = self.rule.size
        nan = (np.full((k, npts), np.nan), np.full((k, n_probes), np.nan))
        pts = self.checks.get("singular_vertices") or []
        pw = self.checks.get("singular_powers") or []
        use = [i for i, p in enumerate(pw[:len(pts)]) if p is not None]
        if (not use or k == 0 or self.geometry.kind != "box" or "diagonal" in self.rule.extra
                or hasattr(self.geometry, "to_user")):
            return nan
        S = np.asarray([pts[i] for i in use], dtype=float)                       # (s, d)
        P = np.asarray([pw[i] for i in use], dtype=float)
        c, h = g["centre"], g["halfw"]
        gap = np.maximum(np.abs(S[None] - c[:, None, :]) - h[:, None, :], 0.0)  # (k, s, d)
        dist = np.sqrt((gap * gap).sum(axis=2))
        j = np.argmin(dist, axis=1)
        near = dist[np.arange(k), j] > 1e-9 * h.max(axis=1)                    # the box does not touch it
        s, p = S[j], P[j]
        x = self.geometry.points(g).reshape(k, npts, d)
        parts = [x]
        if n_probes:
            nv = 2 ** d
            parts.append(self.geometry.probe_points(g, _estimate.PROBE_POSITION).reshape(k, nv, d))
            if n_probes > nv:
                parts.append(self.geometry.probe_points(g, _estimate.PROBE_MID).reshape(k, nv, d))
                parts.append(self._face_points(g))
        allx = np.concatenate(parts, axis=1)
        if allx.shape[1] != npts + n_probes:
            return nan
        r = np.sqrt(((allx - s[:, None, :]) ** 2).sum(axis=2))
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            w = np.where(near[:, None], r ** p[:, None], np.nan)
        return w[:, :npts], w[:, npts:]

    def _note_singular(self, g: dict, pv: np.ndarray, big: np.ndarray, fp: np.ndarray | None = None) -> None:
        """Remember (in ``checks``, so a checkpoint keeps them) up to :data:`SINGULAR_VERTICES` Genz–Malik box
        vertices whose probe read a finite value beyond ``big`` (:data:`~cubage.engine.estimate.PROBE_WILD`
        times the nodes' magnitude): a point singularity there, as at the corner of ``1/|x|``; and as many
        faces (``checks["singular_faces"]``, ``[lo, hi]`` with ``lo = hi`` on the face's fixed axes) holding
        two or more vertices, and no vertex off them, whose probes (values ``pv``, node values ``fp``) read
        beyond :data:`SINGULAR_RATIO` times the nodes' magnitude, each climbing from its diagonal's corner node
        :data:`SINGULAR_STEEP` times as steeply as from the centre to it: a singular face, as ``x0^(-1/2)``'s
        along ``x0 = 0``, where the probes read a few hundred times the nodes at every depth."""
        known = self.checks.setdefault("singular_vertices", [])
        if self.geometry.kind != "box" or "diagonal" in self.rule.extra or "centre" not in g:
            return
        d = self.domain.dim
        nv = 2 ** d
        signs = vertex_signs(d)
        powers = self.checks.setdefault("singular_powers", [])
        if len(known) < SINGULAR_VERTICES:
            with np.errstate(invalid="ignore"):
                wild = (np.isfinite(pv[:, :nv]) & (np.abs(pv[:, :nv]) > big[:, None, :])).any(axis=2)
            for i, v in zip(*np.nonzero(wild)):
                x = [float(c) for c in g["centre"][i] + g["halfw"][i] * signs[v]]
                if len(known) < SINGULAR_VERTICES and not any(np.allclose(x, y, rtol=0, atol=1e-12) for y in known):
                    known.append(x)
                    powers.extend([None] * (len(known) - 1 - len(powers)))
                    powers.append(self._singular_power(fp[i] if fp is not None else None, pv[i], v))
        faces = self.checks.setdefault("singular_faces", [])
        if fp is None or len(faces) >= SINGULAR_VERTICES:
            return
        grp = self.rule.extra["groups"]["corner5"]
        a = float(np.abs(self.rule.nodes[grp[0]]).max())
        fc, f0, fv = fp[:, grp[0]:grp[1], :], fp[:, :1, :], pv[:, :nv, :]
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            large = np.isfinite(fv) & (np.abs(fv) > big[:, None, :] / (_estimate.PROBE_WILD / SINGULAR_RATIO))
            out = np.log(np.abs(fv / fc)) / (_estimate.PROBE_POSITION - a)     # log|f| per unit of the diagonal
            inner = np.maximum(np.log(np.abs(fc / f0)) / a, 0.0)
            large &= (fv * fc > 0) & (out >= SINGULAR_STEEP * inner)
        large = large.any(axis=2)                                                    # (k, v)
        for i in np.nonzero(large.sum(axis=1) >= 2)[0]:
            s = signs[large[i]]
            fixed = np.all(s == s[:1], axis=0)               # axes on which every large vertex lies on one face
            if not fixed.any():
                continue
            lo = g["centre"][i] - g["halfw"][i]
            hi = g["centre"][i] + g["halfw"][i]
            end = np.where(s[0] > 0, hi, lo)
            face = [[float(c) for c in np.where(fixed, end, lo)], [float(c) for c in np.where(fixed, end, hi)]]
            if len(faces) < SINGULAR_VERTICES and not any(
                    np.allclose(face, y, rtol=0, atol=1e-12) for y in faces):
                faces.append(face)

    def _singular_power(self, fp: np.ndarray | None, pv: np.ndarray, v: int) -> float | None:
        """The power ``p`` of ``|x - s|^(-p)`` at a point singularity ``s`` at vertex ``v`` of a Genz–Malik box
        (node values ``fp`` (p, m), probe values ``pv``): from the growth of ``|f|`` from the corner node towards
        ``v`` to its probe, which must match the growth from the centre to that node within
        :data:`SINGULAR_POWER_MATCH` (a power law along the whole diagonal); None where it does not, or where
        ``p`` is not in (0, d]."""
        if fp is None:
            return None
        grp = self.rule.extra["groups"]["corner5"]
        a = float(np.abs(self.rule.nodes[grp[0]]).max())
        f0, fc, fv = np.abs(fp[0]), np.abs(fp[grp[0] + v]), np.abs(pv[v])
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            p_out = np.log(fv / fc) / np.log((1.0 - a) / (1.0 - _estimate.PROBE_POSITION))
            p_in = np.log(fc / f0) / np.log(1.0 / (1.0 - a))
        if not (np.all(np.isfinite(p_out)) and np.all(np.isfinite(p_in))):
            return None
        p = float(np.max(p_out))
        if not (0.0 < p <= self.domain.dim) or np.any(np.abs(p_in - p_out) > SINGULAR_POWER_MATCH * p):
            return None
        return p

    def _explained(self, parents: dict, kids: dict) -> np.ndarray:
        """Children (of the split ``parents``) whose parent's only signature is a non-asymptotic rule
        hierarchy while it touches a known point singularity or singular face (:meth:`_note_singular`) that
        the child does not touch: the singularity explains the signature, and the child away from it is not
        watched and, when it looks resolved, gets its vertex probes only, not the second probes (``x0^(-1/2)
        (x1 + x2 + x3)`` on [0, 1]^4: 35 children away from ``x0 = 0``, 16 probes each instead of 40).  Not
        none: a feature that does not come from the singularity may cross the child where no node lies (a jump
        at x1 + x2 + x3 = 0.434 beside that face: the run spent its budget reporting 0.6x its true error)."""
        nch = len(next(iter(kids.values()))) // max(1, len(parents["flags"]))
        out = np.zeros(nch * len(parents["flags"]), dtype=bool)
        sets = ([(x, x) for x in self.checks.get("singular_vertices", ())]
                + [tuple(f) for f in self.checks.get("singular_faces", ())])
        if not sets or "centre" not in parents:
            return out
        only = (parents["flags"] & _NON_SMOOTH) == FLAG_NON_ASYMPTOTIC
        if not only.any():
            return out
        S = np.asarray(sets, dtype=float)                    # (s, 2, d): lower and upper corners
        slo, shi = S[None, :, 0, :], S[None, :, 1, :]

        def touches(g):
            tol = 1e-9 * g["halfw"][:, None, :]
            lo = (g["centre"] - g["halfw"])[:, None, :] - tol
            hi = (g["centre"] + g["halfw"])[:, None, :] + tol
            return ((shi >= lo) & (slo <= hi)).all(axis=2).any(axis=1)
        return np.tile(only & touches(parents), nch) & ~touches(kids)

    def _singular_known(self) -> bool:
        """Whether a point singularity or a singular face is known (:meth:`_note_singular`)."""
        return bool(self.checks.get("singular_vertices") or self.checks.get("singular_faces"))
