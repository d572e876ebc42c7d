"""Per-region true errors against per-region estimates on integrands that jump across a surface.

Runs an indicator volume and compares, region by region, the engine's error estimate with the region's true
error, from an exact per-region value:

* half-space ``{a.x < c}`` (any d): the volume of a box under a half-space, by inclusion-exclusion over the box's
  vertices ``v``: ``sum_v (-1)^(upper coordinates of v) (c - a.v)_+^d / (d! prod a_i)`` (the sum behind the
  Irwin-Hall distribution function; tests/test_jumps.py checks it);
* the unit 4-ball (``problems/hyperball-octant.toml``): the area of a disk cut by a rectangle in closed form
  (``(u sqrt(r^2 - u^2) + r^2 asin(u / r)) / 2`` under the circle), integrated over the other two coordinates
  by 24 x 24 Gauss-Legendre points per box (the script prints its agreement with a 2 x 2 subdivision).

It prints the reported and true total errors, the sum of the regions' |true errors| (what an estimate that
claims no cancellation between regions can reach), and for the regions the surface cuts: how many hold their
true error, split into boxes whose nodes all lie on one side (their estimate is the vertex probes' floor) and
the rest (the rule's own estimate).

    python benchmarks/jump_regions.py --case ball4 --tol 2e-2
    python benchmarks/jump_regions.py --case halfspace --dim 5 --tol 1e-2
"""

from __future__ import annotations

import argparse
import itertools
import math
import time

import numpy as np

import cubage
from cubage.engine.rules import box_rule


def halfspace_volume(lo, hi, a, c):
    lo, hi = np.atleast_2d(lo), np.atleast_2d(hi)
    d = lo.shape[1]
    out = np.zeros(len(lo))
    for s in itertools.product((0, 1), repeat=d):
        s = np.array(s)
        out += (-1.0) ** s.sum() * np.maximum(c - np.where(s == 1, hi, lo) @ a, 0.0) ** d
    return out / (math.factorial(d) * np.prod(a))


def _under_circle(u, r):
    # int_0^u sqrt(r^2 - t^2) dt (elementary antiderivative)
    with np.errstate(invalid="ignore", divide="ignore"):
        q = np.where(r > 0, np.clip(u / np.where(r > 0, r, 1.0), -1.0, 1.0), 0.0)
    return 0.5 * (u * np.sqrt(np.maximum(r * r - u * u, 0.0)) + r * r * np.arcsin(q))


def _quadrant(x, y, r):
    # area of {u, v >= 0, u^2 + v^2 < r^2, u < x, v < y} for x, y >= 0
    us = np.sqrt(np.maximum(r * r - y * y, 0.0))
    xm = np.minimum(x, r)
    return y * np.minimum(x, us) + np.maximum(_under_circle(xm, r) - _under_circle(np.minimum(xm, us), r), 0.0)


def ball4_volume(lo, hi, n=24):
    """Volume of the unit 4-ball inside boxes [lo, hi] of the positive orthant."""
    t, w = np.polynomial.legendre.leggauss(n)
    z = (lo[:, 2:3] + hi[:, 2:3]) / 2 + (hi[:, 2:3] - lo[:, 2:3]) / 2 * t[None]
    ww = (lo[:, 3:4] + hi[:, 3:4]) / 2 + (hi[:, 3:4] - lo[:, 3:4]) / 2 * t[None]
    r = np.sqrt(np.maximum(1.0 - z[:, :, None] ** 2 - ww[:, None, :] ** 2, 0.0))
    x0, x1, y0, y1 = (b[:, None, None] for b in (lo[:, 0], hi[:, 0], lo[:, 1], hi[:, 1]))
    area = _quadrant(x1, y1, r) - _quadrant(x0, y1, r) - _quadrant(x1, y0, r) + _quadrant(x0, y0, r)
    return (area * (w[:, None] * w[None, :])[None]).sum(axis=(1, 2)) * (hi[:, 2] - lo[:, 2]) * (hi[:, 3] - lo[:, 3]) / 4


