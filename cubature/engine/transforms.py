"""Maps from the engine's finite coordinates to the user's (possibly infinite) axes.

The engine subdivides a *finite* box.  Each axis of the user's box is mapped
separately:

=====================  ==========================  ==================  =====================
user axis              engine axis ``t``           ``x(t)``            ``|dx/dt|``
=====================  ==========================  ==================  =====================
``[a, b]``             ``[a, b]``                  ``t``               ``1``
``[a, inf)``           ``[0, 1)``                  ``a + L t/(1-t)``   ``L/(1-t)^2``
``(-inf, b]``          ``[0, 1)``                  ``b - L t/(1-t)``   ``L/(1-t)^2``
``(-inf, inf)``        ``(-1, 1)``                 ``L t/(1-t^2)``     ``L (1+t^2)/(1-t^2)^2``
=====================  ==========================  ==================  =====================

These are the standard rational maps (common practice); ``L`` is the axis's
``Box.scale`` (default 1), best chosen near the width of the integrand along
that axis.  They are singular
only at ``t = +-1``; every rule's nodes lie strictly inside their region, so no
node is placed there.  As a guard against rounding in very deep subdivisions,
``t`` is clipped to ``[-1 + 2^-52, 1 - 2^-53]`` before mapping.

An integrand decaying slower than ``1/x^2`` at infinity makes ``f * |dx/dt|``
unbounded near ``t = 1``; the integral may still exist, but convergence is
then slow and the error estimate less trustworthy.
"""

from __future__ import annotations

import numpy as np

from cubage.engine.domains import Box

_FINITE, _UPPER_INF, _LOWER_INF, _BOTH_INF = 0, 1, 2, 3
_T_MAX = 1.0 - 2.0**-53
_T_MIN = -1.0 + 2.0**-52


class AxisMap:
    """The per-axis map of a :class:`~cubage.engine.domains.Box` onto a finite box.

    Parameters
    ----------
    box : Box
        The user's domain.

    Attributes
    ----------
    lower, upper : ndarray
        The finite engine box.
    identity : bool
        True when every axis is finite (the map is the identity).
    """

    def __init__(self, box: Box):
        lo, hi = box.lower, box.upper
        kinds = np.full(box.dim, _FINITE, dtype=np.int8)
        kinds[np.isfinite(lo) & np.isinf(hi)] = _UPPER_INF
        kinds[np.isinf(lo) & np.isfinite(hi)] = _LOWER_INF
        kinds[np.isinf(lo) & np.isinf(hi)] = _BOTH_INF
        self.kinds = kinds
        self.scale = box.scale
        self.user_lower = lo
        self.user_upper = hi
        elo = np.where(kinds == _FINITE, lo, 0.0)
        ehi = np.where(kinds == _FINITE, hi, 1.0)
        elo = np.where(kinds == _BOTH_INF, -1.0, elo)
        self.lower = elo
        self.upper = ehi
        self.identity = bool((kinds == _FINITE).all())
        self._axes = [int(i) for i in np.nonzero(kinds != _FINITE)[0]]

    def to_user(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Map engine points ``t`` (n, d) to user points and Jacobians.

        Returns
        -------
        x : ndarray, shape (n, d)
        jac : ndarray, shape (n,), or None when the map is the identity.
        """
        if self.identity:
            return t, None
        x = t.copy(order="K")
        jac = np.ones(t.shape[0])
        # a huge scale can overflow to inf here: the run reports that as one line naming the point, so numpy's
        # own warning would only repeat it on the user's terminal
        with np.errstate(over="ignore", invalid="ignore"):
            for i in self._axes:
                k = self.kinds[i]
                ti = t[:, i]
                L = self.scale[i]
                if k == _BOTH_INF:
                    ti = np.clip(ti, _T_MIN, _T_MAX)
                    s = 1.0 - ti * ti
                    x[:, i] = L * ti / s
                    jac *= L * (1.0 + ti * ti) / (s * s)
                else:
                    ti = np.minimum(ti, _T_MAX)
                    s = 1.0 - ti
                    u = L * ti / s
                    x[:, i] = self.user_lower[i] + u if k == _UPPER_INF else self.user_upper[i] - u
                    jac *= L / (s * s)
        return x, jac

    def bounds_to_user(self, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Map engine box bounds (..., d) to user bounds (``t = 1`` maps to infinity)."""
        if self.identity:
            return lo, hi
        ulo, uhi = lo.astype(float).copy(), hi.astype(float).copy()
        with np.errstate(divide="ignore"):
            for i in self._axes:
                k = self.kinds[i]
                L = self.scale[i]
                a, b = lo[..., i], hi[..., i]
                if k == _BOTH_INF:
                    ulo[..., i] = np.where(a <= -1.0, -np.inf, L * a / (1.0 - a * a))
                    uhi[..., i] = np.where(b >= 1.0, np.inf, L * b / (1.0 - b * b))
                elif k == _UPPER_INF:
                    ulo[..., i] = self.user_lower[i] + L * a / (1.0 - a)
                    uhi[..., i] = np.where(b >= 1.0, np.inf, self.user_lower[i] + L * b / (1.0 - b))
                else:
                    uhi[..., i] = self.user_upper[i] - L * a / (1.0 - a)
                    ulo[..., i] = np.where(b >= 1.0, -np.inf, self.user_upper[i] - L * b / (1.0 - b))
        return ulo, uhi
