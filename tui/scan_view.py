"""The scan view: I(p) filling in as points finish, the current point's convergence, the table of points.

Opened for a problem with a ``[scan]`` table (the scan runs here, in a
background thread) or by ``cubage watch DIR`` on a scan's run directory
(following its files through :class:`cubage.session.scan_follower.ScanFollower`).

Layout: the curve of the value against the first scanned constant, with the
reported errors as error bars (two scanned constants: a heat map of the
value, unfinished cells dark); beside it the current point's error estimate
against evaluations (log-log) with its goal; below, the table of finished
points.  Keys: ``h`` asks the scan to halt (current points are checkpointed;
``cubage resume DIR`` continues a run directory), ``b`` back, ``q`` quit.
"""

from __future__ import annotations

import json
import math
import threading
from pathlib import Path

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Header, Static
from textual_plotext import PlotextPlot

from cubage.problem.scan_table import ScanGrid
from cubage.session.run_directory import LEDGER, SOURCE
from cubage.session.scan import POINTS_FILE, PointResult
from cubage.session.scan_follower import ScanFollower

from .drawing import round_ticks
from .widgets.guard import guarded
from .widgets.readout import status_style

POLL_SECONDS = 0.5


# --------------------------------------------------------------------------
# sources: where the view's data comes from
# --------------------------------------------------------------------------

class ScanState:
    """What the view shows: finished points, the current points' progress, and whether it is over."""

    def __init__(self):
        self.points: dict[int, PointResult] = {}
        self.live: list[dict] = []
        self.over = False
        self.note = ""
        #: The scan's process is gone without a verdict (stopped, halted or killed): nothing more will come.
        self.gone = False


class ScanDirSource:
    """Follows a scan's run directory (read only, except the halt request on :meth:`halt`), through the session
    layer's :class:`~cubage.session.scan_follower.ScanFollower`."""

    def __init__(self, path):
        self.path = Path(path)
        self.follower = ScanFollower(self.path)

    def poll(self, state: ScanState) -> None:
        state.points = dict(self.follower.poll())
        state.over = self.follower.verdict is not None
        state.gone = not state.over and self.runner_alive() is False
        state.live = [] if state.over or state.gone else self.follower.live()
        state.note = f"continue with: cubage resume {self.path}" if state.gone else ""

    def runner_alive(self) -> bool | None:
        return self.follower.runner_alive()

    def halt(self) -> str:
        self.follower.halt()
        return f"asked the scan to stop; continue it with: cubage resume {self.path}"

    def close(self) -> None:
        return None


class ScanThreadSource:
    """Runs the scan of a problem in a background thread of this process.

    ``plan`` is the session's :class:`~cubage.session.prepare.PreparedScan` (settings, workers, the cluster the
    one rule of runs and scans allows); without one, the problem's own goal and method.
    """

    def __init__(self, problem, plan=None):
        from cubage.session.prepare import prepare_scan
        from cubage.session.scan import ExprSource
        self.problem = problem
        self.plan = plan if plan is not None else prepare_scan(problem)
        self.settings = self.plan.settings
        self.source = ExprSource.from_problem(problem)
        self.stop = threading.Event()
        self._lock = threading.Lock()
        self._points: dict[int, PointResult] = {}
        self._live: dict | None = None
        self._last_live = 0.0
        self._over = False
        self._error = ""
        self._thread = threading.Thread(target=self._work, name="cubage-scan", daemon=True)
        self._thread.start()

    def _on_point(self, pr, done, total) -> None:
        with self._lock:
            self._points[pr.index] = pr     # the newest progress stays shown until the next point's replaces it

    def _on_step(self, job, run, now) -> None:
        if now - self._last_live < POLL_SECONDS / 2:
            return
        self._last_live = now
        snap = run.snapshot(top=0, map_points=1)
        h = np.asarray(snap.history, dtype=float)
        m = snap.components
        rec = {"index": job.index, "constants": job.constants, "evaluations": int(snap.evaluations),
               "value": snap.value.tolist(), "error": snap.error.tolist(), "goal": snap.goal.tolist(),
               "history": [[r[0], r[2], r[2 + m]] for r in h[-400:]], "warm_from": job.warm_from}
        with self._lock:
            self._live = rec

    def _work(self) -> None:
        from cubage.session.prepare import open_cluster
        from cubage.session.scan import run_scan
        where = f"{self.problem.path if self.problem.path is not None else '<problem>'}: [method] cluster"
        try:
            with open_cluster(self.plan.cluster, where) as client:
                # chains stay in this process (worker processes started under the UI's terminal handling are
                # unreliable); a cluster the rules allow takes them
                run_scan(self.source, self.problem.domain, self.problem.scan, self.settings, cluster=client,
                         on_point=self._on_point, on_step=self._on_step if client is None else None,
                         stop_event=self.stop)
        except Exception as exc:  # noqa: BLE001 - shown in the view, never a crash of the UI
            self._error = f"the scan ended with an error: {type(exc).__name__}: {exc}"
        finally:
            self._over = True

    def poll(self, state: ScanState) -> None:
        with self._lock:
            state.points = dict(self._points)
            state.live = [self._live] if self._live is not None and not self._over else []
        state.over = self._over
        if self._error or state.over:
            state.note = self._error
        elif self.plan.cluster is not None:
            state.note = "chains run in the dask cluster; no per-point chart"
        elif self.plan.workers > 1:
            state.note = f"one process here (cubage run --workers {self.plan.workers} runs chains side by side)"
        else:
            state.note = ""

    def halt(self) -> str:
        self.stop.set()
        return "stopping after the current step"

    def close(self) -> None:
        self.stop.set()


