"""``cubage bench``: run the engine's strategies (and optional peers) side by side.

A *suite* is a list of cases with known answers: the built-in ``genz`` suite
(Genz's six families, :mod:`cubage.bench.genz_families`, in several dimensions, random
parameters from a seed, exact values from closed forms) and/or problem files
that carry a ``[reference]`` value (``examples`` means every bundled one).
Every *strategy* — a combination of the engine's rule, split, queue, batch
and error-estimate settings with a short label — and every *peer* (SciPy's
integrators) integrates the same cases in the same run.  Per (case group,
tolerance, method) it reports the median evaluations and wall time, the
median true and reported errors, the *reliability* (share of runs whose true
error is within the reported one — the reported error is a heuristic
estimate, never a guaranteed bound) and the failures.

Output: a table in the terminal, ``results.md``, ``results.csv`` and
``runs.csv`` (one line per run) in ``--out``, and an error-versus-
evaluations chart in the terminal.
"""

from __future__ import annotations

import argparse
import csv
import math
import os
import platform
import re
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from cubage.bench import genz_families as genz

# ----------------------------------------------------------------------------------
# strategies and peers
# ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Strategy:
    """One way of running the engine, with a short label."""

    label: str
    rule: str | None
    options: dict
    description: str
    domains: tuple = ("box",)
    max_dim: int | None = None
    aligned: bool = False         # region boundaries on the case's features (issue 13)

    def applies(self, kind: str, d: int) -> bool:
        return kind in self.domains and (self.max_dim is None or d <= self.max_dim)


_GM = "genz-malik"
STRATEGIES = {s.label: s for s in (
    Strategy("gm", _GM, {}, "Genz-Malik, bisect, global queue, automatic batch, sharp estimate"),
    Strategy("gm/plain", _GM, {"estimate": "plain"}, "as gm but the plain |q7-q5| estimate"),
    Strategy("gm/all-axes", _GM, {"split": "all"}, "as gm but every region split along all axes at once"),
    Strategy("gm/local", _GM, {"queue": "local"}, "as gm but the local (recursive, per-region tolerance) queue"),
    Strategy("gm/one", _GM, {"batch": 1}, "as gm but strictly one region split per step"),
    Strategy("gm/b64", _GM, {"batch": 64}, "as gm but 64 regions split per step"),
    Strategy("gk", "gauss-kronrod", {}, "tensor Gauss-Kronrod 15/7, bisect, global, sharp (d <= 3)", max_dim=3),
    Strategy("gk/plain", "gauss-kronrod", {"estimate": "plain"}, "as gk but the plain estimate (d <= 3)",
             max_dim=3),
    Strategy("auto", None, {}, "the engine's default rule for the domain and dimension",
             domains=("box", "simplex")),
    Strategy("simplex", "grundmann-moller", {}, "Grundmann-Moller degree 7 (simplex problems only)",
             domains=("simplex",)),
    Strategy("aligned", None, {}, "as auto, with region boundaries on the case's features (break values, cuts, "
             "singular maps: a problem's declared and detected ones, the Genz c0/discontinuous thresholds)",
             domains=("box", "simplex"), aligned=True),
)}
DEFAULT_STRATEGIES = ("gm", "gm/plain", "gm/all-axes", "gm/local", "gk", "simplex")

#: points per estimate and number of estimates of the quasi-Monte Carlo peer
QMC_POINTS = 1 << 14
QMC_ESTIMATES = 8

PEERS = {
    "scipy-gm": "scipy.integrate.cubature, rule genz-malik (boxes)",
    "scipy-gk": "scipy.integrate.cubature, rule gk21 (boxes, d <= 4)",
    "nquad": "scipy.integrate.nquad, nested 1-D adaptive (boxes, d <= 3)",
    "qmc": f"scipy.integrate.qmc_quad, scrambled Sobol, {QMC_ESTIMATES} estimates x {QMC_POINTS} points "
           "(finite boxes); error = its standard error",
}
DEFAULT_PEERS = ()

QUICK = {"dims": [2, 3, 4], "draws": 3, "strategies": ["gm", "gm/plain"], "peers": ["scipy-gm"],
         "tols": [1e-6], "budget": 200_000}

WRONG_FACTOR = 10.0

