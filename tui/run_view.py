"""The run view: one integration, live (driven here) or followed (from a run directory)."""

from __future__ import annotations

import dataclasses
import functools
import time
from pathlib import Path

import numpy as np
from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.css.query import NoMatches
from textual.reactive import reactive
from textual.screen import Screen
from textual.widgets import Footer, Header, Static, TabbedContent, TabPane

from cubage import Snapshot
from cubage.session.driver import Outcome, RunDriver
from cubage.session.follower import RunFollower
from cubage.session.jsonio import write_json
from cubage.session.prepare import InputError, Overrides, PreparedRun, prepare_run
from cubage.session.result_record import result_record
from cubage.session.status import REOPENABLE, is_final
from cubage.session.trust import trust_details, trust_line, trust_of

from .confirm import AskModal
from .goal_editor import GoalEditor
from .key_help import KeyHelp
from .problem_facts import ProblemFacts
from .results import result_path
from .widgets.convergence import ConvergenceChart
from .widgets.density import RefinementMap
from .widgets.guard import PanelFailed
from .widgets.notes import NotesLog
from .widgets.queue import QueueTrend, WorstRegions
from .widgets.readout import Readout

#: Refresh period of the screen (seconds): at most ~4 redraws a second.
REFRESH = 0.25
#: Poll period of a followed run directory (seconds).
FOLLOW_POLL = 0.5
SLOW_RATE = 1e4
#: Seconds between the run's snapshots handed to the screen.
SNAPSHOT_EVERY = 0.2
#: How the picker's fields are named in messages.
FIELD_LABELS = {"rel_tol": "rel tol", "abs_tol": "abs tol", "budget": "budget", "workers": "workers",
                "time_limit": "time limit"}
PANELS = ("queue-tab", "map-tab", "notes-tab")


def _while_shown(method):
    """Run a UI update only while the screen's widgets exist.

    The engine thread and the timers may deliver an update while the app is
    quitting and the screen's widgets are being removed one by one; such a
    late update has nothing to show and is dropped.
    """
    @functools.wraps(method)
    def wrapper(self, *args, **kwargs):
        try:
            return method(self, *args, **kwargs)
        except NoMatches:
            return None
    return wrapper


