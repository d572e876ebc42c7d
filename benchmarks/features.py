"""Feature-aligned boundaries: figures for the targets of issue 13.

For each case the integrand is an expression; the features are found by
:mod:`cubage.problem.features` (automatic detection, nothing declared) unless
the case says "declared".  Each case is run with feature alignment and, for
comparison, without it (same goal, a budget of 2e7 evaluations or 60 s).
Printed: status, evaluations, seconds, the reported relative error and the
true relative error against the closed form named beside the case.

Run:  python benchmarks/features.py [--quick]
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from scipy.special import gamma

import cubage
from cubage.problem.expr import compile_expression
from cubage.problem.features import analyse, to_engine

CUBE = lambda d: cubage.Box([0.0] * d, [1.0] * d)  # noqa: E731
SIMPLEX = lambda d: cubage.Simplex(np.vstack([np.zeros(d), np.eye(d)]))  # noqa: E731
NAMES = ["x", "y", "z", "u", "v", "w"]


def irwin_hall_abs(s, k):
    # E|S - s| for S the sum of k uniforms (Irwin-Hall distribution, integrated CDF)
    pos = sum((-1) ** j * math.comb(k, j) * max(s - j, 0.0) ** (k + 1) for j in range(k + 1))
    return (k / 2 - s) + 2 * pos / math.factorial(k + 1)


def irwin_hall_cdf(s, k):
    # P(S <= s) (Irwin-Hall distribution)
    return sum((-1) ** j * math.comb(k, j) * max(s - j, 0.0) ** k for j in range(k + 1)) / math.factorial(k)


def cube_power(a):
    # int_{[0,1]^3} |r|^a = 3/(a+3) int_{[0,1]^2} (1+u^2+v^2)^(a/2) du dv (pyramid reduction, mpmath 2-D quadrature)
    import mpmath
    return float(3 / (a + 3) * mpmath.quad(lambda u, v: (1 + u * u + v * v) ** (a / 2), [0, 1], [0, 1]))


def cases(quick):
    out = []
    ds = (2, 4) if quick else (2, 3, 4, 5, 6)
    e1 = math.e - 1
    for d in ds:
        v = NAMES[:d]
        rest = " + ".join(v[1:])
        # axis-aligned kink and jump: product forms (closed form)
        out.append((f"kink |x-0.37| exp(..) {d}D", f"abs(x - 0.37) * exp({rest})", v, CUBE(d),
                    (0.37 ** 2 + 0.63 ** 2) / 2 * e1 ** (d - 1), 1e-10, None))
        out.append((f"jump (x<0.37) exp(..) {d}D", f"(x < 0.37) * exp({rest})", v, CUBE(d),
                    0.37 * e1 ** (d - 1), 1e-10, None))
        s = d / 2 - 0.1
        out.append((f"kink |sum-{s:g}| {d}D", f"abs({' + '.join(v)} - {s})", v, CUBE(d),
                    irwin_hall_abs(s, d), 1e-10, None))
        out.append((f"jump sum<{s:g} {d}D", f"({' + '.join(v)} < {s}) * 1.0", v, CUBE(d),
                    irwin_hall_cdf(s, d), 1e-10, None))
    # several planes: |x - 0.3| + (x + y < 0.8) in 2-D: 0.29 + P(U1+U2 < 0.8) = 0.29 + 0.32
    out.append(("two features 2D", "abs(x - 0.3) + (x + y < 0.8)", ["x", "y"], CUBE(2), 0.29 + 0.32, 1e-10, None))
    # singularities (Dirichlet's formula: int prod x_i^(a_i - 1) over the simplex = prod Gamma(a_i) / Gamma(sum a_i))
    out.append(("Dirichlet -1/2 all faces 3D", "(x*y*z*(1 - x - y - z))**-0.5", NAMES[:3], SIMPLEX(3),
                math.pi ** 2, 1e-8, None))
    out.append(("Dirichlet -1/3 faces 3D", "(x*y*z)**(-1/3)", NAMES[:3], SIMPLEX(3),
                gamma(2 / 3) ** 3 / gamma(3.0), 1e-8, None))
    out.append(("Dirichlet -0.9,-1/2,-1/3 3D", "x**-0.9 * y**-0.5 * z**(-1/3)", NAMES[:3], SIMPLEX(3),
                gamma(0.1) * gamma(0.5) * gamma(2 / 3) / gamma(0.1 + 0.5 + 2 / 3 + 1), 1e-8, None))
    # vertex: int (x+y+z)^a over the simplex = 1/((d-1)! (a + d))  (Dirichlet/Liouville)
    out.append(("vertex (x+y+z)^-2.5 3D", "(x + y + z)**-2.5", NAMES[:3], SIMPLEX(3), 1 / (2 * 0.5), 1e-8, None))
    out.append(("corner 1/|r| cube 3D", "1/sqrt(x*x + y*y + z*z)", NAMES[:3], CUBE(3),
                -math.pi / 4 + 1.5 * math.log(2 + math.sqrt(3)), 1e-8, None))   # Bailey-Borwein-Crandall B_3(-1)
    # x^(-1/2) (y + z + u) on [0,1]^4 = 2 * 3/2 = 3 (closed form; the README engine table's corner-4d case)
    out.append(("face x^-1/2 (y+z+u) 4D", "x**-0.5 * (y + z + u)", NAMES[:4], CUBE(4), 3.0, 1e-8, None))
    out.append(("corner |r|^-2.5 cube 3D", "(x*x + y*y + z*z)**-1.25", NAMES[:3], CUBE(3),
                None if quick else cube_power(-2.5), 1e-8, None))
    out.append(("centre 1/|r-c| cube 3D", "1/sqrt((x-0.5)**2 + (y-0.5)**2 + (z-0.5)**2)", NAMES[:3], CUBE(3),
                2 * (-math.pi / 4 + 1.5 * math.log(2 + math.sqrt(3))), 1e-8, None))   # Waldvogel 1976, 8 octants
    return out


def run(f, dom, tol, budget, limit, **kw):
    t = time.perf_counter()
    with np.errstate(all="ignore"):
        r = cubage.integrate(f, dom, rel_tol=tol, budget=budget, time_limit=limit, raise_on_failure=False, **kw)
    return r, time.perf_counter() - t


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer dimensions, smaller budgets")
    a = ap.parse_args()
    budget = 2_000_000 if a.quick else 20_000_000
    limit = 20.0 if a.quick else 60.0
    head = f"{'case':<32} {'mode':<8} {'status':<13} {'evals':>11} {'sec':>6} {'reported':>9} {'true':>9}"
    print(head)
    print("-" * len(head))
    for name, src, var, dom, ref, tol, declared in cases(a.quick):
        f = compile_expression(src, var)
        kw, _ = to_engine(analyse(src, var), dom)
        if declared:
            kw = declared
        for mode, opts in (("aligned", kw), ("plain", {})):
            r, sec = run(f, dom, tol, budget, limit, **opts)
            rep = r.error / abs(r.value) if r.value else float("nan")
            true = abs(r.value - ref) / abs(ref) if ref is not None and math.isfinite(r.value) else float("nan")
            print(f"{name:<32} {mode:<8} {r.status:<13} {r.evaluations:>11,} {sec:>6.2f} {rep:>9.1e} {true:>9.1e}",
                  flush=True)


if __name__ == "__main__":
    main()
