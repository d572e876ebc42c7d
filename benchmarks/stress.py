"""Stress set: narrow features placed between the nodes of a one-region or few-region run.

A run that meets its goal in one region (or after a few splits) has seen its integrand only at that region's
nodes, its vertex probes and whatever its audit adds.  A slab, a narrow bump, a jump or a kink that falls
between those nodes is invisible to the rule's own error estimate; this set places such features there on
purpose and counts the runs that say ``converged`` although their true error is above twice the goal
("silent wrong answers").  It is a stress test of the honesty checks (vertex probes, face probes, split
checks, the audit), not a calibration: many of its runs stay silent with any deterministic node set (a slab
narrower than every gap between nodes is invisible to all of them), so compare versions on it run for run
(``--json``) and never let a change add a silent answer.

Every integrand is ``B(x) + h F(x)`` on ``[0, 1]^d`` with the smooth base ``B(x) = exp(0.2 sum x_i)`` and a
feature ``F`` whose integral is a chosen share of the total (3e-6 .. 3e-2).  Each value below is exact (closed
forms, sources named beside each one).  Feature positions lie in the gaps between the node coordinates of the
first region's rule (tensor Gauss-Kronrod in 2-D, Genz-Malik from 3-D on) and, for half of the draws, of its
children after a bisection of that axis.

Usage::

    python benchmarks/stress.py                       # d = 2..6, rel_tol 1e-4 and 1e-6
    python benchmarks/stress.py --dims 2 --json out.json
    python benchmarks/stress.py --compare a.json b.json      # run-for-run silent and evaluation changes
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from fractions import Fraction
from pathlib import Path

import numpy as np
from scipy.special import erf

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import cubage  # noqa: E402

BASE_RATE = 0.2
KINDS = ("slab", "ridge", "bump", "jump", "kink", "oblique-slab", "oblique-jump", "corner")
SHARES = (3e-6, 3e-5, 3e-4, 3e-3, 3e-2)

# 1-D node abscissae on [-1, 1] of the first region's rule along one axis (the rule's tabulated values):
# K15 (Kronrod 1965; QUADPACK, Piessens et al. 1983) and Genz-Malik's generators 0, sqrt(9/70), sqrt(9/10),
# sqrt(9/19) (Genz & Malik 1980)
_K15 = (0.991455371120812639, 0.949107912342758525, 0.864864423359769073, 0.741531185599394440,
        0.586087235467691130, 0.405845151377397167, 0.207784955007898468, 0.0)
_GM = (0.0, math.sqrt(9 / 70), math.sqrt(9 / 10), math.sqrt(9 / 19))


def base_integral(d: int) -> float:
    # int_[0,1]^d exp(a sum x_i) dx = ((e^a - 1) / a)^d (elementary antiderivative, product of 1-D integrals)
    return (math.expm1(BASE_RATE) / BASE_RATE) ** d


def irwin_hall_cdf(s: float, k: int) -> float:
    # P(U_1 + ... + U_k <= s) = (1/k!) sum_{j <= s} (-1)^j C(k, j) (s - j)^k for independent uniforms
    # (Irwin-Hall distribution; Hall 1927, Irwin 1927); in exact rational arithmetic (no cancellation)
    if s <= 0:
        return 0.0
    if s >= k:
        return 1.0
    q = Fraction(s)
    tot = sum((-1) ** j * math.comb(k, j) * (q - j) ** k for j in range(int(math.floor(s)) + 1))
    return float(tot / math.factorial(k))


def gauss_1d(c: float, w: float) -> float:
    # int_0^1 exp(-((x - c)/w)^2) dx = w sqrt(pi)/2 (erf((1 - c)/w) + erf(c/w))
    # (definition of erf, Abramowitz & Stegun 7.1.1)
    return w * math.sqrt(math.pi) / 2 * (erf((1 - c) / w) + erf(c / w))


def node_gaps(d: int, refine: bool) -> list[tuple[float, float]]:
    """Gaps (lo, hi) in [0, 1] between the first region's node coordinates along one axis (and, when ``refine``,
    those of its two children after a bisection of that axis too), the probes' 2^-20 margins left out."""
    u = _K15 if d == 2 else _GM
    one = sorted({0.5 + 0.5 * s * a for a in u for s in (1, -1)})
    pts = set(one)
    if refine:
        pts |= {0.5 * x for x in one} | {0.5 + 0.5 * x for x in one} | {0.5}
    pts = sorted(pts | {2.0 ** -20, 1 - 2.0 ** -20})
    return [(a, b) for a, b in zip(pts[:-1], pts[1:]) if b - a > 1e-6]


