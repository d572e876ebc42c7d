"""The goal editor: change tolerance, budget and time limit of a run in one small form.

Opened with ``e`` in the run view.  Its values replace the run's goal; a run
that ended because its goal was met or its budget or time ran out goes on
from its current partition when the new goal asks for more.
"""

from __future__ import annotations

import math
import re

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Grid, Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Label, Static

_SUFFIX = {"k": 1e3, "m": 1e6, "g": 1e9}
_DURATION = {"s": 1.0, "min": 60.0, "h": 3600.0, "d": 86400.0}


def parse_count(text: str, name: str = "budget") -> int | None:
    """An evaluation count: ``20000000``, ``20_000_000``, ``2e7``, ``20M``, ``500k`` (blank: None).

    Raises
    ------
    ValueError
        With a one-line message naming ``name``.
    """
    t = text.strip().replace("_", "").replace(",", "")
    if not t:
        return None
    mult = 1.0
    if t[-1].lower() in _SUFFIX:
        mult, t = _SUFFIX[t[-1].lower()], t[:-1]
    try:
        v = float(t) * mult
    except ValueError:
        raise ValueError(f"{name}: {text.strip()!r} is not a count (e.g. 20000000, 2e7 or 20M)") from None
    if not math.isfinite(v) or v < 1 or v > 1e18:
        raise ValueError(f"{name}: must be a count from 1 to 1e18, got {text.strip()}")
    return int(round(v))


def parse_duration(text: str, name: str = "time limit") -> float | None:
    """Seconds from ``90``, ``90s``, ``15min``, ``2h``, ``1.5d`` (blank or ``none``: None).

    Raises
    ------
    ValueError
        With a one-line message naming ``name``.
    """
    t = text.strip().lower().replace(" ", "")
    if not t or t in ("none", "-"):
        return None
    m = re.fullmatch(r"([0-9]*\.?[0-9]+(?:e[+-]?[0-9]+)?)(s|min|h|d)?", t)
    if m is None:
        raise ValueError(f"{name}: {text.strip()!r} is not a duration (e.g. 90, 15min, 2h)")
    v = float(m.group(1)) * _DURATION[m.group(2) or "s"]
    if not (v > 0 and math.isfinite(v)):
        raise ValueError(f"{name}: must be positive, got {text.strip()}")
    return v


def parse_tolerance(text: str, name: str) -> float | None:
    """A tolerance >= 0 (blank: None)."""
    t = text.strip()
    if not t:
        return None
    try:
        v = float(t)
    except ValueError:
        raise ValueError(f"{name}: {t!r} is not a number") from None
    if not (v >= 0) or math.isinf(v):
        raise ValueError(f"{name}: must be a finite number >= 0, got {t}")
    return v


def parse_goal(rel: str, abs_: str, budget: str, time_limit: str) -> dict:
    """The goal editor's fields as keyword arguments of ``Run.set_goal`` (blank fields left out).

    A blank time limit means "keep"; ``none`` removes it (given as ``inf``).
    """
    out: dict = {}
    r = parse_tolerance(rel, "rel tol")
    a = parse_tolerance(abs_, "abs tol")
    if r is not None:
        out["rel_tol"] = r
    if a is not None:
        out["abs_tol"] = a
    if out.get("rel_tol") == 0 and out.get("abs_tol") == 0:
        raise ValueError("rel tol and abs tol cannot both be 0")
    b = parse_count(budget)
    if b is not None:
        out["budget"] = b
    if time_limit.strip().lower() in ("none", "-"):
        out["time_limit"] = math.inf
    else:
        t = parse_duration(time_limit)
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
            yield Static(Text(f"{self.evaluations:,} evaluations spent so far. Budget: a count (2e7, 20M); "
                              "time limit: 90, 15min, 2h or none.", style="dim"), id="goal-hint")
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
        except ValueError as exc:
            self.query_one("#goal-error", Static).update(Text(str(exc), style="bold #ff5f6d"))
            return
        self.dismiss(goal)