#: Dimensions of the Genz suite.  The Genz-Malik rule needs d >= 2; beyond d = 12 its 2^d + 2d^2 + 2d + 1 nodes
#: per region (4,409 at d = 12, 1,049,417 at d = 20) leave a benchmark budget too few regions to measure anything
#: and a 50-D suite grows without bound in memory (issue 10 item 15i).
MIN_DIM, MAX_DIM = 2, 12


def gm_nodes(d: int) -> int:
    """Nodes of one Genz-Malik region in ``d`` dimensions (Genz & Malik 1980): 2^d + 2d^2 + 2d + 1."""
    return 2**d + 2 * d * d + 2 * d + 1


class BenchInputError(Exception):
    """Bad command-line input (one-line message, exit code 2)."""


class _Budget(Exception):
    pass


class Counter:
    """Wrap a vectorised integrand, counting points and enforcing a budget.

    Parameters
    ----------
    f : callable
        ``f(X)`` with ``X`` of shape (n, d).
    limit : int
        Raise an internal exception once more points than this were asked.
    """

    def __init__(self, f: Callable, limit: int):
        self.f = f
        self.limit = int(limit)
        self.count = 0

    def __call__(self, X):
        X = np.asarray(X, dtype=float)
        if X.ndim == 1:
            X = X[None, :]
        self.count += X.shape[0]
        if self.count > self.limit:
            raise _Budget()
        return self.f(X)


def peer_available(name: str) -> str | None:
    """None if the peer can run here, else the reason it cannot."""
    import scipy.integrate as si
    if name in ("scipy-gm", "scipy-gk") and not hasattr(si, "cubature"):
        return "scipy.integrate.cubature is not in the installed SciPy"
    if name == "qmc" and not hasattr(si, "qmc_quad"):
        return "scipy.integrate.qmc_quad is not in the installed SciPy"
    return None


def peer_applies(name: str, case: Case) -> bool:
    if case.kind != "box":
        return False
    if name == "nquad":
        return case.d <= 3
    if name == "scipy-gk":
        return case.d <= 4
    if name == "qmc":
        return bool(np.all(np.isfinite(case.lower)) and np.all(np.isfinite(case.upper)))
    return True


def run_peer(name: str, case: Case, tol: float, budget: int, seed: int) -> dict:
    """Integrate ``case`` with a SciPy peer; returns value, error, evaluations, status."""
    import scipy.integrate as si
    cnt = Counter(case.f, budget)
    t0 = time.perf_counter()
    status = "converged"
    try:
        if name in ("scipy-gm", "scipy-gk"):
            rule = "genz-malik" if name == "scipy-gm" else "gk21"
            r = si.cubature(cnt, case.lower, case.upper, rule=rule, rtol=tol, atol=0.0,
                            max_subdivisions=10 ** 9)
            value, error = np.atleast_1d(r.estimate), np.atleast_1d(r.error)
            if r.status != "converged":
                status = "not-converged"
        elif name == "nquad":
            def scalar(*x):
                return float(np.atleast_1d(cnt(np.array([x])))[0])
            opts = {"epsrel": tol, "epsabs": 0.0, "limit": 200}
            v, e = si.nquad(scalar, list(zip(case.lower, case.upper)), opts=[opts] * case.d)
            value, error = np.array([v]), np.array([e])
        elif name == "qmc":
            from scipy.stats import qmc
            eng = qmc.Sobol(case.d, scramble=True, seed=seed)
            r = si.qmc_quad(lambda x: cnt(np.asarray(x).T), case.lower, case.upper, n_estimates=QMC_ESTIMATES,
                            n_points=QMC_POINTS, qrng=eng)
            value, error = np.array([r.integral]), np.array([r.standard_error])
            if not error[0] <= max(tol * abs(value[0]), 0.0):
                status = "not-converged"
        else:
            raise BenchInputError(f"--peers: unknown peer {name!r}")
    except _Budget:
        value, error, status = np.array([np.nan]), np.array([np.inf]), "budget-spent"
    return {"value": value, "error": error, "evaluations": min(cnt.count, budget),
            "seconds": time.perf_counter() - t0, "status": status}


# ----------------------------------------------------------------------------------
# cases
# ----------------------------------------------------------------------------------


