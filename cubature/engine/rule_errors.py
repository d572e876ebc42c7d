"""A region's error estimate from its rule values, for :class:`~cubage.engine.run.Run`.

The rule differences (on Genz–Malik boxes of one sign also on ``log|f|``), whether they look resolved or
non-asymptotic, the axis a region's probes steer its next bisection to, the learnt factor of the wary class
and the rule values of the component that weighs most.  The formulas are in :mod:`cubage.engine.estimate`;
these methods apply them to the run's regions."""

from __future__ import annotations

import numpy as np

from cubage.engine import estimate as _estimate


class RuleErrors:
    """The rule-value side of a region's error estimate (a mixin of :class:`~cubage.engine.run.Run`).

    Reads ``rule``, ``geometry``, ``settings``, ``key_weight``, ``_w`` and the wary counters in ``checks``
    (``wary_splits``, ``wary_measured``, ``wary_estimated``); writes counters in ``checks``.  Calls
    :meth:`_singular_factors` (:mod:`cubage.engine.singular`).
    """

    def _errors(self, q: np.ndarray, absq: np.ndarray) -> np.ndarray:
        q3 = q[:, 2, :] if q.shape[1] > 2 else None
        return _estimate.region_errors(q[:, 0, :], q[:, 1, :], q3, absq, self.settings.estimate)

    def _rule_errors(self, g: dict, q: np.ndarray, absq: np.ndarray, fr: np.ndarray,
                     lineage: np.ndarray | None = None) -> np.ndarray:
        """The regions' rule estimates (:meth:`_errors`), on Genz–Malik boxes whose values share one sign at least
        the opinion of the same rules on ``log|f|`` (:func:`~cubage.engine.estimate.log_errors`: a small kink
        beside a smooth factor whose low-degree error the ratio opinion reads as convergence; ``lineage`` (k,):
        children of a region with a non-smooth signature, where that opinion needs no ratio test)."""
        raw = self._errors(q, absq)
        if (q.shape[1] < 3 or self.geometry.kind != "box" or "diagonal" in self.rule.extra
                or self.settings.estimate != "sharp" or fr.shape[0] == 0):
            return raw
        vol = self.geometry.volume(g)
        ql, absl, one = self._log_rules(fr, vol)
        with np.errstate(divide="ignore", invalid="ignore"):
            fbar = np.abs(absq) / vol[:, None]
        return np.maximum(raw, _estimate.log_errors(ql, absl, one, fbar, vol, np.abs(q[:, 0, :] - q[:, 1, :]),
                                                   np.abs(q[:, 1, :] - q[:, 2, :]), lineage))

    def _steer_axes(self, g: dict, steer: np.ndarray, floor: np.ndarray, raw: np.ndarray) -> None:
        """Bisect along the axis the probes point to where their floor, not the rule, sets the estimate:
        the rule chose its axis from node values that do not see the feature.  Tensor Gauss–Kronrod
        regions only: on Genz–Malik regions (d >= 3) steering gave more silent wrong answers on Genz's C0
        family (tuning seed 8, C0 + discontinuous, 300 runs: 7 against 3 steering only Gauss–Kronrod
        regions), whose kinks then sat across the middle of the regions it made."""
        if "axis" not in g or "diagonal" not in self.rule.extra:
            return
        use = (steer >= 0) & (floor > raw).any(axis=1)
        if use.any():
            g["axis"][use] = steer[use].astype(g["axis"].dtype)

    def _wary_factor(self) -> float:
        """The learnt factor by which the rule estimates of the wary class fell short (>= 1)."""
        c = self.checks
        if c["wary_splits"] < _estimate.WARY_MIN_SPLITS or not c["wary_estimated"] > 0:
            return 1.0
        return float(min(max(1.0, c["wary_measured"] / c["wary_estimated"]), _estimate.CALIBRATION_LIMIT))

    def _log_rules(self, fr: np.ndarray, vol: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The rule and its embedded rules applied to ``log|f|`` (k, r, m), the rule applied to its magnitude
        (k, m), and where all of a region's node values share one sign (k, m; elsewhere the values are NaN).
        A smooth positive integrand is often far closer to ``exp(polynomial)`` than to a polynomial at coarse
        scales (a Gaussian's logarithm is a quadratic), while a kink or jump of ``f`` is one of ``log|f|`` too."""
        one = np.all(fr > 0, axis=1) | np.all(fr < 0, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            lg = np.where(one[:, None, :], np.log(np.abs(fr)), np.nan)
        ql = np.einsum("rp,kpm->krm", self._w, lg) * vol[:, None, None]
        absl = np.einsum("p,kpm->km", self.rule.weights, np.abs(lg)) * vol[:, None]
        return ql, np.abs(absl), one

    def _looks_resolved(self, q: np.ndarray, absq: np.ndarray) -> np.ndarray:
        """Regions whose rule estimate is tiny against their size (candidates for a vertex probe)."""
        return (self._errors(q, absq) <= _estimate.PROBE_GATE * absq).all(axis=1)

    def _non_asymptotic(self, q: np.ndarray, absq: np.ndarray, g: dict | None = None,
                        fr: np.ndarray | None = None) -> np.ndarray:
        """Regions whose rule differences do not shrink with degree
        (:func:`~cubage.engine.estimate.non_asymptotic`).  On Genz–Malik regions (``g``, node values ``fr``)
        whose values share one sign, the signature must show in ``log|f|`` too: coarse smooth regions
        (peaks, Gaussians) show it in ``f`` alone, and each one flagged had its resolved children probed."""
        q3 = q[:, 2, :] if q.shape[1] > 2 else None
        na = _estimate.non_asymptotic(q[:, 0, :], q[:, 1, :], q3, absq)
        if (fr is None or q3 is None or not na.any() or self.geometry.kind != "box"
                or "diagonal" in self.rule.extra):
            return na
        sub = np.nonzero(na)[0]
        gs = {k: a[sub] for k, a in g.items()}
        vol = self.geometry.volume(gs)
        ql, absl, one = self._log_rules(fr[sub], vol)
        na[sub] = _estimate.non_asymptotic(q[sub, 0, :], q[sub, 1, :], q3[sub], absq[sub],
                                           log_rules=(ql, absl, one))
        if na[sub].any() and self.checks.get("singular_powers"):
            # a known point singularity explains the signature of a box away from it when f |x - s|^p shows none
            w, _ = self._singular_factors(gs)
            ok = np.isfinite(w).all(axis=1) & na[sub]
            if ok.any():
                fm = fr[sub][ok] * w[ok][:, :, None]
                qm = np.einsum("rp,kpm->krm", self._w, fm) * vol[ok][:, None, None]
                absm = np.abs(np.einsum("p,kpm->km", self.rule.weights, np.abs(fm)) * vol[ok][:, None])
                still = _estimate.non_asymptotic(qm[:, 0, :], qm[:, 1, :], qm[:, 2, :], absm)
                na[sub[ok]] = still
                self.checks["singular_explained"] = int(self.checks.get("singular_explained", 0)) + int((~still).sum())
        return na

    def _axis_values(self, fr: np.ndarray, err: np.ndarray) -> np.ndarray:
        if fr.shape[2] == 1:
            return fr[:, :, 0]
        j = np.argmax(err * self.key_weight, axis=1)
        return fr[np.arange(fr.shape[0]), :, j]
