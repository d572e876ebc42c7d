"""Pictures (PNG and SVG) of a scan's I(p) and of the benchmark's error-versus-evaluations chart.

matplotlib is an optional extra (``pip install 'cubage[plot]'``), the ecosystem's
usual plotting library; without it :func:`require` raises :class:`PicturesUnavailable`
whose text is the one line to show.  Figures are drawn with the non-interactive
Agg backend, so they work over SSH with no display.

* :func:`scan_figure`: one scanned constant -> the value with error bars against
  it, and below it the reported error (log scale, heuristic estimates); two
  constants -> heat maps of the value and of the reported error; more -> the
  value against the first constant, one line per combination of the others
  (at most :data:`MAX_LINES`).  Points that did not meet their goal are marked.
* :func:`bench_figure`: true relative error against evaluations, log-log, one
  marker shape per method (readable without colour).
"""

from __future__ import annotations

import math
import sys
from collections.abc import Sequence
from pathlib import Path

import numpy as np

EXTRA_HINT = "pictures need matplotlib, the optional extra 'plot': pip install 'cubage[plot]'"
MAX_LINES = 8
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*", "<", ">", "h", "p")


class PicturesUnavailable(RuntimeError):
    """matplotlib is not installed; ``str()`` is the one line to print."""


def require():
    """The pyplot module on the Agg backend, or :class:`PicturesUnavailable`."""
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise PicturesUnavailable(EXTRA_HINT) from None
    return plt


def _save(fig, stem: Path) -> list[Path]:
    stem = Path(stem)
    out = []
    for ext in (".png", ".svg"):
        p = stem.with_suffix(ext)
        fig.savefig(p, dpi=130 if ext == ".png" else None, bbox_inches="tight")
        out.append(p)
    return out


def _geometric(values) -> bool:
    """Whether sorted distinct values are evenly spaced in log (a ``log`` range): drawn on a log axis."""
    v = np.unique(np.asarray(values, dtype=float))
    if v.size < 3 or v[0] <= 0:
        return False
    r = np.diff(np.log(v))
    return bool(np.allclose(r, r[0], rtol=1e-6)) and not bool(np.allclose(np.diff(v), v[1] - v[0], rtol=1e-6))


def _first(v) -> float:
    a = np.atleast_1d(np.asarray(v, dtype=float))
    return float(a[0]) if a.size else math.nan


def scan_figure(names: Sequence[str], points: Sequence, stem, *, title: str = "") -> list[Path]:
    """Draw a scan; returns the paths written (``stem``.png and ``stem``.svg).

    Parameters
    ----------
    names : sequence of str
        The scanned constants.
    points : sequence of PointResult
        Finished points (any order; the first component of a vector integrand is drawn).
    stem : path
        Output path without suffix.
    """
    plt = require()
    names = list(names)
    pts = sorted(points, key=lambda p: tuple(p.constants[n] for n in names))
    val = np.array([_first(p.value) for p in pts])
    err = np.array([_first(p.error) for p in pts])
    ok = np.array([p.status == "converged" for p in pts], dtype=bool)
    cons = {n: np.array([p.constants[n] for p in pts]) for n in names}
    heading = title or "scan"
    if len(names) == 2:
        xs, ys = np.unique(cons[names[0]]), np.unique(cons[names[1]])
        grid_v = np.full((len(ys), len(xs)), np.nan)
        grid_e = np.full((len(ys), len(xs)), np.nan)
        ix, iy = np.searchsorted(xs, cons[names[0]]), np.searchsorted(ys, cons[names[1]])
        grid_v[iy, ix], grid_e[iy, ix] = val, err
        fig, axes = plt.subplots(1, 2, figsize=(11, 4.4))
        for ax, data, label, log in ((axes[0], grid_v, "value", False), (axes[1], grid_e, "reported error", True)):
            shown = np.log10(np.where(data > 0, data, np.nan)) if log else data
            im = ax.pcolormesh(xs, ys, shown, shading="nearest", cmap="viridis")
            fig.colorbar(im, ax=ax, label=("log10 " if log else "") + label)
            ax.set_xlabel(names[0])
            ax.set_ylabel(names[1])
            if _geometric(xs):
                ax.set_xscale("log")
            if _geometric(ys):
                ax.set_yscale("log")
            bad = ~ok
            if bad.any():
                ax.plot(cons[names[0]][bad], cons[names[1]][bad], "x", color="red", label="goal not met")
                ax.legend(loc="upper right", fontsize=8)
        axes[0].set_title(heading)
        axes[1].set_title("reported error (heuristic estimate)")
    else:
        fig, (ax, ax2) = plt.subplots(2, 1, figsize=(8, 6.4), sharex=True, gridspec_kw={"height_ratios": [3, 2]})
        x = cons[names[0]]
        groups: dict[tuple, np.ndarray] = {}
        rest = names[1:]
        keys = [tuple(p.constants[n] for n in rest) for p in pts]
        for k in dict.fromkeys(keys):
            groups[k] = np.array([kk == k for kk in keys])
        for j, (k, sel) in enumerate(list(groups.items())[:MAX_LINES]):
            lab = ", ".join(f"{n} = {v:g}" for n, v in zip(rest, k)) or None
            mk = _MARKERS[j % len(_MARKERS)]
            ax.errorbar(x[sel], val[sel], yerr=err[sel], fmt=mk + "-", ms=4, lw=1, capsize=2, label=lab)
            ax2.semilogy(x[sel], np.where(err[sel] > 0, err[sel], np.nan), mk + "-", ms=3, lw=1)
            bad = sel & ~ok
            if bad.any():
                ax.plot(x[bad], val[bad], "x", color="red", ms=9, label="goal not met" if j == 0 else None)
        if len(groups) > MAX_LINES:
            ax.text(0.01, 0.01, f"first {MAX_LINES} of {len(groups)} lines shown", transform=ax.transAxes,
                    fontsize=8)
        if rest or (~ok).any():
            ax.legend(fontsize=8)
        ax.set_ylabel("value")
        ax.set_title(heading + " (error bars: reported error)")
        ax.grid(alpha=0.3)
        if _geometric(x):
            ax2.set_xscale("log")
        ax2.set_xlabel(names[0])
        ax2.set_ylabel("reported error")
        ax2.grid(alpha=0.3, which="both")
    fig.tight_layout()
    try:
        return _save(fig, stem)
    finally:
        plt.close(fig)


