"""The one result record: ``cubage run --json``, the run directory's verdict and the UI's save.

Layout (schema ``cubage-result 1``)::

    {"schema": "cubage-result 1", "written_by": "cubage run" | "cubage resume" | "cubage tui" | ...,
     "written_at": "2026-01-31T12:00:00+0000",
     "problem": {"name": str, "title": str, "path": str or null, "variables": [...], "components": int},
     "value": float or [..m], "error": float or [..m],          # the error is an estimate, not a bound
     "status": str, "status_meaning": str, "converged": bool, "final": bool,
     "evaluations": int, "regions": int, "seconds": float, "steps": int, "rule": str, "message": str,
     "error_note": "heuristic estimate, not a guaranteed bound",
     "reference": {"value": ..., "source": str, "true_error": value - reference (signed)} or null,
     "trust": {...},            # the engine's trust checks, when its Result carries them
     "settings": {...},         # the goal and method the run used, when known
     "run_dir": str,            # when the run kept a run directory
     ...}                       # command extras: "stopped_by", "second_opinion", "storage_error"

Numbers that JSON cannot hold follow :mod:`cubage.session.jsonio`.
"""

from __future__ import annotations

import dataclasses
import time
from typing import Any

import numpy as np

from cubage.session.jsonio import json_safe
from cubage.session.status import is_final, meaning

__all__ = ["SCHEMA", "ERROR_NOTE", "result_record", "result_fields"]

SCHEMA = "cubage-result 1"
ERROR_NOTE = "heuristic estimate, not a guaranteed bound"


def _trust(result) -> Any:
    t = result.get("trust") if isinstance(result, dict) else getattr(result, "trust", None)
    if t is None:
        return None
    for name in ("to_json", "as_dict", "to_dict"):
        fn = getattr(t, name, None)
        if callable(fn):
            return fn()
    if dataclasses.is_dataclass(t) and not isinstance(t, type):
        return dataclasses.asdict(t)
    return t


def result_fields(result) -> dict:
    """The engine fields of ``result``: an engine Result, a Snapshot, or a dict with the same keys."""
    if isinstance(result, dict):
        keys = ("value", "error", "evaluations", "regions", "status", "seconds", "steps", "rule", "message")
        out = {k: result.get(k) for k in keys}
    elif hasattr(result, "to_json"):
        out = dict(result.to_json())
    else:                                       # a Snapshot
        scalar = result.components == 1
        out = {"value": float(result.value[0]) if scalar else np.asarray(result.value, float),
               "error": float(result.error[0]) if scalar else np.asarray(result.error, float),
               "evaluations": int(result.evaluations), "regions": int(result.regions), "status": result.status,
               "seconds": float(result.elapsed), "steps": int(result.step), "rule": None,
               "message": result.message}
    for k in ("value", "error"):
        v = out.get(k)
        if isinstance(v, (list, tuple, np.ndarray)):
            a = np.asarray(v, dtype=float).ravel()
            out[k] = a if a.size != 1 or isinstance(result, dict) else float(a[0])
    return out


def _problem_block(problem, name: str | None) -> tuple[dict, Any, str]:
    """(problem block, reference values or None, reference source)."""
    if problem is None:
        return {"name": name, "title": "", "path": None, "variables": [], "components": None}, None, ""
    path = getattr(problem, "path", None)
    block = {"name": name or (path.stem if path is not None else None),
             "title": getattr(problem, "title", "") or "",
             "path": str(path) if path is not None else None,
             "variables": list(getattr(problem, "variables", []) or []),
             "components": getattr(problem, "components", None)}
    ref = getattr(problem, "reference", None)
    if ref is None:
        return block, None, ""
    if hasattr(ref, "value"):                   # a problem file's Reference
        return block, ref.value, str(getattr(ref, "source", ""))
    return block, ref, str(getattr(problem, "reference_source", ""))


def result_record(result, *, problem=None, name: str | None = None, written_by: str = "cubage",
                  settings: dict | None = None, run_dir=None, extra: dict | None = None) -> dict:
    """The result record (module docstring) of ``result``.

    Parameters
    ----------
    result : Result, Snapshot or dict
        The engine's Result (its ``trust`` object is copied when present), a
        Snapshot (a followed run without a verdict), or a dict of the same fields.
    problem : Problem or an object with ``title``, ``path``, ``variables``, ``reference``, optional
    name : str, optional
        The problem's name (default: the file's stem).
    written_by : str
        Which command or screen wrote the record.
    settings : dict, optional
        Goal and method of the run.
    run_dir : path, optional
    extra : dict, optional
        Command extras merged at the top level.

    Returns
    -------
    dict
        JSON-ready (non-finite numbers already replaced).
    """
    f = result_fields(result)
    block, ref, source = _problem_block(problem, name)
    status = str(f.get("status"))
    rec: dict[str, Any] = {"schema": SCHEMA, "written_by": written_by,
                           "written_at": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "problem": block}
    rec.update({"value": f.get("value"), "error": f.get("error"), "status": status,
                "status_meaning": meaning(status), "converged": status == "converged", "final": is_final(status),
                "evaluations": f.get("evaluations"), "regions": f.get("regions"), "seconds": f.get("seconds"),
                "steps": f.get("steps"), "rule": f.get("rule"), "message": f.get("message") or "",
                "error_note": ERROR_NOTE})
    if block["components"] is None and f.get("value") is not None:
        block["components"] = int(np.size(f["value"]))
    if ref is not None:
        r = np.atleast_1d(np.asarray(ref, dtype=float))
        true = None
        if f.get("value") is not None:
            v = np.atleast_1d(np.asarray(f["value"], dtype=float))
            if v.size == r.size:
                d = v - r
                true = float(d[0]) if np.ndim(f["value"]) == 0 else d
        rec["reference"] = {"value": ref, "source": source, "true_error": true}
    else:
        rec["reference"] = None
    trust = _trust(result)
    if trust is not None:
        rec["trust"] = trust
    if settings:
        rec["settings"] = dict(settings)
    if run_dir is not None:
        rec["run_dir"] = str(run_dir)
    if extra:
        rec.update(extra)
    return json_safe(rec)
