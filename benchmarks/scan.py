"""Scan benchmark: warm start against cold runs, and the time of a 200-point scan.

Prints, in one run:

* a smooth 3-D scan of 50 points (a Gaussian cloud in the unit cube against
  its width parameter): total evaluations with warm start and cold, their
  ratio, and for every point whether it converged and whether its true error
  (closed form below) is within its reported error;
* a smooth scan whose value passes through zero (the form factor of a Gaussian
  cloud clipped to the unit cube against momentum transfer q): near the zero a
  relative goal asks for a very fine partition;
* the same for a scan whose feature moves with the parameter (a narrow
  Gaussian peak travelling along the cube's diagonal), and for a kink plane
  moving with the parameter (not a target: without alignment a few points
  spend their whole budget; the last column counts points that claim
  convergence with a true error above twice the goal, which must stay 0);
* for each, where the warm points' evaluations go: their start partitions,
  refinement after the start, and audits (as fractions of the cold total);
* the wall time of a 200-point scan of a cheap 3-D integrand with 1 and 2
  worker processes (chains: the default, one per 50 points);
* the peer in the same run: scipy.integrate.cubature (Genz-Malik rule, no
  reuse between points) over the 50 smooth points, its evaluations against the
  warm scan's.

Run:  python benchmarks/scan.py [--quick]
"""

from __future__ import annotations

import argparse
import math
import os
import platform
import time

import numpy as np
from scipy import integrate as si
from scipy.special import erf

import cubage
import cubage.engine.run

CUBE = cubage.Box([0.0, 0.0, 0.0], [1.0, 1.0, 1.0])


def cloud(X, a):
    """exp(-a |x - 0.3|^2) on [0,1]^3."""
    return np.exp(-a * ((X - 0.3) ** 2).sum(axis=1))


def cloud_exact(a):
    # product of three 1-D Gaussian integrals with erf (A&S 7.1.1)
    one = math.sqrt(math.pi / a) / 2 * (erf(math.sqrt(a) * 0.7) + erf(math.sqrt(a) * 0.3))
    return one**3


def form_factor(X, q):
    """exp(-|x|^2) cos(q (x + y + z)) on [0,1]^3."""
    return np.exp(-(X**2).sum(axis=1)) * np.cos(q * X.sum(axis=1))


def form_factor_exact(q):
    # cos(q(x+y+z)) = Re prod_k e^{i q x_k}, so the integral is Re F(q)^3 with
    # F(q) = int_0^1 e^{-t^2} e^{iqt} dt, each part by scipy.integrate.quad (1-D, epsrel 1e-13)
    re = si.quad(lambda t: math.exp(-t * t) * math.cos(q * t), 0, 1, epsabs=0, epsrel=1e-13)[0]
    im = si.quad(lambda t: math.exp(-t * t) * math.sin(q * t), 0, 1, epsabs=0, epsrel=1e-13)[0]
    return float((complex(re, im) ** 3).real)


SIGMA = 0.08


def moving_peak(X, c):
    """A Gaussian peak of width SIGMA centred at (c, c, c), travelling along the diagonal."""
    return np.exp(-((X - c) ** 2).sum(axis=1) / (2 * SIGMA**2))


def moving_peak_exact(c):
    # product of three 1-D Gaussian integrals over [0, 1] with erf (A&S 7.1.1)
    s = SIGMA * math.sqrt(2)
    one = SIGMA * math.sqrt(math.pi / 2) * (erf((1 - c) / s) + erf(c / s))
    return one**3


def kink(X, c):
    """|x - c| e^(y + z/2): a kink plane moving with c (no feature alignment: a Python integrand)."""
    return np.abs(X[:, 0] - c) * np.exp(X[:, 1] + 0.5 * X[:, 2])


def kink_exact(c):
    # int_0^1 |x - c| dx = (c^2 + (1 - c)^2) / 2 (elementary), times (e - 1) and 2 (e^(1/2) - 1)
    return (c * c + (1 - c) ** 2) / 2 * (math.e - 1) * 2 * (math.exp(0.5) - 1)


