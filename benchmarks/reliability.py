"""Reliability study of the error estimate on Genz's test families.

For every family, dimension, tolerance and draw this integrates with the
"sharp" estimate (and, for the evaluation ratio, with "plain") and counts how
often the true error (closed form, :mod:`cubage.bench.genz_families`) is within the
reported error.  It prints one line per (family, d, tol) and a summary; the
figures calibrate ``RATIO_LIMIT`` / ``SAFETY`` in :mod:`cubage.engine.estimate`.

Usage::

    python benchmarks/reliability.py [--draws 50] [--dims 2 3 4 5 6]
        [--tols 1e-4 1e-6 1e-8] [--rules default genz-malik] [--seed 1]
        [--ratio-limit X] [--safety Y] [--budget N] [--no-plain]

``--ratio-limit`` / ``--safety`` override the constants for this process
only (for exploring); the defaults measure what is committed.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import cubage  # noqa: E402
from cubage.bench import genz_families as genz
from cubage.engine import estimate


def study(families, dims, tols, draws, rules, seed, budget, plain=True, out=sys.stdout):
    """Run the study; returns a list of per-run dicts."""
    rows = []
    for rule in rules:
        for fam in families:
            for d in dims:
                rname = None if rule == "default" else rule
                if rname == "gauss-kronrod" and d > 3:
                    continue
                rng = np.random.default_rng([seed, genz.FAMILIES.index(fam), d])
                cases = [genz.draw(fam, d, rng) for _ in range(draws)]
                box = cubage.Box([0.0] * d, [1.0] * d)
                for tol in tols:
                    ok = conv = within = 0
                    ev_s = ev_p = 0
                    worst = 0.0
                    t0 = time.perf_counter()
                    for c in cases:
                        r = cubage.integrate(c.f, box, rel_tol=tol, rule=rname, budget=budget)
                        true = abs(r.value - c.exact)
                        good = true <= r.error
                        ok += good
                        conv += r.converged
                        within += true <= tol * abs(c.exact)
                        worst = max(worst, true / r.error if r.error > 0 else np.inf)
                        ev_s += r.evaluations
                        rec = dict(rule=rule, family=fam, d=d, tol=tol, true=true, reported=r.error,
                                   evals=r.evaluations, status=r.status, exact=c.exact)
                        if plain:
                            rp = cubage.integrate(c.f, box, rel_tol=tol, rule=rname, budget=budget,
                                                    estimate="plain")
                            ev_p += rp.evaluations
                            rec.update(plain_evals=rp.evaluations, plain_true=abs(rp.value - c.exact),
                                       plain_reported=rp.error)
                        rows.append(rec)
                    ratio = f"{ev_s / ev_p:6.3f}" if plain and ev_p else "   -  "
                    print(f"{rule:12s} {fam:14s} d={d} tol={tol:.0e}  true<=reported {ok:3d}/{len(cases)}"
                          f"  within-tol {within:3d}  converged {conv:3d}  worst true/reported {worst:8.3g}"
                          f"  evals sharp/plain {ratio}  {time.perf_counter() - t0:6.1f}s", file=out, flush=True)
    return rows


def summary(rows, out=sys.stdout):
    smooth = [r for r in rows if r["family"] in genz.SMOOTH]
    rough = [r for r in rows if r["family"] not in genz.SMOOTH]
    for name, rs in (("smooth", smooth), ("c0+discontinuous", rough)):
        if not rs:
            continue
        share = np.mean([r["true"] <= r["reported"] for r in rs])
        line = f"{name}: true<=reported on {100 * share:.2f} % of {len(rs)} runs"
        if "plain_evals" in rs[0]:
            ratio = sum(r["evals"] for r in rs) / sum(r["plain_evals"] for r in rs)
            med = np.median([r["evals"] / r["plain_evals"] for r in rs])
            pshare = np.mean([r["plain_true"] <= r["plain_reported"] for r in rs])
            line += (f"; evaluations sharp/plain total {ratio:.3f}, median {med:.3f};"
                     f" plain true<=reported {100 * pshare:.2f} %")
        print(line, file=out)
        for tol in sorted({r["tol"] for r in rs}):
            sub = [r for r in rs if r["tol"] == tol]
            share = np.mean([r["true"] <= r["reported"] for r in sub])
            w100 = np.mean([r["true"] <= 100 * tol * abs(r["exact"]) for r in sub])
            print(f"   tol {tol:.0e}: {100 * share:.2f} %  (true error within 100x tol: {100 * w100:.1f} %)",
                  file=out)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--draws", type=int, default=50, help="draws per family and dimension (default 50)")
    p.add_argument("--dims", type=int, nargs="+", default=[2, 3, 4, 5, 6], help="dimensions (default 2..6)")
    p.add_argument("--tols", type=float, nargs="+", default=[1e-4, 1e-6, 1e-8], help="relative tolerances")
    p.add_argument("--families", nargs="+", default=list(genz.FAMILIES), choices=genz.FAMILIES)
    p.add_argument("--rules", nargs="+", default=["default", "genz-malik"],
                   help="'default' (the engine's choice per dimension) and/or rule names")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--budget", type=int, default=2_000_000, help="budget per run (default 2e6)")
    p.add_argument("--ratio-limit", type=float, help="override estimate.RATIO_LIMIT for this process")
    p.add_argument("--safety", type=float, help="override estimate.SAFETY for this process")
    p.add_argument("--floor", type=float, help="override estimate.FLOOR for this process")
    p.add_argument("--no-plain", action="store_true", help="skip the plain-estimate runs (no evaluation ratio)")
    a = p.parse_args(argv)
    if a.ratio_limit is not None:
        estimate.RATIO_LIMIT = a.ratio_limit
    if a.safety is not None:
        estimate.SAFETY = a.safety
    if a.floor is not None:
        estimate.FLOOR = a.floor
    print(f"FLOOR={estimate.FLOOR} RATIO_LIMIT={estimate.RATIO_LIMIT} SAFETY={estimate.SAFETY} "
          f"draws={a.draws} seed={a.seed}")
    t0 = time.perf_counter()
    rows = study(a.families, a.dims, a.tols, a.draws, a.rules, a.seed, a.budget, plain=not a.no_plain)
    summary(rows)
    print(f"total {time.perf_counter() - t0:.0f}s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
