"""The numbers panel: value ± error estimate, counts, rate, times, status."""

from __future__ import annotations

import math

import numpy as np
from rich.text import Text
from textual.reactive import reactive
from textual.widgets import Static

from cubage import Snapshot
from cubage.session.forecast import duration_text, forecast
from cubage.session.status import is_final, meaning, tone

from ..drawing import fmt_count
from ..problem_facts import ProblemFacts
from .guard import guarded

#: Colour of each tone of status word (our own palette); the words and their tones live in the session layer.
TONE_STYLE = {
    "met": "bold #5fd38a", "fault": "bold #ff5f6d", "short": "bold #f08a5d", "active": "bold #e8c547",
    "held": "bold #6cb6d9", "idle": "bold #8fa3bf",
}


def status_style(word: str) -> str:
    """The style of a status word, from its tone (:func:`cubage.session.status.tone`); plain bold if unknown."""
    return TONE_STYLE.get(tone(word), "bold")


ESTIMATE_NOTE = "± is an error estimate, not a bound"


def value_text(v: float) -> str:
    return "nan" if not math.isfinite(v) else f"{v:.14g}"


class Readout(Static):
    """Renders one :class:`Snapshot` as the run's numbers.

    Attributes
    ----------
    snap : Snapshot or None
        The newest snapshot (reactive).
    state : str
        The status word shown (reactive); follows the snapshot unless the
        view sets something else ("ready", "stopping").
    """

    snap: reactive[Snapshot | None] = reactive(None, always_update=True, layout=False)
    state: reactive[str] = reactive("ready")
    #: A line shown under a final status instead of its meaning (e.g. how to continue a run).
    hint: reactive[str] = reactive("")
    #: The engine's trust checks in a few words (empty: none reported).
    trust: reactive[str] = reactive("")

    def __init__(self, meta: ProblemFacts, **kw):
        super().__init__(**kw)
        self.meta = meta

    @guarded("draw")
    def render(self) -> Text:
        s = self.snap
        t = Text(no_wrap=True, overflow="ellipsis")
        word = self.state
        t.append("status ", "dim")
        t.append(word.upper(), status_style(word))
        if is_final(word) and word != "converged":
            t.append("  NOT CONVERGED", "bold reverse #f08a5d")
        t.append("\n")
        if s is None or s.evaluations == 0:
            t.append("no evaluations yet\n", "dim")
            t.append(ESTIMATE_NOTE, "italic dim")
            return t
        m = s.components
        ref = self.meta.reference
        if m == 1:
            t.append("I = ", "bold")
            t.append(value_text(float(s.value[0])), "bold #e6e6e6")
            t.append("\n  ± ", "dim")
            t.append(f"{float(s.error[0]):.3e}", "#e8c547")
            t.append(" est.", "dim")
            if ref is not None:
                t.append("  true ", "dim")
                t.append(f"{abs(float(s.value[0]) - ref[0]):.2e}", "#6cb6d9")
            t.append("\n")
        else:
            # one line per component, as many as the panel has room for
            fixed = 6 + (1 if ref is not None and len(ref) == m else 0)
            room = max(1, (self.size.height or 9) - fixed)
            show = m if m <= room else max(1, room - 1)
            for j in range(show):
                t.append(f"I{j} ", "bold")
                t.append(f"{float(s.value[j]):.12g}", "bold #e6e6e6")
                t.append(" ± ", "dim")
                t.append(f"{float(s.error[j]):.2e}\n", "#e8c547")
            if m > show:
                worst = int(np.argmax(s.error / np.maximum(s.goal, 1e-300)))
                t.append(f"+{m - show} more; furthest from goal: I{worst}\n", "dim")
            if ref is not None and len(ref) == m:
                true = np.abs(s.value - np.asarray(ref))
                t.append("true error max ", "dim")
                t.append(f"{float(true.max()):.2e}\n", "#6cb6d9")
        t.append("goal ", "dim")
        g = float(np.max(s.goal)) if s.goal.size else math.nan
        t.append(f"{g:.2e}", "bold")
        t.append(f"  rel {s.rel_tol:g} abs {s.abs_tol:g}\n", "dim")
        t.append("evals ", "dim")
        t.append(fmt_count(s.evaluations))
        if s.budget:
            frac = s.evaluations / s.budget
            t.append(f"/{fmt_count(s.budget)}", "dim")
            if frac >= 0.9:
                t.append(f" {frac:.0%}", "bold #f08a5d")
        t.append("  regions ", "dim")
        t.append(fmt_count(s.regions) + "\n")
        t.append("rate ", "dim")
        t.append(f"{fmt_count(s.rate)}/s")
        t.append("  elapsed ", "dim")
        t.append(duration_text(s.elapsed) + "\n")
        t.append("to goal ", "dim")
        if word == "converged":
            t.append("reached\n", "#5fd38a")
        elif is_final(word):
            t.append("-\n", "dim")
        else:
            self._forecast_text(t, s)
        if self.trust and is_final(word):
            t.append("trust ", "dim")
            good = self.trust == "audit ok · smooth"
            t.append(self.trust + "\n", "#5fd38a" if good else "#f08a5d")
        t.append(ESTIMATE_NOTE, "italic dim")
        if is_final(word) and t.plain.count("\n") + 2 <= (self.size.height or 99):
            if self.hint:
                t.append(f"\n{self.hint}", "bold #e8c547")
            else:
                t.append(f"\n{word}: {meaning(word)}", "dim")
        return t

    @staticmethod
    def _forecast_text(t: Text, s: Snapshot) -> None:
        """The session layer's forecast, with the budget taken into account (issue 10 item 17)."""
        fc = forecast(s.history, s.goal, s.rate, budget=s.budget)
        if fc.evaluations is None:
            t.append("? (no clear slope yet)\n", "dim")
        elif fc.beyond_budget:
            need = "out of reach" if not math.isfinite(fc.evaluations) else f"~{fmt_count(fc.evaluations)} evals"
            t.append("beyond budget", "bold #f08a5d")
            t.append(f" ({need})\n", "dim")
        else:
            t.append("~" + duration_text(fc.seconds))
            t.append(" (forecast)\n", "dim")