@dataclass
class Case:
    """One integral with a known answer."""

    group: str            # e.g. "gaussian" or a problem's name
    d: int
    f: Callable
    kind: str             # "box" or "simplex"
    domain: object
    lower: np.ndarray
    upper: np.ndarray
    exact: np.ndarray     # (m,)
    draw: int = 0
    source: str = ""
    rule: str | None = None
    extra: dict = field(default_factory=dict)


def genz_cases(families, dims, draws, seed, difficulty=1.0) -> list[Case]:
    """The built-in suite: ``draws`` random cases per family and dimension."""
    from cubage import Box
    out = []
    for fam in families:
        for d in dims:
            rng = np.random.default_rng([seed, genz.FAMILIES.index(fam), d])
            for k in range(draws):
                c = genz.draw(fam, d, rng, difficulty)
                out.append(Case(fam, d, c.f, "box", Box([0.0] * d, [1.0] * d), np.zeros(d), np.ones(d),
                                np.array([c.exact]), k, "closed form (Genz 1984)",
                                extra={"features": _genz_features(fam, c.params["u"])}))
    return out


def _genz_features(family: str, u) -> dict:
    """The thresholds a user of the family would declare: kinks of c0 at u, jumps of discontinuous at u_1, u_2."""
    u = [float(x) for x in u]
    if family == "c0":
        return {"breaks": [[x] for x in u]}
    if family == "discontinuous":
        return {"breaks": [[x] if i < 2 else [] for i, x in enumerate(u)]}
    return {}


def problem_cases(paths, notes: list[str]) -> list[Case]:
    """Cases from problem files with a ``[reference]``; the others are skipped with a note."""
    from cubage import Box
    from cubage.problem.problem_file import ProblemError, load_problem
    out = []
    for p in paths:
        try:
            prob = load_problem(p)
        except ProblemError as exc:
            notes.append(f"skipped {p}: {str(exc).splitlines()[0]}")
            continue
        if prob.reference is None:
            notes.append(f"skipped {Path(p).name}: no [reference] value")
            continue
        dom = prob.domain
        if isinstance(dom, Box):
            kind, lo, hi = "box", np.asarray(dom.lower, float), np.asarray(dom.upper, float)
        else:
            kind, lo, hi = "simplex", np.zeros(prob.dim), np.zeros(prob.dim)
        out.append(Case(Path(p).stem, prob.dim, prob.integrand, kind, dom, lo, hi,
                        np.atleast_1d(np.asarray(prob.reference.value, dtype=float)), 0,
                        prob.reference.source, prob.method.rule, extra={"features": dict(prob.features)}))
    return out


def resolve_suites(names, families, dims, draws, seed, notes) -> list[Case]:
    """Turn ``--suite`` words (``genz``, ``examples``, file paths) into cases."""
    cases: list[Case] = []
    for name in names:
        if name == "genz":
            cases += genz_cases(families, dims, draws, seed)
        elif name == "examples":
            from cubage.problem.problem_file import bundled_problem_dir, list_problems
            files = list_problems([bundled_problem_dir()])
            if not files:
                notes.append("no bundled example problems found")
            cases += problem_cases(files, notes)
        else:
            p = Path(name)
            if not p.is_file():
                raise BenchInputError(f"--suite: {name!r} is neither 'genz', 'examples' nor a problem file")
            cases += problem_cases([p], notes)
    return cases


# ----------------------------------------------------------------------------------
# pure metrics
# ----------------------------------------------------------------------------------


def true_error(value, exact) -> float:
    """Largest absolute deviation over the components (nan if the method gave no value)."""
    v = np.atleast_1d(np.asarray(value, float))
    e = np.atleast_1d(np.asarray(exact, float))
    if v.shape != e.shape or not np.all(np.isfinite(v)):
        return math.nan
    return float(np.max(np.abs(v - e)))


def goal_of(exact, tol: float) -> float:
    """The error goal of a run: ``tol`` relative to the smallest |component| of the answer."""
    e = np.abs(np.atleast_1d(np.asarray(exact, float)))
    return float(tol * e.min()) if e.size else 0.0


def reliability(true_errors, reported_errors) -> float:
    """Share of runs whose true error is <= the reported error.

    Runs without a value (true error nan, e.g. a peer stopped by the budget)
    do not count; nan if no run is left."""
    t = np.asarray(true_errors, float)
    r = np.asarray(reported_errors, float)
    keep = ~np.isnan(t)
    if not keep.any():
        return math.nan
    return float(np.mean(t[keep] <= r[keep]))


