"""Calibration study of the error control: is a ``converged`` result right?

Two parts, both against independently known values:

1. **Genz's six families** (:mod:`cubage.bench.genz_families`, closed forms
   from Genz 1984), random draws, d = 2..6, rel_tol 1e-4, 1e-6, 1e-8.
2. **Integrals with published values that have kinks, jumps and
   singularities** (:data:`CASES`; the source of every value is named beside
   it), rel_tol 1e-4 and 1e-6.

For every run it records the status, the true error, the reported error and
the evaluations, and prints per family / tolerance:

* ``held``: share of runs with true error <= reported error (reliability);
* ``silent``: runs that say ``converged`` although the true error is above
  twice the goal (the one outcome the engine must never produce);
* ``conv``: share of runs that say ``converged``; evaluations.

Seeds: the study's draws come from ``numpy.random.default_rng([seed, family,
d])``.  Seeds 1 and 2 calibrated the first estimator, seed 11 is used by
tests/test_reliability.py; seeds 7, 8 and 9 were used while tuning the
discrepancy control, the vertex probes, the audit and the steering of splits
by the probes.  Seeds 2026, 4099, 5227, 6311, 7177, 8329, 5283, 5855, 6022, 4782, 6965, 6340,
3896, 5448, 6569 and 2648 recorded or checked earlier versions and have been seen.  The figures
in the README and in :mod:`cubage.engine.estimate` come from ``--seed 7858 --draws 20`` (the
default seed), drawn fresh for the last version and never used for tuning: use a new seed
to check them again.

Usage::

    python benchmarks/calibration.py --quick          # a few minutes
    python benchmarks/calibration.py                  # the recorded study: seed 7858, 20 draws (~8 min)
    python benchmarks/calibration.py --json out.json  # the same, writing every run

``--json`` writes every run (for comparing two versions run for run).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import cubage  # noqa: E402
from cubage.bench import genz_families as genz  # noqa: E402

SMOOTH = set(genz.SMOOTH)


# -- published integrals with kinks, jumps and singularities -----------------------------------

def _irwin_hall_cdf(s: float, k: int) -> float:
    # P(U_1 + ... + U_k <= s) for independent uniforms (Irwin-Hall distribution; Hall 1927, Irwin 1927)
    return sum((-1) ** j * math.comb(k, j) * (s - j) ** k for j in range(int(math.floor(s)) + 1)) / math.factorial(k)


def _irwin_hall_abs(s: float, k: int) -> float:
    # E|U_1 + ... + U_k - s| = (k/2 - s) + 2 E(s - S)^+, E(s - S)^+ = sum_j (-1)^j C(k,j) (s-j)_+^(k+1) / (k+1)!
    # (integral of the Irwin-Hall CDF)
    pos = sum((-1) ** j * math.comb(k, j) * max(s - j, 0.0) ** (k + 1) for j in range(k + 1))
    return (k / 2 - s) + 2 * pos / math.factorial(k + 1)


def _watson_sc() -> float:
    # Watson's simple-cubic lattice integral (Watson 1939), closed form of Glasser & Zucker (1977):
    # (1/pi^3) int_[0,pi]^3 dx dy dz / (1 - (cos x + cos y + cos z)/3) = sqrt(6)/(32 pi^3) G(1/24)G(5/24)G(7/24)G(11/24)
    # = 1.5163860591... (also checked against mpmath's Gamma function to 20 digits)
    from mpmath import gamma, mp, mpf, pi, sqrt
    mp.dps = 30
    return float(sqrt(6) / (32 * pi ** 3) * gamma(mpf(1) / 24) * gamma(mpf(5) / 24) * gamma(mpf(7) / 24)
                 * gamma(mpf(11) / 24))


def _watson_bcc() -> float:
    # Watson's body-centred-cubic lattice integral (Watson 1939):
    # (1/pi^3) int_[0,pi]^3 dx dy dz / (1 - cos x cos y cos z) = Gamma(1/4)^4 / (4 pi^3)
    return math.gamma(0.25) ** 4 / (4 * math.pi ** 3)


def cases() -> list[dict]:
    """The published test integrals: name, integrand, domain, exact value, source, feature."""
    box = cubage.Box
    out = []

    def add(name, f, domain, exact, source, feature):
        out.append(dict(name=name, f=f, domain=domain, exact=float(exact), source=source, feature=feature))

    s2, s3 = math.sqrt(2.0), math.sqrt(3.0)
    # Bailey, Borwein & Crandall, "Box integrals", J. Comput. Appl. Math. 206 (2007) 196-208:
    # B_n(s) = int_[0,1]^n |r|^s, Delta_n(s) = int_[0,1]^2n |x - y|^s
    add("box B2(1)", lambda X: np.sqrt((X * X).sum(axis=1)), box([0] * 2, [1] * 2),
        (s2 + math.asinh(1.0)) / 3, "Bailey-Borwein-Crandall 2007, B_2(1)", "corner kink")
    add("box B3(-1)", lambda X: 1.0 / np.sqrt((X * X).sum(axis=1)), box([0] * 3, [1] * 3),
        1.5 * math.log(2 + s3) - math.pi / 4, "Bailey-Borwein-Crandall 2007, B_3(-1)", "corner singularity")
    add("box B3(1)", lambda X: np.sqrt((X * X).sum(axis=1)), box([0] * 3, [1] * 3),
        s3 / 4 + math.log(2 + s3) / 2 - math.pi / 24, "Bailey-Borwein-Crandall 2007, B_3(1)", "corner kink")
    add("box Delta2(1)", lambda X: np.hypot(X[:, 0] - X[:, 2], X[:, 1] - X[:, 3]), box([0] * 4, [1] * 4),
        (2 + s2 + 5 * math.log(1 + s2)) / 15, "Bailey-Borwein-Crandall 2007, Delta_2(1)", "kink on a 2-D subspace")
    # Watson (1939), Glasser & Zucker (1977): lattice Green's functions at the origin
    add("Watson sc", lambda X: 1.0 / (1.0 - np.cos(X).sum(axis=1) / 3) / math.pi ** 3, box([0] * 3, [math.pi] * 3),
        _watson_sc(), "Watson 1939; Glasser-Zucker 1977 Gamma form", "1/r^2 corner singularity")
    add("Watson bcc", lambda X: 1.0 / (1.0 - np.cos(X).prod(axis=1)) / math.pi ** 3, box([0] * 3, [math.pi] * 3),
        _watson_bcc(), "Watson 1939, Gamma(1/4)^4/(4 pi^3)", "four corner singularities")
    # Dirichlet's formula: int over the standard simplex of prod x_i^(a_i - 1) = prod Gamma(a_i) / Gamma(sum a_i)
    add("Dirichlet 2-D (-1/2)", lambda X: 1.0 / np.sqrt(X[:, 0] * X[:, 1] * np.maximum(1 - X.sum(axis=1), 0.0)),
        cubage.Simplex(np.vstack([np.zeros(2), np.eye(2)])), 2 * math.pi,
        "Dirichlet's formula, Gamma(1/2)^3/Gamma(3/2)", "x^-1/2 on every face")
    add("Dirichlet 3-D (-1/2)", lambda X: 1.0 / np.sqrt(X.prod(axis=1) * np.maximum(1 - X.sum(axis=1), 0.0)),
        cubage.Simplex(np.vstack([np.zeros(3), np.eye(3)])), math.pi ** 2, "Dirichlet's formula, Gamma(1/2)^4/Gamma(2)",
        "x^-1/2 on every face")
    # indicator volumes and the failures measured in issue 12
    add("ball octant 3-D", lambda X: ((X * X).sum(axis=1) < 1.0).astype(float), box([0] * 3, [1] * 3),
        math.pi / 6, "volume of the unit ball / 8 (common practice)", "curved jump")
    add("x+y+z<1.4", lambda X: (X.sum(axis=1) < 1.4).astype(float), box([0] * 3, [1] * 3),
        _irwin_hall_cdf(1.4, 3), "Irwin-Hall CDF at 1.4", "jump on a plane")
    c = 0.7213
    add("(x<c) exp(y) 4-D", lambda X, c=c: (X[:, 0] < c) * np.exp(X[:, 1]), box([0] * 4, [1] * 4),
        c * (math.e - 1), "product formula c (e - 1)", "axis-aligned jump")
    c = 0.3377
    add("|x-c| exp(y+z+w)", lambda X, c=c: np.abs(X[:, 0] - c) * np.exp(X[:, 1:].sum(axis=1)), box([0] * 4, [1] * 4),
        (c * c + (1 - c) ** 2) / 2 * (math.e - 1) ** 3, "product formula", "axis-aligned kink")
    add("|x+y+z-1.4|", lambda X: np.abs(X.sum(axis=1) - 1.4), box([0] * 3, [1] * 3),
        _irwin_hall_abs(1.4, 3), "Irwin-Hall: E|S_3 - 1.4|", "kink on a plane")
    return out


# -- running ------------------------------------------------------------------------------------

def one(f, domain, tol, budget, exact) -> dict:
    t = time.perf_counter()
    r = cubage.integrate(f, domain, rel_tol=tol, budget=budget, raise_on_failure=False)
    goal = tol * abs(exact)
    true = abs(r.value - exact)
    trust = getattr(r, "trust", None)
    return dict(value=float(r.value), error=float(r.error), true=float(true), status=r.status,
                evals=int(r.evaluations), seconds=time.perf_counter() - t, held=bool(true <= r.error),
                silent=bool(r.status == "converged" and true > 2 * goal),
                within=bool(true <= goal),
                audit_evals=int(trust.get("audit_evaluations", 0)) if isinstance(trust, dict) else 0)


def genz_part(families, dims, tols, draws, seed, budget, rows, out=sys.stdout):
    for fam in families:
        for d in dims:
            rng = np.random.default_rng([seed, genz.FAMILIES.index(fam), d])
            drawn = [genz.draw(fam, d, rng) for _ in range(draws)]
            box = cubage.Box([0.0] * d, [1.0] * d)
            for tol in tols:
                t0 = time.perf_counter()
                sub = []
                for i, c in enumerate(drawn):
                    rec = one(c.f, box, tol, budget, c.exact)
                    rec.update(part="genz", family=fam, d=d, tol=tol, draw=i)
                    sub.append(rec)
                rows.extend(sub)
                conv = sum(r['status'] == 'converged' for r in sub)
                print(f"{fam:14s} d={d} tol={tol:.0e} held {sum(r['held'] for r in sub):3d}/{len(sub)}"
                      f"  silent {sum(r['silent'] for r in sub):2d}  conv {conv:3d}"
                      f"  evals {sum(r['evals'] for r in sub):10d}  {time.perf_counter() - t0:6.1f}s",
                      file=out, flush=True)


def cases_part(tols, budget, rows, names=None, out=sys.stdout):
    for c in cases():
        if names and c["name"] not in names:
            continue
        for tol in tols:
            rec = one(c["f"], c["domain"], tol, budget, c["exact"])
            rec.update(part="case", family=c["name"], d=c["domain"].dim, tol=tol, source=c["source"],
                       feature=c["feature"])
            rows.append(rec)
            print(f"{c['name']:22s} tol={tol:.0e} {rec['status']:13s} true {rec['true']:9.2e} reported "
                  f"{rec['error']:9.2e} evals {rec['evals']:9d} {'SILENT WRONG' if rec['silent'] else ''}"
                  f"  [{c['source']}]", file=out, flush=True)


def summary(rows, out=sys.stdout):
    print("\n| family / case | tol | runs | held (true <= reported) | silent wrong | converged | evaluations |",
          file=out)
    print("|---|---|---|---|---|---|---|", file=out)
    keys = []
    for r in rows:
        k = (r["family"], r["tol"])
        if k not in keys:
            keys.append(k)
    for fam, tol in keys:
        sub = [r for r in rows if r["family"] == fam and r["tol"] == tol]
        n = len(sub)
        held = sum(r["held"] for r in sub)
        print(f"| {fam} | {tol:.0e} | {n} | {100 * held / n:.1f} % | {sum(r['silent'] for r in sub)} | "
              f"{100 * sum(r['status'] == 'converged' for r in sub) / n:.0f} % | {sum(r['evals'] for r in sub)} |",
              file=out)
    g = [r for r in rows if r["part"] == "genz"]
    for label, sel in (("smooth", lambda r: r["family"] in SMOOTH), ("c0+discontinuous",
                                                                       lambda r: r["family"] not in SMOOTH)):
        sub = [r for r in g if sel(r)]
        if sub:
            print(f"{label}: held {100 * np.mean([r['held'] for r in sub]):.2f} % of {len(sub)}, silent wrong "
                  f"{sum(r['silent'] for r in sub)}, evaluations {sum(r['evals'] for r in sub)}, audit share "
                  f"{sum(r['audit_evals'] for r in sub) / max(1, sum(r['evals'] for r in sub)):.3f}", file=out)
    cs = [r for r in rows if r["part"] == "case"]
    if cs:
        print(f"published cases: silent wrong {sum(r['silent'] for r in cs)} of {len(cs)}, held "
              f"{100 * np.mean([r['held'] for r in cs]):.1f} %", file=out)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="2 draws, budget 3e5: a few minutes")
    p.add_argument("--draws", type=int, help="draws per family and dimension (default 20; --quick 2)")
    p.add_argument("--dims", type=int, nargs="+", default=[2, 3, 4, 5, 6])
    p.add_argument("--tols", type=float, nargs="+", default=[1e-4, 1e-6, 1e-8], help="Genz tolerances")
    p.add_argument("--case-tols", type=float, nargs="+", default=[1e-4, 1e-6])
    p.add_argument("--families", nargs="+", default=list(genz.FAMILIES), choices=genz.FAMILIES)
    p.add_argument("--cases", nargs="*", help="only these published cases (names); none: all")
    p.add_argument("--no-genz", action="store_true")
    p.add_argument("--no-cases", action="store_true")
    p.add_argument("--seed", type=int, default=7858, help="draw seed (7858: the recorded, never tuned-on seed)")
    p.add_argument("--budget", type=int, help="evaluations per run (default 2e6; --quick 3e5)")
    p.add_argument("--json", help="write every run to this file")
    a = p.parse_args(argv)
    draws = a.draws or (2 if a.quick else 20)
    budget = a.budget or (300_000 if a.quick else 2_000_000)
    print(f"# calibration study: seed {a.seed}, {draws} draws, budget {budget}, cubage from {cubage.__file__}")
    rows: list[dict] = []
    t0 = time.perf_counter()
    if not a.no_genz:
        genz_part(a.families, a.dims, a.tols, draws, a.seed, budget, rows)
    if not a.no_cases:
        cases_part(a.case_tols, budget, rows, a.cases)
    summary(rows)
    print(f"total {time.perf_counter() - t0:.0f} s")
    if a.json:
        Path(a.json).write_text(json.dumps(rows, indent=0))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
