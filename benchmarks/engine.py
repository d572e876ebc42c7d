"""Engine benchmark: cubage against scipy.integrate.cubature on the same problems.

Prints, in one run: evaluations and wall time of cubage and of scipy's
cubature (rules "genz-malik" and "gk21") at rel_tol 1e-6 on smooth, kinked
and corner-singular integrands; the evaluation cost of the batch policy
against strictly one region per step; the 6-D kinked run time; throughput
on a trivial 4-D integrand; and engine overhead against a bare numpy
evaluation of the same number of points.

Run:  python benchmarks/engine.py [--quick] [--single-all]
"""

from __future__ import annotations

import argparse
import datetime
import math
import os
import platform
import time

import numpy as np
from scipy import integrate as si
from scipy.special import erf

import cubage

#: the batch-policy comparison runs one region per step only on problems that take at most this many evaluations
SINGLE_MAX = 2_000_000

# ---- problems (name, f, lower, upper, reference or None, note) -----------------------------

def gaussian(d):
    # exp(-4 |x - 0.3|^2) on [0,1]^d: product of 1-D erf integrals (closed form, common practice)
    a = 4.0
    one = math.sqrt(math.pi / a) / 2 * (erf(math.sqrt(a) * 0.7) + erf(math.sqrt(a) * 0.3))
    return (f"gaussian-{d}d", lambda X: np.exp(-a * ((X - 0.3) ** 2).sum(axis=1)), [0.0] * d, [1.0] * d, one ** d)


def oscillatory(d):
    # cos(1 + sum c_i x_i), c_i = 1/i: Re(e^{i} prod (e^{i c_k} - 1)/(i c_k)) (closed form, common practice)
    c = 1.0 / np.arange(1, d + 1)
    z = np.exp(1j) * np.prod((np.exp(1j * c) - 1) / (1j * c))
    return (f"oscillatory-{d}d", lambda X: np.cos(1.0 + X @ c), [0.0] * d, [1.0] * d, float(z.real))


def kink(d, k=None, s=None):
    """|x_0 + ... + x_{k-1} - s| * exp(-(x_k + ... + x_{d-1})/2) on [0,1]^d, s = k/2 - 0.1 by default.

    A kink along a hyperplane not aligned with the axes (normal (1,..,1,0,..,0)).  With
    s = k/2 - 0.1 the plane cuts the regions of the bisection at generic places; with
    k = 2, s = 1 it is the diagonal x_0 + x_1 = 1, which passes through region corners.
    Reference: E|S - s| for S a sum of k uniforms, from the Irwin-Hall distribution
    (exact piecewise-polynomial CDF, common practice), times (2(1 - e^{-1/2}))^(d-k).
    """
    k = d if k is None else k
    generic = s is None
    s = k / 2 - 0.1 if generic else s
    pos = sum((-1) ** j * math.comb(k, j) * max(s - j, 0.0) ** (k + 1) for j in range(k + 1))
    ref = ((k / 2 - s) + 2 * pos / math.factorial(k + 1)) * (2 * (1 - math.exp(-0.5))) ** (d - k)
    if k == d:
        fn = lambda X: np.abs(X.sum(axis=1) - s)
    else:
        fn = lambda X: np.abs(X[:, :k].sum(axis=1) - s) * np.exp(-0.5 * X[:, k:].sum(axis=1))
    label = (f"kink-{d}d" if k == d else f"kink{k}-{d}d") + ("" if generic else "-diagonal")
    return (label, fn, [0.0] * d, [1.0] * d, ref)


def corner3():
    # 1/|x| on [0,1]^3 (integrable corner singularity). Closed form 3 ln((1+sqrt 3)/sqrt 2) - pi/4
    # (from memory; cross-checked in tests against scipy.integrate.tplquad in spherical form).
    ref = 3 * math.log((1 + math.sqrt(3)) / math.sqrt(2)) - math.pi / 4
    return ("corner-3d", lambda X: 1.0 / np.sqrt((X * X).sum(axis=1)), [0.0] * 3, [1.0] * 3, ref)