class RunView(Screen):
    """Live view of one run.

    Parameters
    ----------
    meta : ProblemFacts
        Title, variable names, reference, axis kinds.
    problem : Problem, optional
        For a run driven here: the parsed problem (with its integrand).
    overrides : dict, optional
        ``rel_tol``, ``abs_tol``, ``workers``, ``budget`` chosen in the picker.
    follower : RunFollower, optional
        For a run followed from its run directory instead.
    can_go_back : bool
        Whether a problem list lies below this screen.
    """

    BINDINGS = [
        Binding("g", "go", "Go"),
        Binding("g", "hold", "Hold"),
        Binding("e", "goal", "Goal"),
        Binding("h", "halt", "Halt"),
        Binding("w", "write", "Save"),
        Binding("a", "axes", "Axes"),
        Binding("v", "panel", "Panel"),
        Binding("b", "back", "Back"),
        Binding("question_mark", "keys", "Keys"),
        Binding("f1", "keys", "Keys", show=False),
        Binding("q", "leave", "Quit"),
    ]

    #: What each key does, for the key-help screen (the footer shows the short names).
    KEY_HELP = {
        "go": "go: start the run, go on after a hold; after the run ended short (budget spent, time limit, "
              "halt) or converged, open the goal editor to raise the budget or change the tolerance and go on "
              "from the current partition",
        "hold": "hold the run after its current step (g goes on)",
        "goal": "goal editor: relative and absolute tolerance, budget, time limit; applies at once, "
                "also while running",
        "halt": "halt now: keep and save the current estimate (NOT converged); in cubage watch, ask the "
                "runner to stop",
        "write": "save the result as JSON",
        "axes": "next pair of axes on the refinement map",
        "panel": "next tab below: queue, map, notes",
        "back": "back to the problem list (asks first while a run is live)",
        "keys": "this help",
        "leave": "quit cubage (asks first while a run is live)",
    }

    #: What the run is doing: ready, running, paused, stopping, waiting or a final status word.
    state: reactive[str] = reactive("ready")

    def __init__(self, meta: ProblemFacts, problem=None, overrides: dict | None = None,
                 follower: RunFollower | None = None, can_go_back: bool = True):
        super().__init__()
        self.meta = meta
        self.problem = problem
        self.overrides = dict(overrides or {})
        self.follower = follower
        self.can_go_back = can_go_back
        self.run = None
        self.prepared: PreparedRun | None = None
        self.driver: RunDriver | None = None
        self.result_file: Path | None = None
        self._pending: Snapshot | None = None
        self._shown: Snapshot | None = None
        self._started = False
        self._engine_live = False
        self._warned: set[str] = set()
        self._last_message = ""
        self._final_reported = False
        self._stop_asked = False
        self._halting = False
        self._keys_for: tuple | None = None

    def watch_state(self, value: str) -> None:
        # also during on_mount (before is_mounted turns true): the first poll of a followed run sets the
        # state there, and a later poll with the same word would not fire this watcher again
        try:
            readout = self.query_one("#readout", Readout)
        except NoMatches:
            return
        readout.state = value
        self.refresh_bindings()

    # -- layout ----------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield Header()
        with Horizontal(id="top"):
            r = Readout(self.meta, id="readout", classes="panel")
            r.border_title = "Estimate"
            yield r
            c = ConvergenceChart(self.meta, id="chart", classes="panel")
            c.border_title = "Convergence · log-log"
            c.border_subtitle = ("[#e8c547]━ estimate[/] [#6cb6d9]━ true[/] [#5fd38a]━ goal[/]"
                                 if self.meta.reference is not None else "[#e8c547]━ estimate[/] [#5fd38a]━ goal[/]")
            yield c
        yield Static("", id="ticker")
        with TabbedContent(id="lower"):
            with TabPane("Queue", id="queue-tab"):
                with Horizontal(id="queue-pane"):
                    yield QueueTrend(id="trend")
                    yield WorstRegions(self.meta, id="worst")
            with TabPane("Map", id="map-tab"):
                yield RefinementMap(self.meta, id="map")
            with TabPane("Notes", id="notes-tab"):
                yield NotesLog(id="notes")
        yield Footer(compact=True)

    @property
    def notes(self) -> NotesLog:
        return self.query_one("#notes", NotesLog)

    def say(self, text: str, level: str = "info") -> None:
        """A line in the message pane, and in the ticker above the panels."""
        self.notes.say(text, level)
        t = self.query_one("#ticker", Static)
        # user text (paths, messages, expressions) is never markup (issue 10 item 18); one line, and a cut one
        # ends in an ellipsis (app.tcss; the whole line is in the notes tab)
        t.update(Text(" ".join(text.split())))
        t.set_class(level == "warn", "warn")
        t.set_class(level == "error", "error")

    def on_mount(self) -> None:
        self.app.sub_title = self.meta.title
        self._update_map_title()
        if self.follower is not None:
            self.state = "waiting"
            self.say(f"following {self.follower.dir} (reading {self.follower.trail_path.name} every "
                     f"{FOLLOW_POLL:g} s); h asks the runner to stop")
            self._poll_follower()
            self.set_interval(FOLLOW_POLL, self._poll_follower)
        else:
            self._make_run()
            self.set_interval(REFRESH, self._tick)

    def _update_map_title(self) -> None:
        m = self.query_one("#map", RefinementMap)
        i, j = m.axes()
        v = self.meta.variables
        name = (lambda k: v[k] if k < len(v) else f"x{k}")
        m.border_title = None
        label = f"{name(i)} × {name(j)}" if self.meta.dim >= 2 else name(i)
        self.query_one("#lower", TabbedContent).get_tab("map-tab").label = Text(f"Map {label}")

    # -- the engine, driven here -------------------------------------------------
    def _make_run(self) -> None:
        """Prepare the run through the session layer (every check of the goal and method there)."""
        o = Overrides(**{k: v for k, v in self.overrides.items() if k in FIELD_LABELS}, labels=FIELD_LABELS)
        try:
            self.prepared = prepare_run(self.problem, o, snapshot_interval=SNAPSHOT_EVERY, start_evaluator=True)
        except InputError as exc:
            self.state = "failed"
            self.say(f"cannot set up the run: {exc}", "error")
            return
        pr = self.prepared
        self.run = pr.run
        self.driver = RunDriver(self.run, on_snapshot=self._receive)
        for note in pr.notes:
            self.say(note, "warn")
        self._pending = self.run.snapshot()
        self._tick()
        s = self.run.settings
        self.say(f"ready, press g to go: rel_tol {s.rel_tol:g}, abs_tol {s.abs_tol:g}, budget {s.budget:,}, "
                 f"{pr.method_text}")

    @property
    def evaluator(self):
        """The run's evaluator (None: in-process)."""
        return self.prepared.evaluator if self.prepared is not None else None

    def _receive(self, snap: Snapshot) -> None:
        """The driver's display hook (engine thread): keep only the newest snapshot for the next redraw."""
        self._pending = snap

    def _derive_state(self) -> str:
        run = self.run
        if run is None:
            return self.state
        if not self._started:
            return "ready"
        if run.done:
            return run.status
        if self._halting:
            return "stopping"
        return "paused" if run.paused else "running"

    @work(thread=True, exclusive=True, group="engine")
    def _drive(self) -> None:
        """Worker thread: the session's driver steps the run and hands its snapshots to :meth:`_receive`."""
        try:
            out = self.driver.drive()
        except Exception as exc:  # noqa: BLE001 - report anything, never kill the UI
            out = Outcome(result=self.run.result(), snapshot=self.run.snapshot(),
                          failure=f"{type(exc).__name__}: {exc}")
        self._pending = out.snapshot
        try:
            self.app.call_from_thread(self._engine_done, out)
        except RuntimeError:  # the app is gone
            pass

    def _start_engine(self) -> None:
        self.query_one("#readout", Readout).trust = ""      # checks of an earlier ending no longer apply
        self._started = True
        self._engine_live = True
        self._drive()
        self.state = self._derive_state()
        self.refresh_bindings()

    @_while_shown
    def _engine_done(self, out: Outcome) -> None:
        self._engine_live = False
        self._tick()
        run = self.run
        st = run.status
        self.state = st
        if out.display_errors:
            self.say(f"{out.display_errors} snapshot(s) could not be shown ({out.display_error}); "
                     "the run went on", "warn")
        if out.failure is not None:
            self.say(f"integrand failure: {out.failure}", "error")
        elif st == "converged":
            self.say("converged: the error estimate met the goal (an estimate, not a bound)", "ok")
        else:
            self.say(f"finished with status {st}: NOT converged", "warn")
        self._show_trust(self.run.result())
        if st == "stopped":
            self._save("stopped early, current estimate kept")
        self.refresh_bindings()

    def _show_trust(self, result) -> None:
        """The engine's trust checks: a short line in the read-out, the details in the notes (issue 12)."""
        trust = trust_of(result)
        self.query_one("#readout", Readout).trust = trust_line(trust)
        if trust is None:
            return
        level = "ok" if trust_line(trust) == "audit ok · smooth" else "warn"
        for k, line in enumerate(trust_details(trust, self.meta.variables)):
            self.notes.say(line, level if k == 0 else "info")

    @_while_shown
    def _tick(self) -> None:
        snap = self._pending
        if snap is not None and snap is not self._shown:
            self._show(snap)
        if self.follower is None:
            self.state = self._derive_state()
        self._refresh_keys()

    def _refresh_keys(self) -> None:
        """Redraw the footer when what the keys can do has changed (g: go or hold, e, h)."""
        run = self.run
        key = (self.state, self._engine_live, run.paused if run is not None else None,
               self.follower.result is not None if self.follower is not None else None)
        if key != self._keys_for:
            self._keys_for = key
            self.refresh_bindings()

    # -- the run, followed from its directory ----------------------------------------
    @_while_shown
    def _poll_follower(self) -> None:
        f = self.follower
        try:
            n = f.poll()
        except OSError as exc:
            self.say(f"cannot read {f.trail_path}: {exc}", "error")
            return
        if f.last_error and f.last_error not in self._warned:
            self._warned.add(f.last_error)
            self.say(f.last_error, "warn")
        if n and f.snapshot is not None:
            self._show(f.snapshot)
        res = f.result
        if res is not None:
            if not self._final_reported:
                self._final_reported = True
                self._show_result(res)
            self.state = str(res.get("status", "stopped"))
        elif f.runner_gone:
            # the runner died without a verdict (killed, crashed, rebooted): say so and how to go on (item 16)
            self.state = "runner-gone"
            self.query_one("#readout", Readout).hint = f"continue: cubage resume {f.dir}"
            if "gone" not in self._warned:
                self._warned.add("gone")
                self.say(f.gone_message, "error")
        elif f.snapshot is not None:
            st = f.snapshot.status
            self.state = "stopping" if (self._stop_asked and not is_final(st)) else st
        self.refresh_bindings()

    def _show_result(self, res: dict) -> None:
        snap = self._shown
        val, err = res.get("value"), res.get("error")
        if snap is not None and val is not None:
            v = np.atleast_1d(np.asarray(val, dtype=float))
            e = np.atleast_1d(np.asarray(err, dtype=float))
            if v.shape == snap.value.shape:
                snap = dataclasses.replace(snap, value=v, error=e, status=str(res.get("status", snap.status)),
                                           evaluations=int(res.get("evaluations", snap.evaluations)),
                                           regions=int(res.get("regions", snap.regions)))
                self._show(snap)
        st = str(res.get("status"))
        vt = val if not isinstance(val, float) else f"{val:.14g}"
        et = err if not isinstance(err, float) else f"{err:.3e}"
        level = "ok" if st == "converged" else "warn"
        tail = "" if st == "converged" else " — NOT converged"
        self.say(f"verdict.json: status {st}, value {vt} ± {et} (estimate){tail}", level)
        self._show_trust(res)

    # -- showing a snapshot -----------------------------------------------------------
    def _show(self, snap: Snapshot) -> None:
        self._shown = snap
        for sel, cls in (("#readout", Readout), ("#chart", ConvergenceChart), ("#trend", QueueTrend),
                         ("#worst", WorstRegions), ("#map", RefinementMap)):
            self.query_one(sel, cls).snap = snap
        self._warn(snap)

    @_while_shown
    def on_panel_failed(self, msg: PanelFailed) -> None:
        """A panel failed to draw or update: say so in the notes; the run goes on (issue 10 item 2)."""
        msg.stop()
        self.say(f"the {msg.panel} panel failed to {msg.what} ({msg.error}, at {msg.where}); "
                 "the run goes on", "error")

    def _warn(self, snap: Snapshot) -> None:
        if snap.evaluations == 0:
            return
        if not np.all(np.isfinite(snap.value)) and "nonfinite" not in self._warned:
            self._warned.add("nonfinite")
            self.say("the estimate is not finite (NaN or inf)", "error")
        if snap.message and snap.message != self._last_message:
            self._last_message = snap.message
            self.say(snap.message, "error" if snap.status == "failed" else "warn")
        if snap.budget and snap.evaluations >= 0.9 * snap.budget and "budget" not in self._warned:
            self._warned.add("budget")
            self.say(f"budget nearly spent: {snap.evaluations:,} of {snap.budget:,} evaluations "
                     f"({snap.evaluations / snap.budget:.0%})", "warn")
        if (snap.elapsed > 1.0 and 0 < snap.rate < SLOW_RATE and not is_final(snap.status)
                and "slow" not in self._warned):
            self._warned.add("slow")
            self.say(f"slow integrand: {snap.rate:,.0f} evaluations/s (under {SLOW_RATE:,.0f}/s); "
                     "consider more workers", "warn")

    # -- keys ------------------------------------------------------------------------------
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        follow = self.follower is not None
        if action == "back":
            return self.can_go_back
        if action in ("go", "hold", "goal"):
            if follow:
                return False
            if self.run is None or self.state == "failed":
                return None if action != "hold" else False
            live = self._engine_live
            if action == "hold":
                return live and not self.run.paused
            if action == "go":
                return (not live) or self.run.paused
            return True
        if action == "halt":
            if follow:
                done = self.follower.result is not None or self._stop_asked or self.state == "runner-gone"
                return None if done else True
            return True if self._engine_live else None
        return True

    def action_keys(self) -> None:
        extra = ("Error estimates are heuristic, not guaranteed bounds: a run says converged when its estimate "
                 "meets the goal. The forecast of the time to the goal extrapolates the recent error curve.")
        self.app.push_screen(KeyHelp(self, "Keys: following a run" if self.follower is not None
                                     else "Keys: the run", extra=extra))

    def action_go(self) -> None:
        run = self.run
        if run is None or self.follower is not None:
            return
        if not self._started:
            self.say("running (engine in a worker thread)")
            self._start_engine()
        elif self._engine_live:
            if run.paused:
                self.driver.resume()
                self.say("going on")
                self.state = self._derive_state()
        elif run.status in REOPENABLE:
            self._open_goal_editor(self._why_ended(run.status))
        self.refresh_bindings()

    def _why_ended(self, st: str) -> str:
        s = self.run.settings
        if st == "budget-spent":
            return (f"The budget of {s.budget:,} evaluations is spent. Raise it (or loosen the tolerance) "
                    "to go on from the current partition.")
        if st == "time-limit":
            return f"The time limit of {s.time_limit:g} s is reached. Raise it to go on from the current partition."
        if st == "stopped":
            return "The run was halted. Change the goal (or keep it) and apply to go on from the current partition."
        return "The goal is met. Tighten the tolerance to go on from the current partition."

    def action_hold(self) -> None:
        run = self.run
        if run is None or not self._engine_live or run.paused:
            return
        self.driver.pause()
        self.say("on hold after the current step (g goes on)")
        self.state = self._derive_state()
        self.refresh_bindings()

    def action_halt(self) -> None:
        if self.follower is not None:
            if self.follower.result is not None:
                return
            p = self.follower.request_stop()
            self._stop_asked = True
            self.say(f"asked the runner to stop: wrote {p}; it will checkpoint and write verdict.json", "warn")
            self.state = "stopping"
            self.refresh_bindings()
            return
        if self.run is None or not self._engine_live:
            return
        self._halting = True
        self.driver.stop("h key")
        self.say("stopping now: the current estimate is kept (NOT converged) and will be written", "warn")
        self.state = self._derive_state()

    def action_goal(self) -> None:
        if self.run is None or self.follower is not None:
            return
        why = self._why_ended(self.run.status) if (self._started and not self._engine_live
                                                    and self.run.status in REOPENABLE) else ""
        self._open_goal_editor(why)

    def _open_goal_editor(self, why: str) -> None:
        run = self.run
        s = run.settings
        budget = s.budget
        if run.status == "budget-spent":
            budget = max(2 * s.budget, s.budget + 1)          # a proposal; the field can be edited
        self.app.push_screen(GoalEditor(s.rel_tol, s.abs_tol, budget, s.time_limit, run.evaluations, why),
                             self._apply_goal)

    def _apply_goal(self, goal: dict | None) -> None:
        """Apply the goal editor's values; a run that had ended short or converged goes on when it can."""
        run = self.run
        if goal is None or run is None:
            return
        try:
            if goal:
                self.driver.set_goal(**goal)       # checked by the session layer
        except InputError as exc:
            self.say(f"cannot change the goal: {exc}", "error")
            return
        s = run.settings
        lim = f", time limit {s.time_limit:g} s" if s.time_limit is not None else ""
        self.say(f"goal: rel_tol {s.rel_tol:g}, abs_tol {s.abs_tol:g}, budget {s.budget:,}{lim}")
        if self._started and not self._engine_live:
            if not run.done:
                self._halting = False
                self.say(f"going on from the current partition ({run.evaluations:,} evaluations, "
                         f"{run.store.n if run.store is not None else 0:,} regions)")
                self._start_engine()
            else:
                self.say(f"the run stays {run.status}: the new goal does not ask for more", "warn")
        self._pending = run.snapshot()
        self._tick()
        self.refresh_bindings()

    def _save(self, why: str = "") -> Path | None:
        """Write the result record (the session layer's one schema) as JSON; returns its path."""
        if self.follower is not None:
            f = self.follower
            res = f.result if f.result is not None else f.snapshot
            if res is None:
                self.say("nothing to write yet", "warn")
                return None
            rec = result_record(res, problem=self.meta, written_by="cubage watch (tui)", settings=f.settings(),
                                run_dir=f.dir)
            # the run directory belongs to its runner: write beside us instead
            path = Path.cwd() / f"{f.dir.resolve().name}.result.json"
        else:
            if self.run is None:
                return None
            rec = result_record(self.run.result(), problem=self.problem, written_by="cubage tui",
                                settings=self.prepared.settings_record())
            path = result_path(self.meta)
        try:
            write_json(path, rec)
        except OSError as exc:
            self.say(f"cannot write {path}: {exc}", "error")
            return None
        self.result_file = path
        st = rec.get("status")
        label = "" if st == "converged" else " (NOT converged)"
        self.say(f"result written to {path}: status {st}{label}" + (f"; {why}" if why else ""), "ok")
        return path

    def action_write(self) -> None:
        self._save()

    def action_axes(self) -> None:
        m = self.query_one("#map", RefinementMap)
        i, j = m.next_pair()
        self._update_map_title()
        self.query_one("#lower", TabbedContent).active = "map-tab"
        v = self.meta.variables
        self.say(f"map axes: {v[i] if i < len(v) else i} × {v[j] if j < len(v) else j}")

    def action_panel(self) -> None:
        tc = self.query_one("#lower", TabbedContent)
        k = PANELS.index(tc.active) if tc.active in PANELS else -1
        tc.active = PANELS[(k + 1) % len(PANELS)]

    @property
    def live(self) -> bool:
        """True while the engine thread of a run driven here is working."""
        return self._engine_live

    def _after_confirm(self, then) -> None:
        if self.live:
            def answer(yes: bool | None) -> None:
                if yes:
                    self.driver.stop("left the run view")
                    then()
            self.app.push_screen(AskModal("A run is still going. Stop it (its estimate is dropped "
                                          "unless you wrote it with w) and leave?"), answer)
        else:
            then()

    def action_back(self) -> None:
        if not self.can_go_back:
            return
        self._after_confirm(lambda: self.app.pop_screen())

    def action_leave(self) -> None:
        self._after_confirm(lambda: self.app.exit(0))

    def end_for_signal(self, name: str) -> None:
        """The UI ends on ``name`` (SIGHUP, SIGTERM): a live run stops and its current estimate is written."""
        if self.driver is None or not self._started:
            return
        live = self._engine_live
        self.driver.stop(name)
        end = time.monotonic() + 5.0          # the current step finishes, then the run is "stopped"
        while live and not self.run.done and time.monotonic() < end:
            time.sleep(0.02)
        if live or self.run.status == "stopped":
            self._save(f"the UI ended on {name}; current estimate kept")

    def on_unmount(self) -> None:
        if self.driver is not None:
            self.driver.stop("left the run view")
        if self.prepared is not None:
            self.prepared.close()
