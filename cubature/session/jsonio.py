"""JSON for every file and stream cubage writes: one rule for non-finite numbers, one atomic write.

The rule for numbers JSON cannot hold
-------------------------------------
JSON has no NaN or infinity.  Everywhere cubage writes JSON (``run --json``,
the run directory's files, the UI's save, the progress log) a non-finite
float is written as one of the strings ``"nan"``, ``"inf"`` or ``"-inf"``;
:func:`number_from_json` (or Python's ``float``) reads them back.  The choice
keeps the information (an infinite error is not the same as an unknown one)
and any JSON parser can read the file.

Writing
-------
:func:`write_json` writes through :func:`cubage.engine.checkpoint.write_atomic`
(temporary file, flush, fsync, rename, fsync of the folder): a reader sees
the old file or the new one, never half of one, and a crash right after the
call does not lose it.  The temporary file is created with ``O_EXCL`` and
``O_NOFOLLOW``, so a link planted under its name is never followed.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path
from typing import Any

__all__ = ["NONFINITE", "json_safe", "json_number", "number_from_json", "dumps", "write_json",
           "write_atomic", "read_json_object"]

#: The strings that stand for non-finite floats in every JSON file cubage writes.
NONFINITE = {"nan": math.nan, "inf": math.inf, "-inf": -math.inf}


def json_number(x) -> float | str:
    """A float for JSON: finite floats as they are, NaN and infinities as ``"nan"``, ``"inf"``, ``"-inf"``."""
    x = float(x)
    if math.isfinite(x):
        return x
    if math.isnan(x):
        return "nan"
    return "inf" if x > 0 else "-inf"


def number_from_json(v) -> float:
    """The inverse of :func:`json_number` (numbers, the three strings and ``None`` = NaN)."""
    if v is None:
        return math.nan
    if isinstance(v, str):
        if v in NONFINITE:
            return NONFINITE[v]
        raise ValueError(f"not a number: {v!r}")
    return float(v)


def json_safe(obj: Any) -> Any:
    """``obj`` with numpy scalars/arrays turned into Python numbers/lists and non-finite floats into strings.

    Dicts, lists and tuples are walked; other objects pass unchanged (so
    :func:`json.dumps` still refuses what it cannot write).
    """
    if isinstance(obj, bool) or obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, int):
        return obj
    if isinstance(obj, float):
        return json_number(obj)
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    try:
        import numpy as np
    except ImportError:  # pragma: no cover - numpy is a dependency
        return obj
    if isinstance(obj, np.ndarray):
        return json_safe(obj.tolist())
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.floating):
        return json_number(float(obj))
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    return obj


def dumps(obj: Any, *, indent: int | None = None) -> str:
    """``json.dumps`` of :func:`json_safe` ``(obj)``; compact when ``indent`` is None."""
    seps = (",", ":") if indent is None else (",", ": ")
    return json.dumps(json_safe(obj), indent=indent, separators=seps, allow_nan=False)


def write_atomic(path, data) -> None:
    """Write ``data`` (bytes, or a callable writing into a binary file) to ``path`` atomically, with fsync.

    The one atomic write of the project lives in the engine (checkpoints
    need it and the engine imports nothing above it); this is that function.
    """
    from cubage.engine.checkpoint import write_atomic as _write
    _write(Path(path), data)


def write_json(path, obj: Any) -> None:
    """Write ``obj`` as indented JSON (the rule above), atomically."""
    write_atomic(path, (dumps(obj, indent=2) + "\n").encode("utf-8"))


def read_json_object(path, *, limit: int = 64 << 20) -> dict | None:
    """The JSON object in ``path``, or None when it is missing, unreadable, not JSON or not an object.

    The file is opened with ``O_NOFOLLOW``: a symbolic link reads as missing.
    Files above ``limit`` bytes are not read.
    """
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0))
    except OSError:
        return None
    try:
        with os.fdopen(fd, "rb") as fh:
            raw = fh.read(limit + 1)
    except OSError:
        return None
    if len(raw) > limit:
        return None
    try:
        obj = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None
    return obj if isinstance(obj, dict) else None
