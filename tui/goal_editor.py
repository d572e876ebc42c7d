"""The goal editor: change tolerance, budget and time limit of a run in one small form.

Opened with ``e`` in the run view.  Its values replace the run's goal; a run
that ended because its goal was met or its budget or time ran out goes on
from its current partition when the new goal asks for more.
"""

from __future__ import annotations

import math

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Grid, Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Label, Static

from cubage.session.prepare import (
    InputError,
    check_budget,
    check_time_limit,
    check_tolerance,
    parse_number,
)
from cubage.session.prepare import parse_count as parse_count_text


def _field(text: str, name: str, parse, check):
    """``check(parse(text))`` with messages that name the field; blank gives None."""
    t = text.strip()
    if not t:
        return None
    try:
        return check(parse(t), name)
    except InputError:
        raise
    except ValueError as exc:
        raise InputError(f"{name}: {exc}") from None


def parse_tolerance(text: str, name: str) -> float | None:
    """A tolerance >= 0 from a field (blank: None); checked by the session layer."""
    return _field(text, name, lambda t: parse_number(t, "must be a number like 1e-8"), check_tolerance)


def parse_count(text: str, name: str = "budget") -> int | None:
    """An evaluation count from a field (``20_000_000``, ``2e7``; blank: None); checked by the session layer."""
    return _field(text, name, parse_count_text, check_budget)


def parse_goal(rel: str, abs_: str, budget: str, time_limit: str) -> dict:
    """The goal editor's fields as keyword arguments of ``RunDriver.set_goal`` (blank fields left out).

    Every value is checked by :mod:`cubage.session.prepare`, the one place
    where goals are validated.  The time limit is in seconds; ``none`` (or
    blank) keeps it as it is.

    Raises
    ------
    cubage.session.prepare.InputError
        A one-line message naming the field.
    """
    out: dict = {}
    r = parse_tolerance(rel, "rel tol")
    a = parse_tolerance(abs_, "abs tol")
    if r is not None:
        out["rel_tol"] = r
    if a is not None:
        out["abs_tol"] = a
    if out.get("rel_tol") == 0 and out.get("abs_tol") == 0:
        raise InputError("rel tol and abs tol cannot both be 0")
    b = parse_count(budget)
    if b is not None:
        out["budget"] = b
    if time_limit.strip().lower() not in ("none", "-"):
        t = _field(time_limit, "time limit", lambda t: parse_number(t, "must be a number of seconds"),
                   check_time_limit)
        if t is not None:
            out["time_limit"] = t
    return out


def _fmt_limit(t: float | None) -> str:
    if t is None or not math.isfinite(t):
        return "none"
    return f"{t:g}"


class GoalEditor(ModalScreen[dict | None]):
    """A small form with the run's goal; Enter applies, Escape leaves it unchanged.

    Parameters
    ----------
    rel_tol, abs_tol : float
    budget : int
    time_limit : float or None
        The current goal (shown in the fields).
    evaluations : int
        Evaluations spent so far (the budget must exceed them to go on).
    why : str
        A line above the form (for example why the run ended).
    """

    BINDINGS = [
        Binding("escape", "cancel", "Cancel"),
        Binding("enter", "apply", "Apply", priority=True),
    ]

    def __init__(self, rel_tol: float, abs_tol: float, budget: int, time_limit: float | None,
                 evaluations: int = 0, why: str = ""):
        super().__init__()
        self.current = (rel_tol, abs_tol, budget, time_limit)
        self.evaluations = evaluations
        self.why = why

    def compose(self) -> ComposeResult:
        rel, abs_, budget, tl = self.current
        with Vertical(id="goal-box") as box:
            box.border_title = "Goal"
            if self.why:
                yield Static(Text(self.why), id="goal-why")
            with Grid(id="goal-grid"):
                yield Label("rel tol")
                yield Input(f"{rel:g}", id="goal-rel")
                yield Label("abs tol")
                yield Input(f"{abs_:g}", id="goal-abs")
                yield Label("budget")
                yield Input(f"{budget:,}".replace(",", "_"), id="goal-budget")
                yield Label("time limit")
                yield Input(_fmt_limit(tl), id="goal-time")
            yield Static(Text(f"{self.evaluations:,} evaluations spent so far. Budget: a count (2e7 or "
                              "20_000_000); time limit: seconds (none: no limit).", style="dim"), id="goal-hint")
            yield Static(Text(""), id="goal-error")
            yield Static(Text.from_markup("[b]enter[/b] apply    [b]tab[/b] next field    [b]esc[/b] cancel"),
                         id="goal-keys")

    def on_mount(self) -> None:
        self.query_one("#goal-rel", Input).focus()

    def action_cancel(self) -> None:
        self.dismiss(None)

    def action_apply(self) -> None:
        vals = [self.query_one(f"#goal-{k}", Input).value for k in ("rel", "abs", "budget", "time")]
        try:
            goal = parse_goal(*vals)
            if goal.get("budget") is not None and goal["budget"] <= self.evaluations:
                raise ValueError(f"budget: {self.evaluations:,} evaluations are already spent; give more")
        except ValueError as exc:      # InputError included
            self.query_one("#goal-error", Static).update(Text(str(exc), style="bold #ff5f6d"))
            return
        self.dismiss(goal)