def corner4():
    # |x|^(-3/2) ... weaker: x_0^(-1/2) (x_1+x_2+x_3) on [0,1]^4: closed form 2 * 3/2 = 3 (common practice)
    return ("corner-4d", lambda X: X[:, 0] ** -0.5 * (X[:, 1] + X[:, 2] + X[:, 3]), [0.0] * 4, [1.0] * 4, 3.0)


class Budget(Exception):
    pass


class Counter:
    """Counts integrand points; raises Budget past ``limit`` (so a peer cannot run for hours)."""

    def __init__(self, f, limit=None):
        self.f, self.n, self.limit = f, 0, limit

    def __call__(self, X, *args):
        self.n += X.shape[0]
        if self.limit is not None and self.n > self.limit:
            raise Budget
        return self.f(X)


def run_cubage(f, lo, hi, rel_tol, **opts):
    c = Counter(f)
    t = time.perf_counter()
    r = cubage.integrate(c, cubage.Box(lo, hi), rel_tol=rel_tol, budget=200_000_000, **opts)
    return r.value, r.error, r.evaluations, time.perf_counter() - t, r.status


def run_scipy(f, lo, hi, rel_tol, rule, limit=60_000_000):
    c = Counter(f, limit)
    t = time.perf_counter()
    try:
        r = si.cubature(c, np.array(lo), np.array(hi), rule=rule, rtol=rel_tol, max_subdivisions=200_000)
        val, err, status = float(r.estimate), float(r.error), r.status
    except Budget:
        val, err, status = float("nan"), float("nan"), f"gave up at {limit:.0e} evaluations"
    except MemoryError:
        val, err, status = float("nan"), float("nan"), "memory"
    return val, err, c.n, time.perf_counter() - t, status


def fmt(x):
    return f"{x:.3g}"


