"""Smooth sign-changing integrands that are not one of Genz's closed forms: evaluations and honesty.

Genz's oscillatory family is a single plane wave ``cos(theta + a . x)``, which
the vertex probes' plane-wave model fits exactly; this set is sums of two
plane waves on the unit cube,

    f(x) = cos(a . x + u) + 0.5 cos(b . x + v),

with ``|a_i|, |b_i|`` uniform in [0.75, 13.5 / d], random signs, and ``u, v``
uniform in [0, 2 pi) (``numpy.random.default_rng(seed)``, seed 515 by
default: the set the README quotes; it was used to measure, not to tune).
Exact value by the product formula: ``int_[0,1]^d e^{i(a.x + u)} dx = e^{iu}
prod_j (e^{i a_j} - 1) / (i a_j)``, whose real part is the wave's integral.

Prints per run: dimension, draw, tolerance, evaluations, status, true and
reported relative error (SILENT where a run claims convergence with a true
error above twice its goal), then the evaluations per dimension and
tolerance.  Compare versions by running another with ``PYTHONPATH`` pointing
at its package.

Usage::

    python benchmarks/waves.py                 # d = 3..6, 5 draws, rel_tol 1e-4 and 1e-6
    python benchmarks/waves.py --dims 6 --tols 1e-4
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import cubage  # noqa: E402


def wave_integral(a: np.ndarray, u: float) -> float:
    """``int_[0,1]^d cos(a . x + u) dx`` by the product formula (real part of a product of 1-D integrals)."""
    z = np.exp(1j * u) * np.prod([(np.exp(1j * ai) - 1) / (1j * ai) for ai in a])
    return float(z.real)


def draws(dims, per_dim: int, seed: int):
    """The set: (d, draw, a, b, u, v), in the order the recorded figures used (dimension by dimension)."""
    rng = np.random.default_rng(seed)
    for d in range(3, 7):
        for k in range(per_dim):
            a = rng.uniform(0.5, 9.0 / d, d) * rng.choice([-1, 1], d) * 1.5
            b = rng.uniform(0.5, 9.0 / d, d) * rng.choice([-1, 1], d) * 1.5
            u, v = rng.uniform(0, 2 * np.pi, 2)
            if d in dims:
                yield d, k, a, b, u, v


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--dims", type=int, nargs="+", default=[3, 4, 5, 6], choices=[3, 4, 5, 6])
    p.add_argument("--draws", type=int, default=5, help="draws per dimension (default 5)")
    p.add_argument("--tols", type=float, nargs="+", default=[1e-4, 1e-6])
    p.add_argument("--seed", type=int, default=515)
    p.add_argument("--budget", type=int, default=2_000_000)
    a = p.parse_args(argv)
    total: dict = {}
    silent = 0
    for d, k, wa, wb, u, v in draws(set(a.dims), a.draws, a.seed):
        def f(X, wa=wa, wb=wb, u=u, v=v):
            return np.cos(X @ wa + u) + 0.5 * np.cos(X @ wb + v)
        exact = wave_integral(wa, u) + 0.5 * wave_integral(wb, v)
        for tol in a.tols:
            r = cubage.integrate(f, cubage.Box([0.0] * d, [1.0] * d), rel_tol=tol, budget=a.budget,
                                 raise_on_failure=False)
            true = abs(r.value - exact) / abs(exact)
            bad = r.status == "converged" and true > 2 * tol
            silent += bad
            total[(d, tol)] = total.get((d, tol), 0) + r.evaluations
            print(f"{d}-D draw {k} rel_tol {tol:.0e}: {r.evaluations:>10,d} {r.status:13s} "
                  f"true {true:.1e} reported {r.error / abs(exact):.1e}{'  SILENT' if bad else ''}", flush=True)
    print("evaluations: " + ", ".join(f"{d}-D {tol:.0e} {n:,}" for (d, tol), n in total.items()))
    print(f"silent wrong answers: {silent}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
