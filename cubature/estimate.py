"""Per-region error estimates from an embedded family of rules.

Every rule gives three values on the same nodes: ``q7`` (the rule proper),
``q5`` (the embedded rule, lower degree) and, where the family has one, ``q3``
(a third, still lower-degree member).  The *plain* estimate is the classical
``|q7 - q5|`` (Genz & Malik 1980): it estimates the error of the *lower* rule
and so usually overstates the error of ``q7`` by a wide margin on smooth
integrands.

The *sharp* estimate (our default) follows the idea of Berntsen, Espelid &
Genz (1991) of comparing successive differences: with ``n1 = |q7 - q5|`` and
``n2 = |q5 - q3|`` the ratio ``r = n1 / n2`` shows whether the integrand is
resolved (differences shrinking fast with degree).  When it is (``r <=
RATIO_LIMIT``), the error of ``q7`` is taken as ``n1 * SAFETY * r`` (capped at
``n1``); otherwise ``n1`` is kept.  The constants were calibrated on Genz's
smooth test families (see ``tests/test_reliability.py``) so that the reported
error still bounds the true error on >= 99 % of draws.

Both are heuristics.  No estimate computed from finitely many samples can be
a guaranteed bound: a narrow peak between the nodes goes unseen.
"""

from __future__ import annotations

import numpy as np

RATIO_LIMIT = 0.25
SAFETY = 4.0
#: floor relative to |q7| that accounts for rounding in the sums
ROUNDING = 64 * np.finfo(float).eps


def region_errors(q7: np.ndarray, q5: np.ndarray, q3: np.ndarray | None, absq: np.ndarray,
                  method: str = "sharp") -> np.ndarray:
    """Error estimates per region (and component).

    Parameters
    ----------
    q7, q5, q3 : ndarray, shape (k, m)
        Rule values of decreasing degree (``q3`` may be None).
    absq : ndarray, shape (k, m)
        The rule applied to ``|f|`` (volume times weighted mean of |f|), a
        scale for the rounding floor.
    method : {"sharp", "plain"}
    """
    n1 = np.abs(q7 - q5)
    if method == "plain" or q3 is None:
        err = n1
    elif method == "sharp":
        n2 = np.abs(q5 - q3)
        with np.errstate(divide="ignore", invalid="ignore"):
            r = np.where(n2 > 0, n1 / n2, np.where(n1 > 0, np.inf, 0.0))
        scale = np.where(r <= RATIO_LIMIT, np.minimum(1.0, SAFETY * r), 1.0)
        err = n1 * scale
    else:
        raise ValueError(f"error estimate must be 'sharp' or 'plain', got {method!r}")
    return np.maximum(err, ROUNDING * absq)
