"""Simplex runs against closed forms: evaluations and honesty, smooth and singular.

Smooth families on the standard simplex ``{x >= 0, sum x <= 1}`` in d = 2..4,
random draws (``numpy.random.default_rng([seed, family, d])``), each a function
of one linear form ``l(x) = a . x`` or a monomial:

* ``exp``: ``exp(l)``, ``a_i`` uniform in [-3, 3];
* ``oscillatory``: ``cos(2 pi w + l)``, ``a_i`` uniform in [0, 9 / d] times 2;
* ``corner-peak``: ``(1 + l)^-(d + 1)``, ``a_i`` uniform in [0, 10 / d];
* ``monomial``: ``prod x_i^k_i (1 - sum x)^k_0``, total degree 8..14 (beyond the
  degree-7 rule's exactness).

Exact values: for a function ``g`` of one linear form the Hermite–Genocchi
formula gives ``int_S g(l) = d! vol(S) G[l_0, ..., l_d]``, the divided difference
of ``G`` (``G^(d) = g``) at the form's values on the vertices (e.g. C. de Boor,
*A Practical Guide to Splines*, ch. I, from memory), evaluated here with mpmath
at 50 digits; ``G`` is ``g``'s d-fold integral by Cauchy's formula for repeated
integration.  Monomials: Dirichlet's integral ``int_S prod x_i^(a_i - 1)
(1 - sum x)^(a_0 - 1) = prod Gamma(a_i) / Gamma(sum a_i)`` (Whittaker & Watson,
*A Course of Modern Analysis*, section 12.5).

Singular cases (``--singular``): Dirichlet's integral with exponent -1/2 on one
face (``x_0^-1/2``) and on every face (the published case of
benchmarks/calibration.py), d = 2, 3, 4.

Prints per family, dimension and tolerance: runs, held (true <= reported),
silent wrong (converged with the true error above twice the goal), converged,
evaluations.  ``--json`` writes every run (to compare two versions run for
run; run the other version with ``PYTHONPATH`` pointing at its package).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import cubage  # noqa: E402

FAMILIES = ("exp", "oscillatory", "corner-peak", "monomial")


def _hg_exact(g_mp, avals: np.ndarray, b: float, d: int) -> float:
    """int over the standard d-simplex of g(b + a . x) by the Hermite–Genocchi formula (mpmath, 50 digits)."""
    import mpmath as mp
    mp.mp.dps = 50
    ls = [mp.mpf(b)] + [mp.mpf(b) + mp.mpf(float(a)) for a in avals]

    def G(t):   # Cauchy: the d-fold integral of g from 0
        return mp.quad(lambda s: (t - s) ** (d - 1) * g_mp(s), [0, t]) / mp.factorial(d - 1)
    tab = [G(t) for t in ls]
    for level in range(1, d + 1):
        tab = [(tab[i + 1] - tab[i]) / (ls[i + level] - ls[i]) for i in range(len(tab) - 1)]
    return float(tab[0])   # d! vol(S) = 1 for the standard simplex


def draw(family: str, d: int, rng) -> tuple:
    """(name, f, exact) of one random draw."""
    import mpmath as mp
    if family == "exp":
        a = rng.uniform(-3, 3, d)
        return (lambda X, a=a: np.exp(X @ a)), _hg_exact(mp.exp, a, 0.0, d)
    if family == "oscillatory":
        a = rng.uniform(0, 9.0 / d, d) * 2
        w = float(rng.uniform())
        b = 2 * math.pi * w
        return (lambda X, a=a, b=b: np.cos(b + X @ a)), _hg_exact(mp.cos, a, b, d)
    if family == "corner-peak":
        a = rng.uniform(0, 10.0 / d, d)
        return ((lambda X, a=a: (1.0 + X @ a) ** -(d + 1)),
                _hg_exact(lambda t: (1 + t) ** -(d + 1), a, 0.0, d))
    if family == "monomial":
        total = int(rng.integers(8, 15))
        k = rng.multinomial(total, np.ones(d + 1) / (d + 1))
        # Dirichlet's integral (Whittaker & Watson 12.5) with a_i = k_i + 1
        exact = math.exp(sum(math.lgamma(ki + 1) for ki in k) - math.lgamma(total + d + 1))
        return (lambda X, k=k: np.prod(X ** k[1:], axis=1) * np.maximum(1 - X.sum(axis=1), 0.0) ** k[0]), exact
    raise ValueError(family)


def singular_cases(dims):
    out = []
    for d in dims:
        # Dirichlet's integral (Whittaker & Watson 12.5): x_0^-1/2 -> Gamma(1/2) / Gamma(d + 1/2)
        out.append((f"face x0^-1/2 d={d}", d, lambda X: 1.0 / np.sqrt(X[:, 0]),
                    math.gamma(0.5) / math.gamma(d + 0.5)))
        # every face: Gamma(1/2)^(d+1) / Gamma((d+1)/2)
        out.append((f"all faces -1/2 d={d}", d,
                    lambda X: 1.0 / np.sqrt(X.prod(axis=1) * np.maximum(1 - X.sum(axis=1), 0.0)),
                    math.gamma(0.5) ** (d + 1) / math.gamma((d + 1) / 2)))
    return out


def one(f, d, tol, budget, exact) -> dict:
    dom = cubage.Simplex(np.vstack([np.zeros(d), np.eye(d)]))
    r = cubage.integrate(f, dom, rel_tol=tol, budget=budget, raise_on_failure=False)
    true = abs(r.value - exact)
    return dict(value=float(r.value), error=float(r.error), true=float(true), status=r.status,
                evals=int(r.evaluations), held=bool(true <= r.error),
                silent=bool(r.status == "converged" and true > 2 * tol * abs(exact)))


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--seed", type=int, default=7)
    p.add_argument("--draws", type=int, default=5)
    p.add_argument("--dims", type=int, nargs="+", default=[2, 3, 4])
    p.add_argument("--tols", type=float, nargs="+", default=[1e-4, 1e-6, 1e-8])
    p.add_argument("--families", nargs="+", default=list(FAMILIES), choices=FAMILIES)
    p.add_argument("--budget", type=int, default=1_000_000)
    p.add_argument("--singular", action="store_true", help="also the singular Dirichlet cases")
    p.add_argument("--no-smooth", action="store_true")
    p.add_argument("--json")
    a = p.parse_args(argv)
    print(f"# simplex study: seed {a.seed}, {a.draws} draws, budget {a.budget}, cubage from {cubage.__file__}")
    rows = []
    tot = {}
    if not a.no_smooth:
        for fam in a.families:
            for d in a.dims:
                rng = np.random.default_rng([a.seed, FAMILIES.index(fam), d])
                drawn = [draw(fam, d, rng) for _ in range(a.draws)]
                for tol in a.tols:
                    sub = []
                    for i, (f, exact) in enumerate(drawn):
                        rec = one(f, d, tol, a.budget, exact)
                        rec.update(family=fam, d=d, tol=tol, draw=i)
                        sub.append(rec)
                    rows.extend(sub)
                    ev = sum(r["evals"] for r in sub)
                    tot[tol] = tot.get(tol, 0) + ev
                    print(f"{fam:12s} d={d} tol={tol:.0e} held {sum(r['held'] for r in sub):2d}/{len(sub)} silent "
                          f"{sum(r['silent'] for r in sub)} conv {sum(r['status'] == 'converged' for r in sub):2d} "
                          f"evals {ev:9d}", flush=True)
        print("smooth evaluations per tolerance:", {f"{t:.0e}": v for t, v in tot.items()},
              "total", sum(tot.values()), "held", f"{100 * np.mean([r['held'] for r in rows]):.1f} %",
              "silent", sum(r["silent"] for r in rows))
    if a.singular:
        for name, d, f, exact in singular_cases(a.dims):
            for tol in (1e-4, 1e-6):
                rec = one(f, d, tol, a.budget, exact)
                rec.update(family=name, d=d, tol=tol)
                rows.append(rec)
                print(f"{name:20s} tol={tol:.0e} {rec['status']:13s} true {rec['true']:9.2e} reported "
                      f"{rec['error']:9.2e} ({rec['error'] / max(rec['true'], 1e-300):5.2f}x) evals "
                      f"{rec['evals']:8d}{'  SILENT WRONG' if rec['silent'] else ''}", flush=True)
    if a.json:
        Path(a.json).write_text(json.dumps(rows, indent=0))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