def bench_figure(runs: Sequence[dict], stem, *, title: str = "") -> list[Path]:
    """True relative error against evaluations (log-log), one marker per method.

    ``runs`` are dicts with ``method``, ``evaluations``, ``true_error`` and
    ``scale`` (the exact value's size; 1 when missing), as ``cubage bench``
    writes to ``runs.csv``.
    """
    plt = require()
    fig, ax = plt.subplots(figsize=(8, 5.5))
    methods = list(dict.fromkeys(str(r["method"]) for r in runs))
    drawn = 0
    for j, m in enumerate(methods):
        xs, ys = [], []
        for r in runs:
            if str(r["method"]) != m:
                continue
            n, te = float(r.get("evaluations") or 0), float(r.get("true_error", math.nan))
            scale = float(r.get("scale") or r.get("exact") or 1.0)
            scale = abs(scale) if scale and math.isfinite(scale) else 1.0
            if n > 0 and math.isfinite(te):
                xs.append(n)
                ys.append(max(te / scale, 1e-17))
        if xs:
            ax.loglog(xs, ys, _MARKERS[j % len(_MARKERS)], ms=5, alpha=0.75, fillstyle="none", label=m)
            drawn += 1
    ax.set_xlabel("evaluations")
    ax.set_ylabel("true relative error")
    ax.set_title(title or "true relative error against evaluations")
    ax.grid(alpha=0.3, which="both")
    if drawn:
        ax.legend(fontsize=8)
    fig.tight_layout()
    try:
        return _save(fig, stem)
    finally:
        plt.close(fig)


def read_bench_runs(path) -> list[dict]:
    """The rows of a benchmark's ``runs.csv`` (numbers as floats where they parse)."""
    import csv
    out = []
    with open(path, newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            rec = {}
            for k, v in row.items():
                try:
                    rec[k] = float(v)
                except (TypeError, ValueError):
                    rec[k] = v
            out.append(rec)
    return out


def plot_command(args) -> int:
    """``cubage plot DIR``: pictures of a scan's run directory or of a benchmark's output folder."""
    from cubage.cli.commands import EXIT_FAILED, EXIT_OK, UsageError
    src = Path(args.source)
    if not src.is_dir():
        raise UsageError(f"{src}: not a folder; give a scan's run directory or a benchmark's output folder")
    try:
        require()
    except PicturesUnavailable as exc:
        print(f"cubage: {exc}", file=sys.stderr, flush=True)
        return EXIT_FAILED
    from cubage.session.scan import POINTS_FILE
    from cubage.session.scan_follower import read_scan_points
    if (src / POINTS_FILE).is_file():
        points = list(read_scan_points(src).values())
        if not points:
            raise UsageError(f"{src}: the scan has no finished point yet")
        names = list(points[0].constants)
        title = ""
        try:
            import json

            from cubage.session.run_directory import LEDGER
            title = json.loads((src / LEDGER).read_text(encoding="utf-8")).get("title") or ""
        except (OSError, ValueError, AttributeError):
            pass
        written = scan_figure(names, points, Path(args.out) if args.out else src / "scan", title=title)
    elif (src / "runs.csv").is_file():
        runs = read_bench_runs(src / "runs.csv")
        if not runs:
            raise UsageError(f"{src / 'runs.csv'}: no runs to draw")
        written = bench_figure(runs, Path(args.out) if args.out else src / "error-vs-evaluations")
    else:
        raise UsageError(f"{src}: neither a scan's run directory ({POINTS_FILE}) nor a benchmark's output "
                         "folder (runs.csv)")
    for p in written:
        print(f"wrote {p}", flush=True)
    return EXIT_OK