def median(values) -> float:
    """Median ignoring nan (nan if nothing is left)."""
    v = np.asarray(values, float)
    v = v[~np.isnan(v)]
    return float(np.median(v)) if v.size else math.nan


def classify(status: str, true_err: float, goal: float) -> str:
    """``"ok"``, ``"budget"`` (goal not reached: budget, time or region limit)
    or ``"wrong"`` (claims convergence but the true error exceeds
    ``WRONG_FACTOR`` times the goal); ``"failed"`` stays ``"failed"``."""
    if status in ("failed", "engine-error"):
        return "failed"
    if status != "converged":
        return "budget"
    if not true_err <= WRONG_FACTOR * goal:
        return "wrong"
    return "ok"


def ratios_to_best(values: dict) -> dict:
    """Each value divided by the smallest positive finite one (nan where undefined)."""
    good = [v for v in values.values() if v is not None and np.isfinite(v) and v > 0]
    best = min(good) if good else math.nan
    return {k: (v / best if (good and v is not None and np.isfinite(v)) else math.nan) for k, v in values.items()}


COLUMNS = ["group", "d", "tol", "method", "runs", "median_evals", "evals_vs_best", "median_seconds",
           "median_true_rel_err", "median_reported_rel_err", "reliability", "budget_failures",
           "wrong_answers", "errors"]


def aggregate(runs: list[dict]) -> list[dict]:
    """Group run records by (group, d, tol, method) and compute the table rows.

    Each run record has keys group, d, tol, method, evaluations, seconds,
    true_error, reported_error, scale (|exact|, for relative errors), outcome.
    """
    keys = []
    groups: dict[tuple, list[dict]] = {}
    for r in runs:
        k = (r["group"], r["d"], r["tol"], r["method"])
        if k not in groups:
            keys.append(k)
            groups[k] = []
        groups[k].append(r)
    rows = []
    for k in keys:
        rs = groups[k]
        scale = np.array([max(r["scale"], 1e-300) for r in rs])
        rows.append({
            "group": k[0], "d": k[1], "tol": k[2], "method": k[3], "runs": len(rs),
            "median_evals": median([r["evaluations"] for r in rs]),
            "median_seconds": median([r["seconds"] for r in rs]),
            "median_true_rel_err": median(np.array([r["true_error"] for r in rs]) / scale),
            "median_reported_rel_err": median(np.array([r["reported_error"] for r in rs]) / scale),
            "reliability": reliability([r["true_error"] for r in rs], [r["reported_error"] for r in rs]),
            "budget_failures": sum(r["outcome"] == "budget" for r in rs),
            "wrong_answers": sum(r["outcome"] == "wrong" for r in rs),
            "integrand_failures": sum(r["outcome"] == "failed" for r in rs),
            "errors": sum(r["outcome"] == "failed" for r in rs),
        })
    by_problem: dict[tuple, dict] = {}
    for row in rows:
        by_problem.setdefault((row["group"], row["d"], row["tol"]), {})[row["method"]] = row
    for ms in by_problem.values():
        # compare evaluations only among methods that reached the goal on every run
        vals = {m: (row["median_evals"] if row["budget_failures"] == 0 and row["integrand_failures"] == 0
                    else None) for m, row in ms.items()}
        for m, ratio in ratios_to_best(vals).items():
            ms[m]["evals_vs_best"] = ratio
    return rows


# ----------------------------------------------------------------------------------
# running
# ----------------------------------------------------------------------------------


def run_strategy(strategy: Strategy, case: Case, tol: float, budget: int) -> dict:
    """Integrate ``case`` with one engine strategy (bad integrands give status "failed")."""
    from cubage import IntegrandError, Run
    t0 = time.perf_counter()
    feats = case.extra.get("features", {}) if strategy.aligned else {}
    run = Run(case.f, case.domain, rule=strategy.rule, rel_tol=tol, abs_tol=0.0, budget=budget,
              fingerprint=f"bench:{case.group}:{case.d}:{case.draw}", **strategy.options, **feats)
    message = engine_error = ""
    status = None
    try:
        res = run.run()
    except IntegrandError as exc:
        res = run.result()
        message = str(exc)
    except Exception as exc:  # an engine defect must not end the whole suite: record it, say so
        res = run.result()
        engine_error = f"{type(exc).__name__}: {exc}"
        status = "engine-error"
    return {"value": res.values, "error": res.errors, "evaluations": res.evaluations,
            "seconds": time.perf_counter() - t0, "status": status or res.status, "message": message,
            "engine_error": engine_error}


