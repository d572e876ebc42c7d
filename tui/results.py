"""Writing a run's result as JSON from the UI, and choosing where."""

from __future__ import annotations

import json
import math
import os
import time
from pathlib import Path

from cubage.problem.problem_file import bundled_problem_dir

from .problem_facts import ProblemFacts

NOTE = "the error is a heuristic estimate, not a guaranteed bound"


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


def _clean(x):
    if isinstance(x, float) and not math.isfinite(x):
        return str(x)
    if isinstance(x, list):
        return [_clean(v) for v in x]
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    return x


def result_record(result_json: dict, meta: ProblemFacts, settings: dict | None = None) -> dict:
    """The saved document: the engine's ``Result.to_json()`` fields plus problem,
    settings, reference (with the true error) and the converged flag."""
    rec = {"saved_by": "cubage tui", "saved_at": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
           "problem": {"title": meta.title, "path": str(meta.path) if meta.path else None,
                       "variables": list(meta.variables)}}
    rec.update(result_json)
    rec["converged"] = result_json.get("status") == "converged"
    rec["error_note"] = NOTE
    if settings:
        rec["settings"] = dict(settings)
    if meta.reference is not None:
        val = result_json.get("value")
        vals = val if isinstance(val, list) else [val]
        true = [abs(float(v) - r) if v is not None else None for v, r in zip(vals, meta.reference)]
        rec["reference"] = {"value": meta.reference if len(meta.reference) > 1 else meta.reference[0],
                            "source": meta.reference_source,
                            "true_error": true if len(true) > 1 else true[0]}
    return _clean(rec)


def write_result(path: Path, record: dict) -> Path:
    """Write ``record`` to ``path`` atomically (temporary file + rename)."""
    path = Path(path)
    tmp = path.with_name(path.name + f".tmp{os.getpid()}")
    tmp.write_text(json.dumps(record, indent=2) + "\n", encoding="utf-8")
    os.replace(tmp, path)
    return path
