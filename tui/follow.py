"""Following a run directory written by a headless ``cubage run --run-dir DIR``.

The follower lives in the session layer (:class:`cubage.session.follower.RunFollower`,
shared with ``cubage watch``); this module keeps the UI's names for it.
"""

from __future__ import annotations

from cubage.session.follower import RunFollower as RunDirFollower
from cubage.session.run_directory import HALT_REQUEST as STOP_REQUEST
from cubage.session.run_directory import LEDGER as SETTINGS
from cubage.session.run_directory import OCCUPANT as LOCK
from cubage.session.run_directory import SOURCE as PROBLEM
from cubage.session.run_directory import TRAIL as PROGRESS
from cubage.session.run_directory import VERDICT as RESULT

__all__ = ["RunDirFollower", "PROGRESS", "RESULT", "PROBLEM", "SETTINGS", "LOCK", "STOP_REQUEST"]