def _fmt(v, kind="g") -> str:
    if isinstance(v, str):
        return v
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "-"
    if kind == "share":
        return f"{100 * v:.0f}%"
    if kind == "ratio":
        return f"{v:.2f}"
    if kind == "tol":
        return f"{v:.0e}"
    if kind == "int":
        return f"{v:.0f}"
    if kind == "s":
        return f"{v:.2g}"
    return f"{v:.1e}"


_KINDS = {"tol": "tol", "median_evals": "int", "evals_vs_best": "ratio", "median_seconds": "s",
          "median_true_rel_err": "e", "median_reported_rel_err": "e", "reliability": "share"}


SHORT = {"group": "case", "d": "d", "tol": "tol", "method": "method", "runs": "runs", "median_evals": "evals",
         "evals_vs_best": "x best", "median_seconds": "time s", "median_true_rel_err": "true err",
         "median_reported_rel_err": "rep. err", "reliability": "held", "budget_failures": "budget",
         "wrong_answers": "wrong", "errors": "errors"}


def format_row(row: dict) -> list[str]:
    return [_fmt(row[c], _KINDS.get(c, "g")) for c in COLUMNS]


#: Columns of the terminal tables (one table per case group and tolerance); the files keep all of :data:`COLUMNS`.
TERMINAL_COLUMNS = ["d", "method", "median_evals", "evals_vs_best", "median_seconds", "median_true_rel_err",
                    "median_reported_rel_err", "reliability", "misses"]


def misses_text(row: dict) -> str:
    """Wrong answers, budget failures and errors of one row in a few words ("-" when none)."""
    parts = [f"{row[k]} {word}" for k, word in (("wrong_answers", "wrong"), ("budget_failures", "budget"),
                                                 ("errors", "error")) if row.get(k)]
    return ", ".join(parts) or "-"


def terminal_tables(rows: list[dict]) -> list:
    """The results as rich tables that fit 80 columns: one per case group and tolerance, fewer columns.

    Issue 10 item 19: one wide table of 14 columns was cut to ellipses in every
    column at 80 columns.  The files (results.md, results.csv) keep every column.
    """
    from rich import box
    from rich.table import Table
    short = dict(SHORT, misses="misses", median_seconds="time s")
    out = []
    for group, tol in dict.fromkeys((r["group"], r["tol"]) for r in rows):
        mine = [r for r in rows if r["group"] == group and r["tol"] == tol]
        t = Table(box=box.SIMPLE_HEAD, padding=(0, 1, 0, 0), pad_edge=False, show_edge=False,
                  title=f"{group}, rel tol {tol:.0e}", title_justify="left", title_style="bold")
        for c in TERMINAL_COLUMNS:
            t.add_column(short.get(c, c), justify="left" if c in ("method", "misses") else "right",
                         no_wrap=c != "misses", min_width=8 if c == "misses" else None)
        for r in mine:
            bad = r["wrong_answers"] or (r["reliability"] < 1 and not math.isnan(r["reliability"]))
            cells = [misses_text(r) if c == "misses" else _fmt(r[c], _KINDS.get(c, "g")) for c in TERMINAL_COLUMNS]
            t.add_row(*cells, style="red" if bad else None)
        out.append(t)
    return out


def write_csv(path: Path, rows: list[dict], columns: list[str]) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(columns)
        for r in rows:
            w.writerow([r.get(c, "") for c in columns])


def write_markdown(path: Path, rows: list[dict], header: list[str]) -> None:
    lines = list(header) + ["", "| " + " | ".join(COLUMNS) + " |", "|" + "---|" * len(COLUMNS)]
    for r in rows:
        lines.append("| " + " | ".join(format_row(r)) + " |")
    path.write_text("\n".join(lines) + "\n")


#: One marker per series of the terminal chart, so that methods can be told apart without colour.
MARKERS = ("o", "x", "+", "*", "#", "@", "%", "=", "~", "^", "$", "&")


