"""The status words of a run, as both front ends show them, and which of them are final.

The engine's words (:data:`cubage.engine.statuses.STATUSES`) say what a run did;
the session adds the words a front end needs around them:

``ready``      prepared, not started;
``waiting``    following a run directory whose runner has not written yet;
``stopping``   a stop was asked, the current step is finishing;
``runner-gone`` following a run directory whose runner died without writing
               a result (continue it with ``cubage resume DIR``).

A status is *final* when the run will not change any more by itself: every
engine word except ``running`` and ``paused``, and ``runner-gone``.

Front ends colour a word by its *tone* (:func:`tone`), never by a table of
words of their own, so a new word needs only an entry in one of the two
tables above.
"""

from __future__ import annotations

from cubage.engine.statuses import STATUSES

__all__ = ["ENGINE_WORDS", "SESSION_WORDS", "WORDS", "FINAL", "REOPENABLE", "is_final", "meaning", "exit_code",
           "TONES", "tone", "EXIT_OK", "EXIT_FAILED", "EXIT_BAD_INPUT", "EXIT_SHORT", "EXIT_INTERRUPTED"]

#: The engine's status words and their meaning (one table, in the engine; importing it loads nothing heavy).
ENGINE_WORDS: dict[str, str] = STATUSES

#: Words a front end shows around the engine's.
SESSION_WORDS: dict[str, str] = {
    "ready": "prepared, not started",
    "waiting": "waiting for the runner's first progress line",
    "stopping": "a stop was asked; the current step is finishing",
    "runner-gone": "the process working in the run directory is gone without a result; "
                   "continue with: cubage resume DIR",
}

WORDS: dict[str, str] = {**ENGINE_WORDS, **SESSION_WORDS}

#: Statuses after which the run does not change by itself.
FINAL: frozenset[str] = frozenset(w for w in ENGINE_WORDS if w not in ("running", "paused")) | {"runner-gone"}

#: Final statuses from which a new goal or budget lets the same run go on (Run.set_goal reopens them).
REOPENABLE: frozenset[str] = frozenset({"converged", "budget-spent", "time-limit", "stopped", "memory-ceiling"})

EXIT_OK, EXIT_FAILED, EXIT_BAD_INPUT, EXIT_SHORT, EXIT_INTERRUPTED = 0, 1, 2, 3, 130

#: The tones of status words, for front ends that colour them: the goal was met; the run (or its runner) failed;
#: it ended short of the goal; it is working; it is held; it has not started.
TONES = ("met", "fault", "short", "active", "held", "idle")


def is_final(status: str) -> bool:
    """Whether ``status`` is final (see the module docstring)."""
    return status in FINAL


def tone(status: str) -> str:
    """The tone of a status word (one of :data:`TONES`; ``""`` for an unknown word), derived from the tables.

    ``converged`` is met; ``failed`` and ``runner-gone`` are faults; every other final word ended short of the
    goal; ``running`` and ``stopping`` are active; ``paused`` is held; the remaining words (``ready``,
    ``waiting``) have not started.
    """
    if status not in WORDS:
        return ""
    if status == "converged":
        return "met"
    if status in ("failed", "runner-gone"):
        return "fault"
    if status in FINAL:
        return "short"
    if status in ("running", "stopping"):
        return "active"
    if status == "paused":
        return "held"
    return "idle"


def meaning(status: str) -> str:
    """One line explaining ``status`` ('' for an unknown word)."""
    return WORDS.get(status, "")


def exit_code(status: str) -> int:
    """The command line's exit code for a final status: 0 converged, 1 failed, 3 any other stop short."""
    if status == "converged":
        return EXIT_OK
    if status == "failed":
        return EXIT_FAILED
    return EXIT_SHORT
