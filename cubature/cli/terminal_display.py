"""What a headless run shows while it works and when it ends.

Three outputs, all our own layout:

* :class:`LivePanel` — a rich live display for a terminal, redrawn at most
  4 times a second: value ± error estimate per component, the goal,
  evaluations, regions, rate, elapsed time, an estimated time to the goal
  and, when the problem has a reference value, the true error;
* :class:`PlainTicker` — for logs (nohup, pipes): one compact line on
  stderr every few seconds and one at the end, e.g.::

      cubage| 12.0 s  n=3.20e+06  regions=4,711  I=2.5734234e+00 ~4.1e-07  goal 2.6e-08  1.4e+05/s  eta 31.0 s

* :func:`summary_lines` — the closing summary.

The error figures are the engine's heuristic estimates, not bounds; the
display says "estimate" and the summary spells the caution out.  Durations
use the one format of :func:`cubage.session.forecast.duration_text`; the time
to the goal is :func:`cubage.session.forecast.forecast`.  Nothing shown here
can end a run: a part that fails to format reads ``-`` (issue 10 item 1).
"""

from __future__ import annotations

import math
import sys
import textwrap
import time
from collections.abc import Sequence

import numpy as np

from cubage.session.forecast import duration_text as fmt_duration
from cubage.session.forecast import eta_text, forecast
from cubage.session.status import meaning
from cubage.session.trust import trust_of, trust_rows

__all__ = ["CAUTION", "PlainTicker", "LivePanel", "summary_lines", "verdict_lines", "fmt_duration", "fmt_count",
           "fmt_rate", "fmt_value", "fmt_err", "reference_array"]

CAUTION = "the error is the engine's estimate, not a guaranteed bound"


# --------------------------------------------------------------------------
# numbers
# --------------------------------------------------------------------------

def fmt_count(n: float) -> str:
    """An integer count with thousands separators, or a short form above 10^9."""
    n = float(n)
    if not math.isfinite(n):
        return "—"
    if abs(n) >= 1e9:
        return f"{n:.3e}"
    return f"{int(n):,}"


def fmt_rate(rate: float) -> str:
    """Evaluations per second in a short form."""
    if not math.isfinite(rate) or rate <= 0:
        return "—"
    for div, unit in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if rate >= div:
            return f"{rate / div:.2f} {unit}/s"
    return f"{rate:.0f} /s"


def fmt_value(v: float) -> str:
    return "nan" if not math.isfinite(v) else f"{v:.12e}"


def fmt_err(e: float) -> str:
    return "—" if not math.isfinite(e) else f"{e:.2e}"


def reference_array(reference, m: int) -> np.ndarray | None:
    """The problem's reference value as an (m,) array, or None."""
    if reference is None:
        return None
    v = np.atleast_1d(np.asarray(reference.value, dtype=float))
    return v if v.size == m else None


# --------------------------------------------------------------------------
# the plain ticker
# --------------------------------------------------------------------------

class PlainTicker:
    """Compact progress lines on a stream (stderr by default), every ``every`` seconds and at the end."""

    def __init__(self, reference=None, every: float = 5.0, stream=None, prefix: str = "cubage"):
        self.reference = reference
        self.every = every
        self.stream = stream if stream is not None else sys.stderr
        self.prefix = prefix
        self._last = time.monotonic()

    def line(self, snap) -> str:
        """One line for ``snap``; a part that cannot be formatted reads ``-``."""
        def part(fn):
            try:
                return fn()
            except Exception:  # noqa: BLE001 - display code must never raise
                return "-"
        parts = [f"{self.prefix}| {part(lambda: fmt_duration(snap.elapsed)):>8}",
                 part(lambda: f"n={snap.evaluations:.2e}"), part(lambda: f"regions={snap.regions:,}")]
        for i in range(snap.components):
            tag = "I" if snap.components == 1 else f"I{i}"
            parts.append(part(lambda i=i, tag=tag: f"{tag}={snap.value[i]:.9e} ~{fmt_err(snap.error[i])}"))
        parts.append(part(lambda: "goal " + ",".join(fmt_err(x) for x in np.atleast_1d(snap.goal))))
        parts.append(part(lambda: f"{snap.rate:.1e}/s" if snap.rate > 0 else "-/s"))
        parts.append("eta " + part(lambda: eta_text(forecast(snap.history, snap.goal, snap.rate, budget=snap.budget),
                                                    getattr(snap, "status", None))))
        ref = reference_array(self.reference, snap.components)
        if ref is not None:
            parts.append(part(lambda: "true-err " + ",".join(fmt_err(abs(a - b)) for a, b in zip(snap.value, ref))))
        if snap.status not in ("running",):
            parts.append(f"[{snap.status}]")
        return "  ".join(parts)

    def __call__(self, snap, final: bool = False) -> None:
        now = time.monotonic()
        if final or now - self._last >= self.every:
            self._last = now
            print(self.line(snap), file=self.stream, flush=True)


# --------------------------------------------------------------------------
# the live panel
# --------------------------------------------------------------------------