def draw(kind: str, d: int, rng: np.random.Generator) -> dict:
    """One stress integrand: ``f``, exact value, and a description."""
    share = float(rng.choice(SHARES))
    refine = bool(rng.integers(2))
    gaps = node_gaps(d, refine)
    k = int(rng.integers(d))
    lo, hi = gaps[int(rng.integers(len(gaps)))]
    gap = hi - lo
    base = base_integral(d)
    rate = BASE_RATE

    def smooth(X):
        return np.exp(rate * X.sum(axis=1))

    if kind == "slab":                    # h on a < x_k < b inside one gap: h (b - a) (elementary)
        w = gap * float(rng.uniform(0.1, 0.8))
        a = lo + (gap - w) * float(rng.uniform(0, 1))
        b = a + w
        unit = w
        feat = (lambda a, b, k: lambda X: ((X[:, k] > a) & (X[:, k] < b)).astype(float))(a, b, k)
        desc = f"slab {a:.5f}<x{k}<{b:.5f}"
    elif kind == "ridge":                 # h exp(-((x_k - c)/w)^2): gauss_1d (A&S 7.1.1)
        c = lo + gap * float(rng.uniform(0.3, 0.7))
        w = gap * float(rng.uniform(0.05, 0.3))
        unit = gauss_1d(c, w)
        feat = (lambda c, w, k: lambda X: np.exp(-((X[:, k] - c) / w) ** 2))(c, w, k)
        desc = f"ridge x{k}={c:.5f} w={w:.2g}"
    elif kind == "bump":                  # h exp(-|x - c|^2 / w^2): product of gauss_1d (A&S 7.1.1)
        c = np.empty(d)
        for i in range(d):
            gl, gh = gaps[int(rng.integers(len(gaps)))]
            c[i] = gl + (gh - gl) * float(rng.uniform(0.3, 0.7))
        w = gap * float(rng.uniform(0.3, 1.0))
        unit = float(np.prod([gauss_1d(float(ci), w) for ci in c]))
        feat = (lambda c, w: lambda X: np.exp(-(((X - c) / w) ** 2).sum(axis=1)))(c, w)
        desc = f"bump c={np.round(c, 4).tolist()} w={w:.2g}"
    elif kind == "jump":                  # h on x_k > c: h (1 - c) (elementary)
        c = lo + gap * float(rng.uniform(0.1, 0.9))
        unit = 1 - c
        feat = (lambda c, k: lambda X: (X[:, k] > c).astype(float))(c, k)
        desc = f"jump x{k}>{c:.5f}"
    elif kind == "kink":                  # h |x_k - c|: h (c^2 + (1 - c)^2) / 2 (elementary)
        c = lo + gap * float(rng.uniform(0.1, 0.9))
        unit = (c * c + (1 - c) ** 2) / 2
        feat = (lambda c, k: lambda X: np.abs(X[:, k] - c))(c, k)
        desc = f"kink x{k}={c:.5f}"
    elif kind == "oblique-slab":          # h on s1 < sum x < s2: Irwin-Hall CDF difference (Hall 1927, Irwin 1927)
        s1 = float(rng.uniform(0.05, d - 0.1))
        s2 = s1 + float(10 ** rng.uniform(-2.5, -1))
        unit = irwin_hall_cdf(s2, d) - irwin_hall_cdf(s1, d)
        feat = (lambda s1, s2: lambda X: ((X.sum(axis=1) > s1) & (X.sum(axis=1) < s2)).astype(float))(s1, s2)
        desc = f"oblique slab {s1:.4f}<sum<{s2:.4f}"
    elif kind == "oblique-jump":          # h on sum x > s: 1 - Irwin-Hall CDF (Hall 1927, Irwin 1927)
        s = float(rng.uniform(0.05, d - 0.05))
        unit = 1 - irwin_hall_cdf(s, d)
        feat = (lambda s: lambda X: (X.sum(axis=1) > s).astype(float))(s)
        desc = f"oblique jump sum>{s:.4f}"
    elif kind == "corner":                # h on x_i > c for every i, c beyond the outermost nodes: h (1 - c)^d
        # (elementary: the volume of a cube of side 1 - c)
        outer = gaps[-1]
        c = outer[0] + (outer[1] - outer[0]) * float(rng.uniform(0.05, 0.95))
        unit = (1 - c) ** d
        feat = (lambda c: lambda X: (X > c).all(axis=1).astype(float))(c)
        desc = f"corner x>{c:.5f}"
    else:
        raise ValueError(kind)
    if not unit > 0:
        unit = 1e-300
    h = share * base / unit
    f = (lambda feat, h: lambda X: smooth(X) + h * feat(X))(feat, h)
    return dict(f=f, exact=base + h * unit, desc=f"{desc} share={share:g}", kind=kind, d=d)