# --------------------------------------------------------------------------
# widgets
# --------------------------------------------------------------------------

def _first(v) -> float:
    a = np.atleast_1d(np.asarray(v, dtype=float))
    return float(a[0]) if a.size else math.nan


class ScanCurve(PlotextPlot):
    """The value against the first scanned constant with error bars; a heat map for two constants."""

    def __init__(self, grid: ScanGrid, **kw):
        super().__init__(**kw)
        self.grid = grid
        self._empty = True
        self._heat: Text | None = None
        self._points: dict[int, PointResult] = {}

    @guarded("draw")
    def render(self):
        if self._empty:
            return Text("no finished point yet", style="dim")
        if len(self.grid.names) == 2:
            try:
                return heat_map(self.grid, self._points, max(20, self.size.width - 2), max(6, self.size.height - 1))
            except Exception as exc:  # noqa: BLE001 - a drawing hiccup must not end the UI
                return Text(f"(heat map unavailable: {type(exc).__name__})", style="dim")
        try:
            return super().render()
        except Exception as exc:  # noqa: BLE001 - a plotting hiccup must not end the UI
            return Text(f"(chart unavailable: {type(exc).__name__})", style="dim")

    @guarded("update")
    def show(self, points: dict[int, PointResult]) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        self._empty = not points
        if self._empty:
            self.refresh()
            return
        g = self.grid
        self._points = points
        if len(g.names) == 2:
            pass                                   # drawn by heat_map() in render()
        else:
            name = g.names[0]
            pts = sorted(points.values(), key=lambda p: p.constants[name])
            x = [p.constants[name] for p in pts]
            y = [_first(p.value) for p in pts]
            e = [_first(p.error) for p in pts]
            plt.error(x, y, yerr=e, color=(232, 197, 71))
            bad = [(xx, yy) for xx, yy, p in zip(x, y, pts) if p.status != "converged"]
            if bad:
                plt.scatter([b[0] for b in bad], [b[1] for b in bad], color="red", marker="x")
            finite = [(yy - ee, yy + ee) for yy, ee in zip(y, e) if math.isfinite(yy) and math.isfinite(ee)]
            if finite:
                plt.yticks(*round_ticks(min(f[0] for f in finite), max(f[1] for f in finite),
                                        max(2, self.size.height // 3)))
            fx = [xx for xx in x if math.isfinite(xx)]
            if fx:
                plt.xticks(*round_ticks(min(fx), max(fx), max(2, self.size.width // 12)))
            plt.xlabel(name)
            more = "" if len(g.names) == 1 else f" (all values of {', '.join(g.names[1:])})"
            plt.title(f"value ± reported error against {name}{more}")
        self.refresh()


#: Colours of the heat map, low to high (a perceptually ordered blue-green-yellow ramp).
HEAT = ("#3b0f70", "#3f3a8c", "#33638d", "#28808e", "#1f9e89", "#35b779", "#6ece58", "#b5de2b", "#fde725")


def heat_map(grid: ScanGrid, points: dict[int, PointResult], width: int, height: int) -> Text:
    """A 2-D scan as coloured cells: the first constant across, the second up; ``·`` where not finished yet,
    ``x`` where a point stopped short of its goal."""
    nx, ny = grid.shape
    vals = np.full((nx, ny), np.nan)
    short = np.zeros((nx, ny), bool)
    for k, p in points.items():
        i, j = np.unravel_index(k, grid.shape)
        vals[i, j] = _first(p.value)
        short[i, j] = p.status != "converged"
    fin = np.isfinite(vals)
    lo, hi = (float(np.nanmin(vals)), float(np.nanmax(vals))) if fin.any() else (0.0, 1.0)
    label = max(len(f"{v:.4g}") for v in grid.axes[1])
    cw = max(1, min(8, (width - label - 1) // max(nx, 1)))
    rows_avail = max(1, height - 3)
    ys = np.arange(ny)[::-1]
    if ny > rows_avail:                         # more rows than lines: show an even subset
        ys = np.unique(np.linspace(ny - 1, 0, rows_avail).round().astype(int))[::-1]
    xs = np.arange(nx)
    if nx * cw > width - label - 1:
        xs = np.unique(np.linspace(0, nx - 1, max(1, width - label - 1)).round().astype(int))
    out = Text()
    for j in ys:
        out.append(f"{grid.axes[1][j]:>{label}.4g} ", style="#8fa3bf")
        for i in xs:
            if not fin[i, j]:
                out.append("·".center(cw), style="#3b4a5e")
                continue
            t = 0.0 if hi == lo else (vals[i, j] - lo) / (hi - lo)
            colour = HEAT[min(len(HEAT) - 1, int(t * len(HEAT)))]
            out.append(("x" if short[i, j] else " ").center(cw), style=f"bold red on {colour}")
        out.append("\n")
    first, last = f"{grid.axes[0][xs[0]]:.4g}", f"{grid.axes[0][xs[-1]]:.4g}"
    span = len(xs) * cw
    out.append(" " * (label + 1) + first + " " * max(1, span - len(first) - len(last)) + last + "\n", style="#8fa3bf")
    out.append(" " * (label + 1) + f"{grid.names[0]} across, {grid.names[1]} up; value ", style="#8fa3bf")
    out.append(f"{lo:.4g} ", style="#8fa3bf")
    for c in HEAT:
        out.append(" ", style=f"on {c}")
    out.append(f" {hi:.4g}; {int(fin.sum())}/{grid.size} points", style="#8fa3bf")
    return out


class PointConvergence(PlotextPlot):
    """The current point's error estimate against evaluations (log10 both), with its goal."""

    def __init__(self, **kw):
        super().__init__(**kw)
        self._empty = True

    @guarded("draw")
    def render(self):
        if self._empty:
            return Text("no point running", style="dim")
        try:
            return super().render()
        except Exception as exc:  # noqa: BLE001
            return Text(f"(chart unavailable: {type(exc).__name__})", style="dim")

    @guarded("update")
    def show(self, live: list[dict]) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        rec = max(live, key=lambda r: r.get("updated", 0) or 0) if live else None
        hist = np.array([[np.nan if v is None else v for v in row] for row in (rec or {}).get("history", [])],
                        dtype=float).reshape(-1, 3)
        ok = (hist[:, 0] > 0) & (hist[:, 2] > 0) & np.isfinite(hist[:, 2]) if len(hist) else np.zeros(0, bool)
        self._empty = rec is None or not ok.any()
        if self._empty:
            self.refresh()
            return
        x, y = np.log10(hist[ok, 0]), np.log10(hist[ok, 2])
        plt.plot(x.tolist(), y.tolist(), color=(232, 197, 71), marker="braille")
        goal = (rec.get("goal") or [None])[0]
        if goal and goal > 0:
            lo, hi = float(x.min()), float(max(x.max(), x.min() + 0.3))
            plt.plot([lo, hi], [math.log10(goal)] * 2, color=(95, 211, 138), marker="braille")
        cons = ", ".join(f"{k} = {v:g}" for k, v in rec.get("constants", {}).items())
        plt.title(f"#{rec.get('index')} ({cons}): log10 error vs log10 evaluations")
        self.refresh()


# --------------------------------------------------------------------------
# the screen
# --------------------------------------------------------------------------

class ScanView(Screen):
    """Live view of a scan (run here or followed from a run directory)."""

    BINDINGS = [
        Binding("h", "halt", "Halt"),
        Binding("b", "back", "Back"),
        Binding("question_mark", "keys", "Keys"),
        Binding("f1", "keys", "Keys", show=False),
        Binding("q", "leave", "Quit"),
    ]

    #: What each key does, for the key-help screen.
    KEY_HELP = {
        "halt": "halt: finished points are kept; current points are checkpointed when the scan keeps a run "
                "directory",
        "back": "back to the problem list",
        "keys": "this help",
        "leave": "quit cubage",
    }

    DEFAULT_CSS = """
    ScanView #scan-top { height: 1fr; min-height: 12; }
    ScanView #scan-curve { width: 3fr; height: 1fr; }
    ScanView #scan-point { width: 2fr; height: 1fr; }
    ScanView #scan-status { height: 1; padding: 0 1; color: #8fa3bf; background: #1f2630;
                            text-wrap: nowrap; text-overflow: ellipsis; }
    ScanView #scan-table { height: 1fr; }
    """

    def __init__(self, title: str, grid: ScanGrid, source, *, can_go_back: bool = True):
        super().__init__()
        self.title_text = title
        self.grid = grid
        self.source = source
        self.can_go_back = can_go_back
        self.state = ScanState()
        self._rows: set[int] = set()
        self._seen = -1
        self._halted = ""

    def compose(self) -> ComposeResult:
        yield Header()
        with Horizontal(id="scan-top"):
            c = ScanCurve(self.grid, id="scan-curve", classes="panel")
            c.border_title = "I(p)"
            yield c
            p = PointConvergence(id="scan-point", classes="panel")
            p.border_title = "Current point · log-log"
            p.border_subtitle = "[#e8c547]━ estimate[/] [#5fd38a]━ goal[/]"
            yield p
        yield Static("", id="scan-status")
        t = DataTable(id="scan-table", classes="panel", zebra_stripes=True, cursor_type="row")
        t.border_title = "Points"
        yield t
        yield Footer()

    def on_mount(self) -> None:
        self.app.sub_title = f"scan: {self.title_text}"
        t = self.query_one("#scan-table", DataTable)
        t.add_columns("#", *self.grid.names, "value", "error", "evaluations", "status", "start")
        self._poll()
        self.set_interval(POLL_SECONDS, self._poll)

    def _poll(self) -> None:
        try:
            self.source.poll(self.state)
        except Exception as exc:  # noqa: BLE001 - a bad file must not end the UI
            self.state.note = f"cannot read the scan: {type(exc).__name__}: {exc}"
        st = self.state
        try:
            if len(st.points) != self._seen:
                self._seen = len(st.points)
                self.query_one("#scan-curve", ScanCurve).show(st.points)
                self._add_rows()
            self.query_one("#scan-point", PointConvergence).show(st.live)
            self.query_one("#scan-status", Static).update(Text(self._status_line()))    # paths are not markup
        except Exception:  # noqa: BLE001 - the screen may be tearing down
            return

    def _add_rows(self) -> None:
        t = self.query_one("#scan-table", DataTable)
        for k in sorted(set(self.state.points) - self._rows):
            p = self.state.points[k]
            self._rows.add(k)
            t.add_row(str(k), *(f"{p.constants[n]:.6g}" for n in self.grid.names), f"{_first(p.value):.12e}",
                      f"{_first(p.error):.2e}", f"{p.evaluations:,}", Text(p.status, style=status_style(p.status)),
                      "cold" if p.warm_from is None else f"from #{p.warm_from}", key=str(k))

    def _status_line(self) -> str:
        st = self.state
        n, total = len(st.points), self.grid.size
        width = 24
        k = int(round(width * n / total)) if total else width
        bar = "█" * k + "░" * (width - k)
        short = sum(p.status != "converged" for p in st.points.values())
        evals = sum(p.evaluations for p in st.points.values())
        self.refresh_bindings()
        word = "done" if st.over else ("stopped" if st.gone else ("halting" if self._halted else "running"))
        text = f"{bar} {n}/{total} points · {evals:,} evaluations · {word}"
        if short:
            text += f" · {short} short of the goal"
        if st.note:
            text += f" · {st.note}"
        elif self._halted and not st.gone:
            text += f" · {self._halted}"
        return text

    def check_action(self, action: str, parameters) -> bool | None:
        if action == "back":
            return self.can_go_back
        if action == "halt":
            return not (self.state.over or self.state.gone)
        return True

    def action_keys(self) -> None:
        from .key_help import KeyHelp
        self.app.push_screen(KeyHelp(self, "Keys: the scan", extra="Each point's error is a heuristic estimate, "
                                     "not a guaranteed bound."))

    def action_halt(self) -> None:
        if self.state.over:
            return
        self._halted = self.source.halt()

    def action_back(self) -> None:
        if self.can_go_back:
            self.source.close()
            self.app.pop_screen()

    def action_leave(self) -> None:
        self.source.close()
        self.app.exit(0)

    def on_unmount(self) -> None:
        self.source.close()


def is_scan_dir(path) -> bool:
    """Whether ``path`` holds a scan (its points file, or a ledger saying so)."""
    p = Path(path)
    if (p / POINTS_FILE).is_file():
        return True
    try:
        info = json.loads((p / LEDGER).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(info, dict) and info.get("command") == "scan"


def follow_view(path) -> ScanView:
    """The scan view following the run directory ``path`` (its problem copy gives the grid)."""
    from cubage.problem.problem_file import parse_problem
    p = Path(path)
    problem = parse_problem((p / SOURCE).read_text(encoding="utf-8"), path=p / SOURCE)
    if problem.scan is None:
        raise ValueError(f"{p}: the problem copy has no [scan] table")
    return ScanView(problem.title or p.name, problem.scan, ScanDirSource(p), can_go_back=False)


def watch_scan(path) -> int:
    """``cubage watch DIR`` on a scan: the app with this view alone; the exit code."""
    import sys

    from textual.app import App

    from cubage.problem.problem_file import ProblemError
    try:
        view = follow_view(path)
    except (OSError, UnicodeDecodeError, ValueError, ProblemError) as exc:
        print(f"cubage watch: {str(exc).splitlines()[0]}", file=sys.stderr)
        return 2

    class _ScanWatchApp(App):
        CSS_PATH = "app.tcss"
        TITLE = "cubage"
        ENABLE_COMMAND_PALETTE = False
        BINDINGS = [Binding("ctrl+q", "quit", "Quit", show=False)]

        def on_mount(self) -> None:
            self.push_screen(view)

    app = _ScanWatchApp()
    rc = app.run()
    return int(rc) if isinstance(rc, int) else int(app.return_code or 0)


def open_scan(app, problem, overrides: dict | None = None, *, can_go_back: bool = True) -> None:
    """Push the scan view running ``problem``'s scan here (the picker's hook): the picker's fields are checked
    and the scan prepared by the session layer, as ``cubage run`` does (:func:`cubage.session.prepare.prepare_scan`)."""
    from cubage.session.prepare import InputError, Overrides, prepare_scan

    from .run_view import FIELD_LABELS
    o = Overrides(**{k: v for k, v in (overrides or {}).items() if k in FIELD_LABELS}, labels=FIELD_LABELS)
    try:
        plan = prepare_scan(problem, o)
    except InputError as exc:
        app.notify(str(exc), title="Cannot start the scan", severity="error", markup=False)
        return
    for note in plan.notes:
        app.notify(note, title="Note", severity="warning", markup=False, timeout=10)
    app.push_screen(ScanView(problem.title or "scan", problem.scan, ScanThreadSource(problem, plan),
                             can_go_back=can_go_back))
