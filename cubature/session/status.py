"""The status words of a run, as both front ends show them, and which of them are final.

The engine's words (:data:`cubage.engine.run.STATUSES`) say what a run did;
the session adds the words a front end needs around them:

``ready``      prepared, not started;
``waiting``    following a run directory whose runner has not written yet;
``stopping``   a stop was asked, the current step is finishing;
``runner-gone`` following a run directory whose runner died without writing
               a result (continue it with ``cubage resume DIR``).

A status is *final* when the run will not change any more by itself: every
engine word except ``running`` and ``paused``, and ``runner-gone``.
"""

from __future__ import annotations

__all__ = ["ENGINE_WORDS", "SESSION_WORDS", "WORDS", "FINAL", "REOPENABLE", "is_final", "meaning", "exit_code",
           "EXIT_OK", "EXIT_FAILED", "EXIT_BAD_INPUT", "EXIT_SHORT", "EXIT_INTERRUPTED"]

#: The engine's status words and their meaning (a copy of cubage.engine.run.STATUSES, checked by a test).
ENGINE_WORDS: dict[str, str] = {
    "running": "still working",
    "paused": "paused by request, resumable",
    "converged": "total error estimate met the goal",
    "budget-spent": "evaluation budget spent before the goal was met",
    "time-limit": "time limit reached before the goal was met",
    "stopped": "stopped on request before the goal was met",
    "region-limit": "region limit reached before the goal was met",
    "memory-ceiling": "the run's memory would have exceeded its ceiling before the goal was met",
    "stalled": "no region can be split further (floating-point resolution) before the goal was met",
    "failed": "the integrand raised an error or returned a non-finite value",
}

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


def _engine_words() -> dict[str, str]:
    try:
        from cubage.engine.run import STATUSES
    except ImportError:  # pragma: no cover
        return {}
    return STATUSES


def is_final(status: str) -> bool:
    """Whether ``status`` is final (see the module docstring)."""
    if status in FINAL:
        return True
    return status in _engine_words() and status not in ("running", "paused")


def meaning(status: str) -> str:
    """One line explaining ``status`` ('' for an unknown word)."""
    return WORDS.get(status) or _engine_words().get(status, "")


def exit_code(status: str) -> int:
    """The command line's exit code for a final status: 0 converged, 1 failed, 3 any other stop short."""
    if status == "converged":
        return EXIT_OK
    if status == "failed":
        return EXIT_FAILED
    return EXIT_SHORT