def cases(dims, per_kind: int, seed: int) -> list[dict]:
    out = []
    for d in dims:
        rng = np.random.default_rng([seed, d])
        for kind in KINDS:
            for i in range(per_kind):
                c = draw(kind, d, rng)
                c["index"] = i
                out.append(c)
    return out


def run(dims, tols, per_kind, seed, budget, out=sys.stdout, verbose=False) -> list[dict]:
    rows = []
    for c in cases(dims, per_kind, seed):
        d = c["d"]
        for tol in tols:
            t0 = time.perf_counter()
            r = cubage.integrate(c["f"], cubage.Box([0.0] * d, [1.0] * d), rel_tol=tol, budget=budget,
                                 raise_on_failure=False)
            true = abs(r.value - c["exact"])
            goal = tol * abs(c["exact"])
            rec = dict(kind=c["kind"], d=d, index=c["index"], tol=tol, desc=c["desc"], status=r.status,
                       evals=int(r.evaluations), true=float(true / abs(c["exact"])),
                       reported=float(r.error / abs(c["exact"])), held=bool(true <= r.error),
                       silent=bool(r.status == "converged" and true > 2 * goal),
                       seconds=time.perf_counter() - t0)
            rows.append(rec)
            if verbose or rec["silent"]:
                print(f"{'SILENT' if rec['silent'] else '      '} d={d} tol={tol:.0e} {c['desc']:60s} "
                      f"{r.status:12s} evals {r.evaluations:8d} true/goal {true / goal:9.3g}", file=out, flush=True)
    return rows


def summary(rows, out=sys.stdout) -> None:
    tols = sorted({r["tol"] for r in rows}, reverse=True)
    dims = sorted({r["d"] for r in rows})
    print("\n| d | tol | runs | silent | held | converged | evaluations |", file=out)
    print("|---|---|---|---|---|---|---|", file=out)
    for tol in tols:
        for d in dims + [None]:
            sub = [r for r in rows if r["tol"] == tol and (d is None or r["d"] == d)]
            if not sub:
                continue
            print(f"| {d if d is not None else 'all'} | {tol:.0e} | {len(sub)} | {sum(r['silent'] for r in sub)} | "
                  f"{sum(r['held'] for r in sub)} | {sum(r['status'] == 'converged' for r in sub)} | "
                  f"{sum(r['evals'] for r in sub)} |", file=out)


def compare(a_path, b_path, out=sys.stdout) -> None:
    A = json.loads(Path(a_path).read_text())
    B = json.loads(Path(b_path).read_text())
    key = lambda r: (r["d"], r["kind"], r["index"], r["tol"])  # noqa: E731
    bi = {key(r): r for r in B}
    added = removed = 0
    for r in A:
        s = bi.get(key(r))
        if s is None:
            continue
        if s["silent"] and not r["silent"]:
            added += 1
            print(f"new silent   d={r['d']} tol={r['tol']:.0e} {r['desc']}: {r['status']} {r['evals']} -> "
                  f"{s['status']} {s['evals']} true {s['true']:.2e}", file=out)
        elif r["silent"] and not s["silent"]:
            removed += 1
            print(f"silent fixed d={r['d']} tol={r['tol']:.0e} {r['desc']}: {s['status']} {s['evals']}", file=out)
    print(f"silent {sum(r['silent'] for r in A)} -> {sum(s['silent'] for s in B)} (added {added}, removed "
          f"{removed}); evaluations {sum(r['evals'] for r in A)} -> {sum(s['evals'] for s in B)}", file=out)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--dims", type=int, nargs="+", default=[2, 3, 4, 5, 6])
    p.add_argument("--tols", type=float, nargs="+", default=[1e-4, 1e-6])
    p.add_argument("--per-kind", type=int, default=5, help="draws per feature kind and dimension")
    p.add_argument("--seed", type=int, default=31, help="placement seed of the stress set (not a calibration seed)")
    p.add_argument("--budget", type=int, default=300_000)
    p.add_argument("--json", help="write every run to this file")
    p.add_argument("--verbose", action="store_true", help="print every run, not only the silent ones")
    p.add_argument("--compare", nargs=2, metavar=("BEFORE", "AFTER"), help="compare two --json files")
    a = p.parse_args(argv)
    if a.compare:
        compare(*a.compare)
        return 0
    print(f"# stress set: seed {a.seed}, {a.per_kind} per kind, budget {a.budget}, cubage from {cubage.__file__}")
    t0 = time.perf_counter()
    rows = run(a.dims, a.tols, a.per_kind, a.seed, a.budget, verbose=a.verbose)
    summary(rows)
    print(f"total {time.perf_counter() - t0:.0f} s")
    if a.json:
        Path(a.json).write_text(json.dumps(rows, indent=0))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
