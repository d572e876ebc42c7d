"""The engine's status words and what each means.

A module of its own, importing nothing, so that front ends can read the words without loading the engine (numpy,
scipy); :mod:`cubage.engine.run` and :mod:`cubage.session.status` both take them from here.
"""

__all__ = ["STATUSES"]

#: Status words of a finished (or paused/running) run.
STATUSES = {
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
