"""Benchmark: parallel efficiency, and what the automatic mode costs a cheap problem.

Run ``python benchmarks/parallel.py`` (add ``--quick`` for a short run).  It
prints figures; it asserts nothing.

1. Efficiency: two costly 3-D integrands integrated with a fixed evaluation
   budget, in-process and with ``workers`` loky processes (and threads);
   efficiency = speedup / workers.  "bessel" is an expression, a 12-term sum
   of jv * cos (about 10-15 us a point), that travels to the workers as its
   source (``spec`` kind "expr"); "numpy-loop" is a Python function looping
   over 240 cos*exp terms (a few us a point, but some 1400 numpy calls per
   chunk, so it shows what the per-call overhead of chunking costs) that
   travels by import path (``spec`` kind "python", this very file), as from
   a problem file.  Measured with
   the pool already started (its start-up is printed apart).  Target: >= 85 %.
   Because wall-clock figures mean little on a machine that other jobs keep
   busy, a "machine check" (how much work N CPU-bound processes get done at
   once, vs one) is printed before and after, and an idle-machine projection
   from the CPU times of the same runs: the engine's own CPU stays serial,
   all other CPU of the parallel run (summed over every process, pickling and
   dispatch included) spreads evenly over the workers.
2. Auto overhead: a cheap expression integrand, in-process (no evaluator) vs
   ``make_evaluator(workers, "auto")``; best of several repeats, run
   alternately.  Target: <= 5 %.
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

TERMS = 240
BESSEL = " + ".join(f"jv({0.5 + k / 3:.4f}, 2 + {k}*x*x + y) * cos({k}*z)" for k in range(1, 13))


def costly(X):
    """A deliberately expensive elementwise integrand (numpy loop over terms)."""
    x, y, z = X[:, 0], X[:, 1], X[:, 2]
    acc = np.zeros(X.shape[0])
    for k in range(1, TERMS + 1):
        acc += np.cos(k * 0.05 * x + y) * np.exp(-(k / TERMS) * z * z)
    return acc


def _time_run(f, domain, evaluator, budget, rel_tol=1e-14):
    import cubage
    t0 = time.perf_counter()
    res = cubage.integrate(f, domain, rel_tol=rel_tol, budget=budget, evaluator=evaluator)
    return time.perf_counter() - t0, res


def _spin(seconds: float) -> float:
    """Pure-Python CPU work for ``seconds`` of wall time; returns the loop count done."""
    n, t_end = 0, time.perf_counter() + seconds
    while time.perf_counter() < t_end:
        for _ in range(1000):
            n += 1
    return n


def machine_check(workers: int) -> float:
    """How much CPU the machine gives ``workers`` processes at once right now (others may be busy)."""
    from joblib.externals.loky import get_reusable_executor
    one = _spin(0.5)
    ex = get_reusable_executor(max_workers=workers)
    list(ex.map(_spin, [0.05] * workers))
    many = sum(ex.map(_spin, [0.5] * workers))
    ex.shutdown(wait=True)
    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    print(f"machine check: {workers} CPU-bound processes at once did {many / one:.2f}x the work of one "
          f"(ideal {workers}); load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}")
    return many / one


def _cpu() -> float:
    """CPU seconds used so far by this process and its live children (psutil), else waited-for ones."""
    try:
        import psutil
    except ImportError:
        t = os.times()
        return t.user + t.system + t.children_user + t.children_system
    me = psutil.Process()
    c = me.cpu_times()
    total = c.user + c.system + c.children_user + c.children_system
    for ch in me.children(recursive=True):
        try:
            cc = ch.cpu_times()
            total += cc.user + cc.system
        except psutil.Error:
            pass
    return total


def efficiency(which: str, workers: int, budget: int, repeats: int) -> None:
    import cubage
    from cubage.engine.parallel import make_evaluator
    from cubage.problem.problem_file import integrand_from_spec

    here = Path(__file__).resolve()
    if which == "bessel":
        spec = {"kind": "expr", "source": BESSEL, "variables": ["x", "y", "z"], "constants": {}}
        words = "12-term jv*cos expression"
    else:
        spec = {"kind": "python", "target": f"{here.name}:costly", "base_dir": str(here.parent)}
        words = f"{TERMS}-term cos*exp numpy loop"
    f = integrand_from_spec(spec)
    domain = cubage.Box([-1.0, -1.0, -1.0], [1.0, 1.0, 1.0])

    X = np.asfortranarray(np.random.default_rng(1).uniform(-1, 1, (8192, 3)))
    f(X)
    t0 = time.process_time()
    f(X)
    per_point = (time.process_time() - t0) / X.shape[0]
    print(f"{which}: {words} in 3-D, {per_point * 1e6:.1f} us of CPU a point; "
          f"budget {budget} evaluations; best of {repeats}")

    in_f = [0.0]

    def timed(X):
        t = time.process_time()
        try:
            return f(X)
        finally:
            in_f[0] += time.process_time() - t

    best: dict[str, tuple] = {}
    for _ in range(repeats):
        in_f[0] = 0.0
        c0 = _cpu()
        t, res = _time_run(timed, domain, None, budget)
        cpu = _cpu() - c0
        if "serial" not in best or cpu < best["serial"][1]:
            best["serial"] = (t, cpu, res, in_f[0], "in-process")
        for backend in ("processes", "threads"):
            t_start = time.perf_counter()
            ev = make_evaluator(workers, backend, spec=spec)  # starts the pool (and warms it up)
            ev(f, np.asfortranarray(X[:4096]))  # 16 chunks: every worker loads the integrand
            startup = time.perf_counter() - t_start
            try:
                c0 = _cpu()
                t, res = _time_run(f, domain, ev, budget)
                cpu = _cpu() - c0
                words = ev.describe()
            finally:
                ev.close()
            if backend not in best or t < best[backend][0]:
                best[backend] = (t, cpu, res, startup, words)

    t_s, cpu_s, r_s, cpu_f, _ = best["serial"]
    engine = max(cpu_s - cpu_f, 0.0)
    print(f"  in-process            : {t_s:7.2f} s wall, {cpu_s:6.2f} s CPU ({100 * cpu_f / cpu_s:.1f} % of it inside "
          f"the integrand); {r_s.evaluations} evaluations, {r_s.steps} steps, value {r_s.value:.15g}")
    for backend in ("processes", "threads"):
        t_p, cpu_p, r_p, startup, words = best[backend]
        same = np.array_equal(r_p.values, r_s.values)
        speed = t_s / t_p
        # an idle machine: the engine's own CPU stays serial in this process, all other CPU
        # (integrand, pickling, dispatch, in every process) spreads evenly over the workers
        # an idle machine: the engine's own CPU stays serial in this process, all other CPU of the
        # parallel run (integrand, pickling, dispatch, in every process) spreads over the workers
        projected = engine + max(cpu_p - engine, 0.0) / workers
        print(f"  {words:<22}: {t_p:7.2f} s wall (pool start-up {startup:.2f} s more); measured speedup "
              f"{speed:4.2f} = efficiency {100 * speed / workers:5.1f} %; value identical: {same}")
        print(f"  {'':<22}  CPU {cpu_p:.2f} s summed over all processes vs {cpu_s:.2f} s in-process "
              f"({100 * (cpu_p / cpu_s - 1):+.1f} %) -> idle-machine projection "
              f"{100 * cpu_s / projected / workers:5.1f} %")


def auto_overhead(workers: int, repeats: int, budget: int) -> None:
    import cubage
    from cubage.engine.parallel import make_evaluator
    from cubage.problem.expr import compile_expression

    f = compile_expression("exp(-(x**2 + y**2 + z**2)) * cos(x*y*z)", ["x", "y", "z"])
    domain = cubage.Box([-2.0] * 3, [2.0] * 3)
    _time_run(f, domain, None, budget)  # warm caches
    serial, auto = [], []
    modes = set()
    for _ in range(repeats):
        t, r0 = _time_run(f, domain, None, budget)
        serial.append(t)
        ev = make_evaluator(workers, "auto")
        try:
            t0 = time.perf_counter()
            r1 = cubage.integrate(f, domain, rel_tol=1e-14, budget=budget, evaluator=ev)
            auto.append(time.perf_counter() - t0)
            modes.add(ev.mode)
            desc = ev.describe()
        finally:
            ev.close()
        assert np.array_equal(r0.values, r1.values)
    ts, ta = min(serial), min(auto)
    per_point = ts / r0.evaluations
    print(f"cheap integrand (expression, ~{per_point * 1e9:.0f} ns a point including the engine), "
          f"{r0.evaluations} evaluations, best of {repeats}:")
    print(f"  in-process {ts:.3f} s, auto {ta:.3f} s -> overhead {100 * (ta / ts - 1):+.1f} %  "
          f"(median {100 * (np.median(auto) / np.median(serial) - 1):+.1f} %); auto stayed {sorted(modes)}: {desc}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 1, help="workers (default: all cores)")
    ap.add_argument("--quick", action="store_true", help="smaller budgets, fewer repeats")
    args = ap.parse_args(argv)
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    import joblib
    print(f"cubage parallel benchmark, {datetime.datetime.now().isoformat(timespec='seconds')}, "
          f"{platform.node()}: {os.cpu_count()} cores, {args.workers} workers, python {platform.python_version()}, "
          f"numpy {np.__version__}, joblib {joblib.__version__}")
    machine_check(args.workers)
    efficiency("bessel", args.workers, 100_000 if args.quick else 300_000, 1 if args.quick else 2)
    efficiency("numpy-loop", args.workers, 200_000 if args.quick else 600_000, 1 if args.quick else 2)
    machine_check(args.workers)
    auto_overhead(args.workers, 3 if args.quick else 7, 500_000 if args.quick else 2_000_000)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