def chart(runs: list[dict], width: int = 100, height: int = 24) -> str:
    """Error versus evaluations (log-log) as text, one series per method with its own marker.

    The markers (:data:`MARKERS`) differ per series and are shown in the legend,
    so the chart reads the same without colour (issue 10 item 19).
    """
    import plotext as plt
    plt.clear_figure()
    plt.plotsize(width, height)
    plt.theme("clear")
    any_pts = False
    for k, m in enumerate(dict.fromkeys(r["method"] for r in runs)):
        pts = [(r["evaluations"], r["true_error"] / max(r["scale"], 1e-300)) for r in runs
               if r["method"] == m and r["evaluations"] > 0 and np.isfinite(r["true_error"])]
        if not pts:
            continue
        any_pts = True
        x = [math.log10(p[0]) for p in pts]
        y = [math.log10(max(p[1], 1e-17)) for p in pts]
        plt.scatter(x, y, label=m, marker=MARKERS[k % len(MARKERS)])
    if not any_pts:
        return "(no points to chart)"
    plt.title("true relative error vs evaluations (log10 both axes)")
    plt.xlabel("log10 evaluations")
    plt.ylabel("log10 rel. error")
    return plt.build()


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="cubage bench",
        description="Compare the engine's strategies (and optional SciPy peers) on cases with known answers. "
                    "Reported errors are heuristic estimates; the 'reliability' column measures how often "
                    "they held.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="strategies:\n" + "\n".join(f"  {k:12s} {s.description}" for k, s in STRATEGIES.items())
               + "\npeers:\n" + "\n".join(f"  {k:12s} {v}" for k, v in PEERS.items()))
    p.add_argument("--suite", nargs="+", default=None, metavar="NAME|FILE",
                   help="'genz' (built-in Genz families, the default), 'examples' (bundled problems with a "
                        "reference value) and/or problem files")
    p.add_argument("--families", nargs="+", default=None, metavar="FAMILY",
                   help=f"Genz families to include (default all: {', '.join(genz.FAMILIES)})")
    p.add_argument("--dims", nargs="+", type=int, default=None, metavar="D",
                   help=f"dimensions of the Genz suite, {MIN_DIM}..{MAX_DIM} (default 2 3 4 5 6)")
    p.add_argument("--tol", nargs="+", type=float, default=None, metavar="REL",
                   help="relative tolerance goal(s) (default 1e-6)")
    p.add_argument("--draws", type=int, default=None, metavar="N",
                   help="random parameter draws per Genz family and dimension (default 5)")
    p.add_argument("--repeats", type=int, default=1, metavar="N",
                   help="time each run N times and keep the fastest wall time (default 1)")
    p.add_argument("--strategies", nargs="+", default=None, metavar="LABEL",
                   help=f"engine strategies (default: {' '.join(DEFAULT_STRATEGIES)}); 'all' for every one")
    p.add_argument("--peers", nargs="*", default=None, metavar="PEER",
                   help="SciPy peers to run on the same cases (default none; 'all' for every available one)")
    p.add_argument("--budget", type=int, default=None, metavar="N",
                   help="evaluation budget per run (default 2000000)")
    p.add_argument("--seed", type=int, default=2024, help="seed of the random Genz parameters (default 2024)")
    p.add_argument("--out", default="bench-out", metavar="DIR",
                   help="folder for results.md, results.csv and runs.csv (default bench-out/)")
    p.add_argument("--quick", action="store_true",
                   help="a small suite (20-35 s on a shared 2-core machine, measured): d = 2..4, 3 draws, "
                        "strategies gm and gm/plain, peer scipy-gm, tol 1e-6, budget 200000 "
                        "(explicit options still win)")
    p.add_argument("--no-chart", action="store_true", help="skip the error-vs-evaluations chart")
    p.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")
    return p


class _Parser(argparse.ArgumentParser):
    """argparse with one-line usage errors (exit code 2)."""

    def error(self, message):
        self.exit(2, f"{self.prog}: {message} (see --help)\n")