class LivePanel:
    """A rich live display of a running integration (use as a context manager).

    Parameters
    ----------
    title : str
        Problem title or name.
    reference : Reference or None
        The problem's reference value, to show the true error.
    console : rich.console.Console, optional
    """

    MAX_FPS = 4
    WIDTH = 84

    def __init__(self, title: str, reference=None, console=None, extra: str = ""):
        from rich.console import Console
        self.title = title
        self.reference = reference
        self.extra = extra
        self.console = console or Console()
        self._live = None
        self._last = -math.inf

    def __enter__(self):
        from rich.live import Live
        self._live = Live(console=self.console, auto_refresh=False, transient=True,
                          redirect_stdout=False, redirect_stderr=False)
        self._live.__enter__()
        return self

    def __exit__(self, *exc):
        if self._live is not None:
            self._live.__exit__(*exc)
            self._live = None
        return False

    def __call__(self, snap, final: bool = False) -> None:
        now = time.monotonic()
        if not final and now - self._last < 1.0 / self.MAX_FPS:
            return
        self._last = now
        if self._live is not None:
            try:
                view = self.render(snap)
            except Exception:  # noqa: BLE001 - a display failure must never end a run (issue 10 item 1)
                return
            self._live.update(view, refresh=True)

    def render(self, snap):
        """The renderable for one snapshot."""
        from rich import box
        from rich.panel import Panel
        from rich.table import Table
        from rich.text import Text

        m = snap.components
        ref = reference_array(self.reference, m)
        t = Table.grid(padding=(0, 2))
        t.add_column(style="bold cyan", justify="right")
        t.add_column()
        for i in range(m):
            label = "integral" if m == 1 else f"component {i}"
            row = Text(fmt_value(snap.value[i]), style="bold")
            row.append(f"  ± {fmt_err(snap.error[i])}", style="yellow")
            row.append("  (estimate)", style="dim")
            t.add_row(label, row)
            if ref is not None:
                diff = abs(snap.value[i] - ref[i])
                t.add_row("", Text(f"reference {ref[i]:.12e}   true error {fmt_err(diff)}", style="green"))
        goal = np.atleast_1d(snap.goal)
        ratio = float(np.max(snap.error / goal)) if np.all(goal > 0) and np.all(np.isfinite(goal)) else math.nan
        gtxt = Text(f"error ≤ {', '.join(fmt_err(g) for g in goal)}"
                    f"   (rel {snap.rel_tol:g}, abs {snap.abs_tol:g})")
        if math.isfinite(ratio):
            gtxt.append(f"   now {ratio:.3g}× the goal" if ratio > 1 else "   met", style="magenta")
        t.add_row("goal", gtxt)
        budget = f" of {fmt_count(snap.budget)}" if snap.budget else ""
        t.add_row("evaluations", f"{fmt_count(snap.evaluations)}{budget}   at {fmt_rate(snap.rate)}")
        t.add_row("regions", fmt_count(snap.regions))
        try:
            eta = eta_text(forecast(snap.history, snap.goal, snap.rate, budget=snap.budget),
                           getattr(snap, "status", None))
        except Exception:  # noqa: BLE001 - a forecast must never end a run
            eta = "-"
        t.add_row("elapsed", f"{fmt_duration(snap.elapsed)}   to goal ≈ {eta}")
        if self.extra:
            t.add_row("method", self.extra)
        return Panel(t, title=f"[bold]{self.title}[/]", subtitle=f"{snap.status} · Ctrl-C stops and keeps the estimate",
                     box=box.ROUNDED, width=min(self.WIDTH, self.console.width), border_style="blue")


# --------------------------------------------------------------------------
# the summary
# --------------------------------------------------------------------------

def _wrapped(label: str, text: str, width: int = 110) -> list[str]:
    """``label`` in the summary's label column, ``text`` wrapped under it."""
    return textwrap.wrap(f"{label:<11} {text}", width=width, subsequent_indent=" " * 12,
                         break_long_words=False, break_on_hyphens=False) or [label]


def verdict_lines(message, trust: dict | None, names: Sequence[str] = ()) -> list[str]:
    """The ``why`` (the engine's message, when it has one) and ``checks`` lines of a result, wrapped."""
    lines = _wrapped("why", str(message)) if message else []
    for label, text in trust_rows(trust, list(names)):
        lines.extend(_wrapped(label, text))
    return lines


def summary_lines(result, statuses: dict | None = None, reference=None, extra: Sequence[str] = (),
                  names: Sequence[str] = ()) -> list[str]:
    """Plain text lines summarising a finished (or stopped) run (``statuses``: meanings, default the session's).

    Besides value, status and work: the engine's message when it has one (why a run stopped short, what an
    audit could not do) and its trust checks (issue 12 item 5), with the bounds of the worst non-smooth
    regions in the variables ``names``."""
    vals = np.atleast_1d(result.values) if len(np.atleast_1d(result.values)) else np.atleast_1d(result.value)
    errs = np.atleast_1d(result.errors) if len(np.atleast_1d(result.errors)) else np.atleast_1d(result.error)
    m = vals.size
    ref = reference_array(reference, m)
    lines = []
    for i in range(m):
        label = "value" if m == 1 else f"value[{i}]"
        line = f"{label:<11} {fmt_value(vals[i])} ± {fmt_err(errs[i])}"
        if ref is not None:
            line += f"   (reference {ref[i]:.12e}, true error {fmt_err(abs(vals[i] - ref[i]))})"
        lines.append(line)
    said = statuses.get(result.status, "") if statuses else meaning(result.status)
    lines.append(f"{'status':<11} {result.status}: {said}")
    lines.extend(verdict_lines(getattr(result, "message", ""), trust_of(result), names))
    lines.append(f"{'work':<11} {fmt_count(result.evaluations)} evaluations, {fmt_count(result.regions)} "
                 f"region{'' if result.regions == 1 else 's'}, "
                 f"{fmt_duration(result.seconds)} (rule {result.rule})")
    if reference is not None:
        lines.append(f"{'reference':<11} {reference.source}")
    lines.extend(extra)
    lines.append(f"{'note':<11} {CAUTION}")
    if not any(str(x).startswith("second ") for x in extra):
        lines.append(f"{'':<11} (cross-check with other nodes: cubage run FILE --second-opinion)")
    return lines