def table(rows, head):
    w = [max(len(str(r[i])) for r in rows + [head]) for i in range(len(head))]
    line = lambda r: "  ".join(str(v).rjust(w[i]) for i, v in enumerate(r))
    print(line(head))
    for r in rows:
        print(line(r))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller problems only")
    ap.add_argument("--single-all", action="store_true",
                    help=f"also run one region per step on problems above {SINGLE_MAX:,} evaluations (the 3-D kink: "
                         "about 20 minutes)")
    args = ap.parse_args()
    print(f"# cubage engine benchmark, {datetime.date.today()}, {platform.processor() or platform.machine()}, "
          f"{os.cpu_count()} cores, numpy {np.__version__}, scipy {__import__('scipy').__version__}")
    tol = 1e-6
    probs = [gaussian(3), gaussian(5), oscillatory(4), oscillatory(6), kink(3), kink(4, 2, 1.0), corner3(), corner4()]
    if args.quick:
        probs = [gaussian(3), oscillatory(4), kink(3), corner3()]
    print(f"\n## cubage vs scipy.integrate.cubature at rel_tol {tol:g} (evaluations; seconds; true relative error)")
    rows = []
    for name, f, lo, hi, ref in probs:
        # warm-up (rule tables are built once per process and dimension; scipy has one-time costs too)
        run_cubage(f, lo, hi, 1e-2)
        run_scipy(f, lo, hi, 1e-2, "genz-malik")
        res = {"cubage": run_cubage(f, lo, hi, tol)}
        for rule in ("genz-malik", "gk21"):
            if rule == "gk21" and len(lo) > 4:
                continue  # 21^d nodes per region
            res["scipy-" + rule] = run_scipy(f, lo, hi, tol, rule)
        for who, (v, e, n, s, st) in res.items():
            rows.append([name, who, n, fmt(s), fmt(abs(v - ref) / abs(ref)), fmt(e / abs(ref)), st])
        gm = res.get("scipy-genz-malik")
        cb = res["cubage"]
        rows.append([name, "ratio cubage/scipy-gm", fmt(cb[2] / gm[2]), fmt(cb[3] / gm[3]), "", "", ""])
        print(f"  done: {name}", flush=True)
    print()
    table(rows, ["problem", "method", "evals", "seconds", "true rel err", "est rel err", "status"])

    print("\n## batch policy: evaluations with batch='auto' vs strictly one region per step")
    rows = []
    for name, f, lo, hi, _ref in probs:
        a = run_cubage(f, lo, hi, tol)
        if a[2] > SINGLE_MAX and not args.single_all:
            # one region per step pays the engine's per-step overhead a million times over here (the 3-D generic
            # kink takes 34 M evaluations): about 20 minutes (--single-all runs it)
            rows.append([name, a[2], f"skipped (> {SINGLE_MAX:,})", "", fmt(a[3]), ""])
            continue
        one = run_cubage(f, lo, hi, tol, batch=1)
        rows.append([name, a[2], one[2], fmt(a[2] / one[2]), fmt(a[3]), fmt(one[3])])
    table(rows, ["problem", "evals auto", "evals single", "ratio", "s auto", "s single"])

    if not args.quick:
        for name, f, lo, hi, ref in (kink(6, 2, 1.0), kink(6, 2)):
            v, e, n, s, st = run_cubage(f, lo, hi, tol)
            print(f"\n## 6-D kinked integrand {name} at rel_tol {tol:g}: {s:.1f} s, {n} evaluations, status {st}, "
                  f"true rel err {abs(v - ref) / ref:.2g}, estimated {e / ref:.2g}")

    print("\n## throughput, trivial 4-D integrand (sum of coordinates), one core")
    f = lambda X: X[:, 0] + X[:, 1] + X[:, 2] + X[:, 3]
    t = time.perf_counter()
    r = cubage.integrate(lambda X: np.exp(-(X * X).sum(axis=1)), cubage.Box([0] * 4, [1] * 4), rel_tol=1e-16,
                           budget=20_000_000)
    s1 = time.perf_counter() - t
    print(f"exp(-|x|^2): {r.evaluations / s1 / 1e6:.1f} M evaluations/s ({r.evaluations} in {s1:.2f} s)")
    t = time.perf_counter()
    r = cubage.integrate(f, cubage.Box([0] * 4, [1] * 4), rel_tol=1e-16, budget=20_000_000, estimate="plain")
    s1 = time.perf_counter() - t
    print(f"sum of coordinates (a cubic-exact integrand, so every region is exact and the "
          f"split pattern is uniform): {r.evaluations / s1 / 1e6:.1f} M evaluations/s")

    print("\n## engine overhead against a bare numpy evaluation of the same number of points (6-D)")
    g5 = lambda X: (np.exp(-X[:, 0]) * np.cos(X[:, 1]) * erf(X[:, 2]) * np.exp(-X[:, 3] ** 2)
                    * np.cos(X[:, 4] * X[:, 5]))
    g8 = lambda X: (g5(X) * erf(X[:, 5] - X[:, 0]) * np.exp(np.cos(X[:, 3] + X[:, 1])))
    g14 = lambda X: (g8(X) * erf(X[:, 1] * X[:, 2]) * np.cos(X[:, 0] - X[:, 4]) * np.exp(-X[:, 5] * X[:, 2])
                     * erf(X[:, 3] + 0.5) * np.cos(np.exp(-X[:, 4])) * np.exp(np.sin(X[:, 0] * X[:, 3])))
    for label, g in (("product of exp, cos, erf (5 factors)", g5), ("the same with 3 more factors", g8),
                     ("the same with 9 more factors", g14)):
        t = time.perf_counter()
        r = cubage.integrate(g, cubage.Box([0] * 6, [1] * 6), rel_tol=1e-16, budget=10_000_000)
        wall = time.perf_counter() - t
        # bare: the same number of points, in the same column-major layout the engine hands out
        X = np.asfortranarray(np.random.default_rng(0).random((1 << 15, 6)))
        reps = max(1, r.evaluations // X.shape[0])
        t = time.perf_counter()
        for _ in range(reps):
            g(X)
        bare = (time.perf_counter() - t) * r.evaluations / (reps * X.shape[0])
        print(f"{label}: {r.evaluations} evaluations in {r.steps} steps: engine {wall:.3f} s, bare numpy "
              f"{bare:.3f} s ({bare / r.evaluations * 1e9:.0f} ns/point), overhead {(wall - bare) / wall:.0%} of "
              f"wall time")


if __name__ == "__main__":
    main()