def _settings(a) -> dict:
    q = QUICK if a.quick else {}
    s = {
        "suite": a.suite or ["genz"],
        "families": a.families or list(genz.FAMILIES),
        "dims": a.dims or q.get("dims", [2, 3, 4, 5, 6]),
        "tols": a.tol or q.get("tols", [1e-6]),
        "draws": a.draws if a.draws is not None else q.get("draws", 5),
        "strategies": a.strategies or q.get("strategies", list(DEFAULT_STRATEGIES)),
        "peers": a.peers if a.peers is not None else q.get("peers", list(DEFAULT_PEERS)),
        "budget": a.budget if a.budget is not None else q.get("budget", 2_000_000),
    }
    if s["strategies"] == ["all"]:
        s["strategies"] = list(STRATEGIES)
    if s["peers"] == ["all"]:
        s["peers"] = list(PEERS)
    for fam in s["families"]:
        if fam not in genz.FAMILIES:
            raise BenchInputError(f"--families: unknown family {fam!r} (families: {', '.join(genz.FAMILIES)})")
    for d in s["dims"]:
        if not MIN_DIM <= d <= MAX_DIM:
            raise BenchInputError(f"--dims: dimension must be {MIN_DIM}..{MAX_DIM}, got {d} (a Genz-Malik region "
                                  f"has 2^d + 2d^2 + 2d + 1 nodes, {gm_nodes(MAX_DIM):,} at d = {MAX_DIM})")
    for t in s["tols"]:
        if not (t > 0 and t < 1):
            raise BenchInputError(f"--tol: relative tolerance must be in (0, 1), got {t}")
    if s["draws"] < 1:
        raise BenchInputError(f"--draws: must be >= 1, got {s['draws']}")
    if a.repeats < 1:
        raise BenchInputError(f"--repeats: must be >= 1, got {a.repeats}")
    if s["budget"] < 1000:
        raise BenchInputError(f"--budget: must be >= 1000, got {s['budget']}")
    for st in s["strategies"]:
        if st not in STRATEGIES:
            raise BenchInputError(f"--strategies: unknown strategy {st!r} (known: {', '.join(STRATEGIES)})")
    for pe in s["peers"]:
        if pe not in PEERS:
            raise BenchInputError(f"--peers: unknown peer {pe!r} (known: {', '.join(PEERS)})")
    return s