def compare(name, f, exact, grid, rel_tol):
    from cubage.problem.scan_table import grid_from_mapping
    from cubage.session.scan import CallableSource, run_scan
    first: dict[int, int] = {}

    def on_step(job, run, now):            # a point's first step evaluates its start partition
        first.setdefault(job.index, run.evaluations)
    t0 = time.perf_counter()
    warm = run_scan(CallableSource(f), CUBE, grid_from_mapping(grid),
                    {"rel_tol": rel_tol, "budget": cubage.engine.run.DEFAULT_BUDGET}, on_step=on_step)
    tw = time.perf_counter() - t0
    t0 = time.perf_counter()
    cold = cubage.scan(f, CUBE, grid, rel_tol=rel_tol, warm=False)
    tc = time.perf_counter() - t0
    ratio = warm.evaluations / cold.evaluations
    rows = []
    for label, res in (("warm", warm), ("cold", cold)):
        honest = silent = 0
        worst = 0.0
        for p in res.points:
            ex = exact(*p.constants.values())
            true = abs(p.value - ex)
            honest += bool(p.converged and true <= p.error)
            silent += bool(p.converged and true > 2 * rel_tol * abs(ex))     # issue 12's "silent wrong answer"
            worst = max(worst, true / (rel_tol * abs(ex)))
        rows.append((label, res.evaluations, honest, len(res.points), worst, silent))
    print(f"\n{name}: {len(warm.points)} points, rel_tol {rel_tol:g}")
    print(f"  {'start':<6} {'evaluations':>12} {'converged & true <= reported':>29} {'worst true/goal':>16}"
          f" {'converged, true > 2 goal':>25}")
    for label, ev, honest, n, worst, silent in rows:
        print(f"  {label:<6} {ev:>12,} {f'{honest}/{n}':>29} {worst:>16.3f} {silent:>25}")
    print(f"  warm / cold evaluations: {ratio:.3f}   (time warm {tw:.2f} s, cold {tc:.2f} s)")
    start = sum(first.get(p.index, 0) for p in warm.points if p.warm_from is not None)
    audit = sum((p.trust or {}).get("audit_evaluations", 0) for p in warm.points if p.warm_from is not None)
    rest = sum(p.evaluations for p in warm.points if p.warm_from is not None) - start - audit
    c = cold.evaluations
    print(f"  warm points' evaluations against all cold: start partitions {start / c:.3f}, refinement "
          f"{rest / c:.3f}, audits {audit / c:.3f} (cold starts of the chains: "
          f"{sum(p.evaluations for p in warm.points if p.warm_from is None) / c:.3f})")
    return ratio, warm


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="looser tolerances, fewer points")
    args = ap.parse_args()
    print(f"cubage {cubage.__version__}, Python {platform.python_version()}, numpy {np.__version__}, "
          f"{os.cpu_count()} cores (times are wall times on whatever else the machine runs)")
    n = 20 if args.quick else 50
    tol = 1e-6 if args.quick else 1e-8
    r1, _ = compare("smooth: Gaussian cloud exp(-a |x - 0.3|^2) against a in [1, 8]", cloud, cloud_exact,
                    {"a": np.linspace(1.0, 8.0, n)}, tol)
    r0, _ = compare("smooth through a zero: Gaussian-cloud form factor against q in [0, 6]", form_factor,
                    form_factor_exact, {"q": np.linspace(0.0, 6.0, n)}, tol)
    r2, _ = compare("moving feature: Gaussian peak (width 0.08) along the diagonal, centre 0.2 .. 0.8",
                    moving_peak, moving_peak_exact, {"c": np.linspace(0.2, 0.8, n)}, 1e-6 if args.quick else 1e-7)
    compare("moving kink: |x - c| e^(y + z/2), c from 0.1 to 0.9 (not a target; a few points spend their budget)",
            kink, kink_exact, {"c": np.linspace(0.1, 0.9, n)}, 1e-6)
    print(f"\ntargets: smooth warm/cold <= 0.5 (measured {r1:.3f}; through a zero {r0:.3f}); "
          f"moving <= 0.8 (measured {r2:.3f})")
    print("  (a cold run evaluates 2N - 1 regions to end with N, and audits; a warm one at least the N it ends\n"
          "   with, so about 0.5 is the floor of reuse when neighbouring points need the same partition, and a\n"
          "   scan growing harder along its path pays twice for every region it adds; below it, a warm point\n"
          "   audits half the usual sample when its start passed its own audit smooth and it shows no signature)")

    cheap = lambda X, a: np.exp(-a * (X**2).sum(axis=1))
    grid = {"a": np.linspace(0.1, 5.0, 200)}
    print("\n200-point scan of exp(-a |x|^2) on [0,1]^3, rel_tol 1e-6 (default chains: 4)")
    tables = []
    for workers in (1, 2):
        t0 = time.perf_counter()
        res = cubage.scan(cheap, CUBE, grid, rel_tol=1e-6, workers=workers)
        dt = time.perf_counter() - t0
        tables.append(res.table)
        print(f"  workers {workers}: {dt:.2f} s wall, {res.evaluations:,} evaluations, "
              f"{sum(p.converged for p in res.points)}/200 converged")
    print(f"  same table for 1 and 2 workers: {np.array_equal(tables[0], tables[1])}   (target: < 10 s on 2 cores)")

    m = 10 if args.quick else 50
    avals = np.linspace(1.0, 8.0, m)
    peer = [0]

    def counted(X, a):
        peer[0] += X.shape[0]
        return cloud(X, a)
    t0 = time.perf_counter()
    for a in avals:
        si.cubature(lambda X, a=a: counted(X, a), np.zeros(3), np.ones(3), rule="genz-malik", rtol=tol,
                    max_subdivisions=200_000)
    dt = time.perf_counter() - t0
    res = cubage.scan(cloud, CUBE, {"a": avals}, rel_tol=tol)
    print(f"\npeer (same run): scipy.integrate.cubature (genz-malik) over the {m} smooth points at rel_tol {tol:g}: "
          f"{peer[0]:,} evaluations in {dt:.1f} s; cubage warm scan {res.evaluations:,} "
          f"(ratio cubage/scipy {res.evaluations / peer[0]:.3f})")


if __name__ == "__main__":
    main()
