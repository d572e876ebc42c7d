"""Warm starts of scans (issue 14 item 3): what a warm start carries over from the run it starts from.

Expected integrals come from closed forms named beside each check.
"""

from __future__ import annotations

import math

import numpy as np

import cubage
from cubage.engine.run import FLAG_DISAGREED, FLAG_WARY

CUBE = cubage.Box([0.0, 0.0, 0.0], [1.0, 1.0, 1.0])


def _cloud(X, a):
    return np.exp(-a * ((X - 0.3) ** 2).sum(axis=1))


def _cloud_exact(a: float) -> float:
    """Product of three 1-D Gaussian integrals over [0, 1] with erf (A&S 7.1.1)."""
    return (math.sqrt(math.pi / a) / 2 * (math.erf(math.sqrt(a) * 0.7) + math.erf(math.sqrt(a) * 0.3))) ** 3


def _finished(a: float) -> cubage.Run:
    run = cubage.Run(lambda X: _cloud(X, a), CUBE, rel_tol=1e-8)
    run.run()
    assert run.status == "converged"
    return run


def test_partition_carries_flags_and_the_wary_counters():
    """issue 14 item 3: ``Run.partition()`` hands on the regions' signature flags and the learnt
    wary-class counters, and a warm start takes the counters over."""
    run = _finished(3.0)
    part = run.partition()
    assert part["flags"].shape == part["depth"].shape == (run.store.n,)
    assert np.array_equal(part["flags"], run.store["flags"])
    part["wary"] = np.array([20.0, 6.0, 2.0])           # as if 20 wary splits had fallen short 3x
    warm = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=part)
    warm.step()
    assert warm.checks["wary_splits"] == 20 and warm._wary_factor() == 3.0


def test_warm_start_probes_only_regions_whose_lineage_was_non_smooth():
    """issue 14 item 3: a warm start probes the vertices of the start regions that carried a non-smooth
    signature (and puts them in the wary class), as a cold run does for children of such regions; regions
    of a smooth lineage are not probed again.  The value still meets its goal against the closed form
    (erf, A&S 7.1.1)."""
    part = _finished(3.0).partition()
    n = len(part["depth"])
    part["flags"] = np.zeros(n, np.uint8)
    marked = np.zeros(n, bool)
    marked[::5] = True
    part["flags"][marked] = FLAG_DISAGREED
    warm = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=part)
    warm.step()
    size = warm.rule.size
    resolved = warm._looks_resolved(*warm._evaluate({k: warm.store[k][:n] for k in warm.geometry.columns})[:2])
    probes = 2 ** 3 * int((resolved & marked).sum())
    assert (resolved & marked).any()
    assert warm.evaluations == n * size + probes
    fl = warm.store["flags"][:n]
    assert ((fl & FLAG_WARY) != 0)[marked].all() and not ((fl & FLAG_WARY) != 0)[~marked].any()
    # without flags (a partition from elsewhere) every region that looks resolved is probed, as before
    bare = {k: v for k, v in part.items() if k not in ("flags", "wary")}
    plain = cubage.Run(lambda X: _cloud(X, 3.2), CUBE, rel_tol=1e-8, start=bare)
    plain.step()
    assert plain.evaluations == n * size + 2 ** 3 * int(resolved.sum())
    res = warm.run()
    assert res.status == "converged" and abs(res.value - _cloud_exact(3.2)) <= res.error


def test_moving_kink_warm_and_cold_agree_and_are_honest():
    """issue 14 item 3: a kink moving with the scanned constant (|x - c| e^(y + z/2) on the unit cube):
    warm and cold agree within their error estimates at every point, and every point is within its
    error of the closed form (int_0^1 |x - c| dx = (c^2 + (1 - c)^2) / 2, elementary; the other factors
    e - 1 and 2 (e^(1/2) - 1))."""
    def f(X, c):
        return np.abs(X[:, 0] - c) * np.exp(X[:, 1] + 0.5 * X[:, 2])

    def exact(c):
        return (c * c + (1 - c) ** 2) / 2 * (math.e - 1) * 2 * (math.exp(0.5) - 1)
    grid = {"c": [0.61, 0.64, 0.67, 0.70, 0.73]}
    warm = cubage.scan(f, CUBE, grid, rel_tol=1e-6)
    cold = cubage.scan(f, CUBE, grid, rel_tol=1e-6, warm=False)
    assert warm.converged and cold.converged
    assert sum(p.warm_from is not None for p in warm.points) == 4
    for w, k in zip(warm.points, cold.points):
        assert abs(w.value - k.value) <= w.error + k.error
        assert abs(w.value - exact(w.constants["c"])) <= w.error
        assert abs(k.value - exact(k.constants["c"])) <= k.error