def bench(settings: dict, out_dir: Path, repeats: int = 1, seed: int = 2024, show_chart: bool = True,
          progress: bool = True, console=None) -> tuple[list[dict], list[dict], list[str], int]:
    """Run the suite; write the files; return (rows, runs, notes, exit code)."""
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
    console = console or Console()
    notes: list[str] = []
    cases = resolve_suites(settings["suite"], settings["families"], settings["dims"], settings["draws"], seed,
                           notes)
    strategies = [STRATEGIES[s] for s in settings["strategies"]]
    peers = []
    for pe in settings["peers"]:
        why = peer_available(pe)
        if why:
            notes.append(f"peer {pe} skipped: {why}")
        else:
            peers.append(pe)
    jobs = []
    for case in cases:
        for tol in settings["tols"]:
            for st in strategies:
                if st.applies(case.kind, case.d):
                    jobs.append((case, tol, "strategy", st))
            for pe in peers:
                if peer_applies(pe, case):
                    jobs.append((case, tol, "peer", pe))
    runs: list[dict] = []
    failed = []
    engine_errors: dict[str, list[str]] = {}
    err_console = Console(stderr=True)
    prog = Progress(TextColumn("[bold]bench[/]"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                    TextColumn("{task.description}"), console=err_console, transient=True,
                    disable=not progress)
    with prog:
        task = prog.add_task("", total=len(jobs))
        for case, tol, what, m in jobs:
            label = m.label if what == "strategy" else m
            prog.update(task, description=f"{case.group} d={case.d} tol={tol:.0e} {label}")
            best = None
            for _ in range(repeats):
                r = (run_strategy(m, case, tol, settings["budget"]) if what == "strategy"
                     else run_peer(m, case, tol, settings["budget"], seed + case.draw))
                if best is None or r["seconds"] < best["seconds"]:
                    best = r
            r = best
            if r.get("message"):
                failed.append(f"{case.group} d={case.d} {label}: {r['message']}")
            if r.get("engine_error"):
                engine_errors.setdefault(label, []).append(f"{case.group} d={case.d} draw {case.draw}: "
                                                           f"{r['engine_error']}")
            terr = true_error(r["value"], case.exact)
            rep = float(np.max(r["error"])) if np.size(r["error"]) else math.inf
            rep = rep if np.isfinite(terr) else math.nan
            goal = goal_of(case.exact, tol)
            runs.append({"group": case.group, "d": case.d, "tol": tol, "method": label, "draw": case.draw,
                         "evaluations": int(r["evaluations"]), "seconds": r["seconds"], "status": r["status"],
                         "value": float(np.atleast_1d(r["value"])[0]), "exact": float(case.exact[0]),
                         "true_error": terr, "reported_error": rep, "goal": goal,
                         "scale": float(np.abs(case.exact).min()), "outcome": classify(r["status"], terr, goal)})
            prog.advance(task)
    rows = aggregate(runs)
    for label, errs in engine_errors.items():
        notes.append(f"{label}: the engine raised on {len(errs)} run(s), counted as failures "
                     f"(first: {errs[0]})")
    out_dir.mkdir(parents=True, exist_ok=True)
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    header = [f"# cubage bench results ({stamp})", "",
              f"Machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}; "
              f"suite {' '.join(settings['suite'])}, dims {settings['dims']}, draws {settings['draws']}, "
              f"seed {seed}, budget {settings['budget']} evaluations per run.", "",
              "Reported errors are heuristic estimates, not bounds; 'reliability' is the share of runs whose "
              "true error was within the reported error. 'evals_vs_best' compares methods that met the goal "
              f"on every run; 'wrong_answers' counts runs that claimed convergence with a true error above "
              f"{WRONG_FACTOR:g}x the goal; 'errors' counts runs that raised (integrand or engine)."]
    header += [f"- note: {n}" for n in notes]
    write_markdown(out_dir / "results.md", rows, header)
    write_csv(out_dir / "results.csv", rows, COLUMNS)
    write_csv(out_dir / "runs.csv", runs, ["group", "d", "tol", "method", "draw", "evaluations", "seconds",
                                           "status", "outcome", "value", "exact", "true_error",
                                           "reported_error", "goal"])
    console.print(f"[bold]cubage bench[/]: {len(runs)} runs; reported errors are heuristic estimates, not bounds")
    for table in terminal_tables(rows):
        console.print()
        console.print(table)
    console.print("evals, time and errors are medians; x best = evaluations over the fewest among the methods "
                  "that always met the goal; held = share of runs whose true error was within the reported one; "
                  "misses = runs that claimed convergence wrongly, ran out of budget, or raised. All columns: "
                  "results.md / results.csv.", style="dim", highlight=False)
    for n in notes:
        console.print(f"note: {n}")
    if show_chart and runs:
        text = chart(runs, width=max(40, min(console.width, 110)))
        if not console.is_terminal:
            text = re.sub(r"\x1b\[[0-9;]*m", "", text)
        console.file.write(text + "\n")
        console.file.flush()
    console.print(f"wrote {out_dir / 'results.md'}, {out_dir / 'results.csv'}, {out_dir / 'runs.csv'}")
    _bench_pictures(runs, out_dir, console)
    code = 0
    if failed:
        for m in failed:
            print(f"cubage bench: integrand failed: {m}", file=sys.stderr)
        code = 1
    return rows, runs, notes, code


def _bench_pictures(runs: list[dict], out_dir: Path, console) -> None:
    """error-vs-evaluations.png/.svg beside the tables when matplotlib (the extra 'plot') is installed."""
    from cubage.cli.pictures import PicturesUnavailable, bench_figure
    if not runs:
        return
    try:
        paths = bench_figure(runs, out_dir / "error-vs-evaluations")
    except PicturesUnavailable as exc:
        console.print(f"note: no pictures ({exc})")
        return
    console.print("wrote " + ", ".join(str(p) for p in paths))


def main(argv: list[str] | None = None) -> int:
    """Entry point of ``cubage bench``; returns the exit code."""
    parser = build_parser()
    try:
        a = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed a one-line usage error (code 2) or --help (0)
        return int(exc.code or 0)
    try:
        s = _settings(a)
        out = Path(a.out)
        if out.exists() and not out.is_dir():
            raise BenchInputError(f"--out: {a.out!r} exists and is not a folder")
        _, _, _, code = bench(s, out, repeats=a.repeats, seed=a.seed, show_chart=not a.no_chart,
                              progress=not a.no_progress)
        return code
    except BenchInputError as exc:
        print(f"cubage bench: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("cubage bench: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    raise SystemExit(main())