def ball4_refined(lo, hi, n=24):
    """The same on 2 x 2 sub-boxes in the two quadrature coordinates (a check of the quadrature)."""
    tot = 0.0
    for i, j in itertools.product((0, 1), repeat=2):
        l2, h2 = lo.copy(), hi.copy()
        for ax, s in ((2, i), (3, j)):
            half = (hi[:, ax] - lo[:, ax]) / 2
            l2[:, ax] = lo[:, ax] + s * half
            h2[:, ax] = l2[:, ax] + half
        tot = tot + ball4_volume(l2, h2, n)
    return tot


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--case", choices=("ball4", "halfspace"), default="ball4")
    ap.add_argument("--dim", type=int, default=4, help="halfspace only")
    ap.add_argument("--tol", type=float, default=2e-2)
    ap.add_argument("--budget", type=int, default=60_000_000)
    ap.add_argument("--seed", type=int, default=1, help="halfspace: draw of the normal")
    args = ap.parse_args(argv)
    if args.case == "ball4":
        d = 4

        def f(x):
            return ((x * x).sum(axis=1) < 1.0).astype(float)
        exact = math.pi ** 2 / 32                   # unit 4-ball pi^2/2 (DLMF 5.19.4) / 16 orthants
    else:
        d = args.dim
        a = 0.5 + np.random.default_rng(args.seed).random(d)
        c = 0.45 * a.sum()

        def f(x):
            return (x @ a < c).astype(float)
        exact = float(halfspace_volume(np.zeros((1, d)), np.ones((1, d)), a, c)[0])
    t0 = time.perf_counter()
    run = cubage.Run(f, cubage.Box([0.0] * d, [1.0] * d), rel_tol=args.tol, budget=args.budget)
    res = run.run()
    print(f"{args.case} d={d} rel_tol={args.tol:g}: {res.status} after {res.evaluations:,} evaluations "
          f"({time.perf_counter() - t0:.1f} s); reported {res.error:.3e}, true {abs(res.value - exact):.3e}")
    st = run.store
    centre, halfw = np.array(st["centre"]), np.array(st["halfw"])
    lo, hi = centre - halfw, centre + halfw
    vol = np.prod(2 * halfw, axis=1)
    if args.case == "ball4":
        cut = ((lo * lo).sum(axis=1) < 1) & ((hi * hi).sum(axis=1) > 1)
        ex = np.where((hi * hi).sum(axis=1) <= 1, vol, 0.0)
        ex[cut] = ball4_volume(lo[cut], hi[cut])
        check = np.abs(ball4_refined(lo[cut], hi[cut]) - ex[cut]) / vol[cut]
        print(f"quadrature check: largest change on 2 x 2 sub-boxes {check.max():.1e} of a box's volume")
        inside = lambda p: (p * p).sum(axis=-1) < 1                          # noqa: E731
    else:
        ex = halfspace_volume(lo, hi, a, c)
        cut = (lo @ a < c) & (hi @ a > c)
        inside = lambda p: p @ a < c                                         # noqa: E731
    true = np.abs(st["value"][:, 0] - ex)
    cut &= true > 1e-12 * vol                                                # a plane through a vertex: rounding
    err = st["error"][:, 0]
    print(f"regions {len(err):,}, cut {cut.sum():,}; sum of estimates {err.sum():.3e}, "
          f"sum of |true errors| {true.sum():.3e} (the least an estimate without cancellation can claim)")
    nodes = centre[:, None, :] + halfw[:, None, :] * box_rule("genz-malik", d).nodes[None]
    side = inside(nodes)
    beyond = cut & (side.all(axis=1) | ~side.any(axis=1))
    for name, s in (("nodes on one side", beyond), ("nodes on both sides", cut & ~beyond)):
        if s.any():
            r = true[s] / err[s]
            print(f"  {name:20s} {s.sum():7,d} regions: estimate {err[s].sum():.3e} against true {true[s].sum():.3e}; "
                  f"held {np.mean(r <= 1):6.1%}; true/estimate quantiles 50/90/99 % "
                  f"{np.quantile(r, 0.5):.2f} / {np.quantile(r, 0.9):.2f} / {np.quantile(r, 0.99):.2f}")


if __name__ == "__main__":
    main()
