"""Where the UI saves a result record (the record itself is the session layer's one schema)."""

from __future__ import annotations

import os
from pathlib import Path

from cubage.problem.problem_file import bundled_problem_dir

from .problem_facts import ProblemFacts


def result_path(meta: ProblemFacts, cwd: Path | None = None) -> Path:
    """``<problem stem>.result.json`` next to the problem file when that folder
    is writable and is not the bundled examples' folder; else in ``cwd``."""
    cwd = Path.cwd() if cwd is None else Path(cwd)
    stem = meta.path.stem if meta.path is not None else "cubage"
    if meta.path is not None:
        folder = meta.path.resolve().parent
        try:
            bundled = bundled_problem_dir().resolve()
        except Exception:  # noqa: BLE001 - a missing package only means "not bundled"
            bundled = None
        if folder != bundled and os.access(folder, os.W_OK):
            return folder / f"{stem}.result.json"
    return cwd / f"{stem}.result.json"
