"""Warm start (parameter scans, :mod:`cubage.session.scan`): what a start partition carries from the run that
made it.

The regions around carried signatures and wary regions are probed as a cold run's children of a non-smooth
region are (:meth:`WarmStart._carried`, with :func:`touching`), and a start partition that passed its audit
with no signature lets the audit take a share of its sample (:meth:`WarmStart._warm_audit_share`)."""

from __future__ import annotations

import numpy as np

from cubage.engine.flags import _NON_SMOOTH, FLAG_PROBED, FLAG_WARY

#: Warm start (scans): share of the audit sample taken when the start partition passed its own audit at the
#: neighbouring constants and neither run shows a non-smooth signature (:meth:`Run._warm_audit_share`).
#: Chosen on benchmarks/scan.py's smooth scan (warm/cold 0.517 with 1, 0.491 with 0.5, 0.476 with 0.25,
#: every point within its error of the closed form in each case); 0.5 keeps the top half of the sample.
WARM_AUDIT_SHARE = 0.5


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


class WarmStart:
    """Warm start from a partition (a mixin of :class:`~cubage.engine.run.Run`).

    Reads ``_start_partition``, ``store``, ``geometry`` and ``checks``; writes nothing.
    """

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
