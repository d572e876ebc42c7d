"""Reliability of the default ("sharp") error estimate on Genz's test families.

True errors come from the closed forms in :mod:`cubage.bench.genz_families` (Genz 1984;
the forms themselves are checked in tests/test_genz.py).  The large study
that calibrated the constants is benchmarks/reliability.py; this is a smaller
sample with a seed the calibration never used.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import cubage
from cubage.bench import genz_families as genz

DIMS = (2, 3, 4, 5, 6)
DRAWS = 6
BUDGET = 300_000


def _study(families, tol, seed=11):
    out = []
    for fam in families:
        for d in DIMS:
            rng = np.random.default_rng([seed, genz.FAMILIES.index(fam), d])
            box = cubage.Box([0.0] * d, [1.0] * d)
            for _ in range(DRAWS):
                c = genz.draw(fam, d, rng)
                r = cubage.integrate(c.f, box, rel_tol=tol, budget=BUDGET)
                out.append((fam, d, abs(r.value - c.exact), r.error, r.status, abs(c.exact), r))
    return out


@pytest.mark.parametrize("tol", [1e-4, 1e-6, 1e-8])
def test_smooth_families_error_estimate_holds(tol):
    runs = _study(genz.SMOOTH, tol)
    held = [t <= e for _, _, t, e, *_ in runs]
    share = float(np.mean(held))
    print(f"smooth families, tol {tol:.0e}: true <= reported on {100 * share:.1f} % of {len(runs)} runs")
    # issue requirement: >= 99 % of draws (120 runs per tolerance: at most one miss)
    assert share >= 0.99, [(f, d, t, e) for (f, d, t, e, *_), h in zip(runs, held) if not h]
    for _fam, _d, _t, e, status, _scale, r in runs:
        if status == "converged":
            # converged means the reported error met the goal max(abs_tol, rel_tol*|value|)
            assert e <= tol * abs(r.value) * (1 + 1e-12)


def test_lead_reported_case_gaussian_3d():
    # exp(-|x|^2) on [0,1]^3: closed form (sqrt(pi)/2 erf(1))^3 (Abramowitz & Stegun 7.1.1);
    # with the earlier constants genz-malik at 1e-8 reported 2.2e-9 for a true error of 5.2e-9
    exact = (math.sqrt(math.pi) / 2 * math.erf(1.0)) ** 3
    r = cubage.integrate(lambda X: np.exp(-(X ** 2).sum(axis=1)), cubage.Box([0] * 3, [1] * 3),
                           rel_tol=1e-8, rule="genz-malik")
    assert r.converged
    assert abs(r.value - exact) <= r.error


def test_sharp_needs_fewer_evaluations_than_plain():
    # the point of the sharp estimate: same goal, fewer evaluations (summed over a small sample)
    rng = np.random.default_rng(5)
    sharp = plain = 0
    for fam in genz.SMOOTH:
        for d in (3, 4):
            c = genz.draw(fam, d, rng)
            box = cubage.Box([0.0] * d, [1.0] * d)
            sharp += cubage.integrate(c.f, box, rel_tol=1e-7, budget=BUDGET).evaluations
            plain += cubage.integrate(c.f, box, rel_tol=1e-7, budget=BUDGET, estimate="plain").evaluations
    print(f"evaluations sharp/plain = {sharp / plain:.3f}")
    assert sharp < plain


# C0 and discontinuous integrands lie outside the estimate's assumptions (the rules' error
# expansions need smoothness).  No target is asserted for them; the shares measured by
# benchmarks/reliability.py are recorded in cubature/estimate.py's docstring.
