"""Checkpoints: the whole engine state in one pickle-free ``.npz`` file.

Layout: every region column as its own array (``r_<name>``), the queue
(``q_idx``, ``q_key``), the convergence history, the running totals, and a
``meta`` entry holding UTF-8 JSON: format version, fingerprint, settings,
counters and a SHA-256 digest over all arrays *and* the rest of the metadata
(format version 2; everything that is loaded is covered, issue 10 item 15f).
Loading uses ``allow_pickle=False``.  A file is written to a temporary name
beside the target, flushed and fsynced, then renamed over it (and the folder
fsynced), so a crash leaves either the old or the new checkpoint, never half
of one; a temporary file left by a crash is removed when the checkpoint is
next loaded.  Truncation and bit flips are caught by the zip container's CRCs
and the digest.

The digest detects accidents (a truncated copy, a bad disk, an edited file
by mistake), not deliberate edits: anyone who can write the file can also
recompute the digest.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import numpy as np

from cubage.engine.estimate import GENERATION
from cubage.engine.regions import RegionStore

FORMAT = "cubage-checkpoint"
VERSION = 2
#: Versions this module reads (version 1: the digest covers the arrays only).
READABLE_VERSIONS = (1, 2)


class CheckpointError(ValueError):
    """A checkpoint that is unreadable, corrupted, or of another problem."""


def _digest(arrays: dict[str, np.ndarray], meta: dict | None = None) -> str:
    """SHA-256 over the arrays (name, dtype, shape, bytes) and, from version 2, the metadata without the digest."""
    h = hashlib.sha256()
    if meta is not None:
        rest = {k: v for k, v in meta.items() if k != "digest"}
        h.update(json.dumps(rest, sort_keys=True, separators=(",", ":")).encode())
    for name in sorted(arrays):
        a = np.ascontiguousarray(arrays[name])
        h.update(name.encode())
        h.update(str(a.dtype).encode())
        h.update(str(a.shape).encode())
        h.update(a.data if a.size else b"")  # the buffer itself: no copy of large columns
    return h.hexdigest()


def write_atomic(path: Path, data) -> None:
    """Write to ``path`` atomically (temporary file, fsync, rename, fsync folder).

    ``data`` is bytes, or a callable that writes into the open binary file
    (so that large checkpoints are streamed, not built in memory first).
    """
    path = Path(path)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    tmp.unlink(missing_ok=True)
    # O_EXCL | O_NOFOLLOW: never write through a link planted under the temporary name
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0), 0o644)
    try:
        with os.fdopen(fd, "wb") as fh:
            if callable(data):
                data(fh)
            else:
                fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    os.replace(tmp, path)
    try:
        fd = os.open(path.parent, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
    except OSError:
        pass


def save_run(run, path) -> None:
    """Serialise ``run`` (a :class:`cubage.engine.run.Run`) to ``path``."""
    if run.store is None:
        raise CheckpointError("nothing to checkpoint yet: the run has not started")
    arrays = {f"r_{k}": v for k, v in run.store.to_arrays().items()}
    arrays["q_idx"] = run.queue.idx
    arrays["q_key"] = run.queue.key
    arrays["history"] = np.array(run._hist)
    arrays["total_value"] = run.total_value
    arrays["total_error"] = run.total_error
    arrays["key_weight"] = run.key_weight
    arrays["depth_err"] = run._depth_err
    if run._node_cache is not None:                       # the 2-D audit check's node values (Run._cache_nodes)
        arrays["node_rows"], arrays["node_values"] = run._node_cache
    if run._corner_cache is not None:                     # the corner checks' node values (Run._cache_corner_nodes)
        arrays["corner_rows"], arrays["corner_values"], arrays["corner_boxes"] = run._corner_cache
    if run._vertex_memo is not None:                      # explained children's probes (Run._explained_probes)
        arrays["memo_vertices"], arrays["memo_points"], arrays["memo_values"] = run._vertex_memo
    if run._first_probes is not None:                     # the first region's vertex probes (Run._domain_corners)
        arrays["first_points"], arrays["first_values"] = run._first_probes
    meta = {
        "format": FORMAT, "version": VERSION, "estimator": GENERATION, "fingerprint": run.fingerprint(),
        "domain": run.domain.to_json(), "integrand": run.integrand_id,
        "settings": dict(run.settings.__dict__), "components": run.m,
        "step": run.step_count, "evaluations": run.evaluations, "elapsed": run.elapsed(),
        "queue_thr": run.queue.thr, "status": run.status if run.done else "running",
        "message": run.message, "checks": run.checks, "audit_ok": run._audit_ok,
    }
    meta["digest"] = _digest(arrays, meta)
    meta_arr = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    write_atomic(Path(path), lambda fh: np.savez(fh, meta=meta_arr, **arrays))


def read_checkpoint(path) -> tuple[dict, dict[str, np.ndarray]]:
    """Read and verify a checkpoint; returns (meta, arrays)."""
    path = Path(path)
    try:
        with np.load(path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
    except FileNotFoundError:
        raise CheckpointError(f"{path}: no such checkpoint") from None
    except IsADirectoryError:
        raise CheckpointError(f"{path}: is a folder, not a checkpoint") from None
    except Exception as exc:  # noqa: BLE001 - a damaged zip can fail in many ways (zlib, struct, ...)
        detail = " ".join(str(exc).split())[:160]
        raise CheckpointError(f"{path}: checkpoint is truncated or corrupted ({type(exc).__name__}"
                              f"{': ' + detail if detail else ''})") from None
    if "meta" not in arrays:
        raise CheckpointError(f"{path}: not a cubage checkpoint (no metadata)")
    try:
        meta = json.loads(arrays.pop("meta").tobytes().decode())
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CheckpointError(f"{path}: checkpoint metadata is corrupted ({exc})") from None
    if not isinstance(meta, dict) or meta.get("format") != FORMAT:
        raise CheckpointError(f"{path}: not a cubage checkpoint")
    version = meta.get("version")
    if version not in READABLE_VERSIONS:
        raise CheckpointError(f"{path}: checkpoint format version {version} is not supported "
                              f"(this cubage reads versions {', '.join(map(str, READABLE_VERSIONS))})")
    if _digest(arrays, meta if version >= 2 else None) != meta.get("digest"):
        raise CheckpointError(f"{path}: checkpoint is corrupted (digest mismatch)")
    return meta, arrays


def _temporary_files(path: Path) -> list[Path]:
    """Temporary files of :func:`write_atomic` for ``path`` (``.NAME.tmp-PID``) left by processes that are gone."""
    gone = []
    try:
        candidates = list(path.parent.glob(f".{path.name}.tmp-*"))
    except OSError:
        return []
    for tmp in candidates:
        pid = tmp.name.rpartition(".tmp-")[2]
        if not pid.isdigit() or int(pid) == os.getpid():
            continue
        try:
            os.kill(int(pid), 0)
            continue            # its writer may still be at work
        except ProcessLookupError:
            gone.append(tmp)
        except (PermissionError, OverflowError, OSError):
            continue
    return gone


def clean_temporaries(path) -> list[Path]:
    """Remove temporary files a crash left beside checkpoint ``path`` (issue 10 item 15f); the removed paths."""
    removed = []
    for tmp in _temporary_files(Path(path)):
        try:
            if tmp.is_file() and not tmp.is_symlink():
                tmp.unlink()
                removed.append(tmp)
        except OSError:
            pass
    return removed


def load_run(cls, path, f, domain, *, evaluator, fingerprint, snapshot_interval, overrides):
    """Rebuild a :class:`~cubage.engine.run.Run` from ``path`` (and remove temporary files a crash left there)."""
    clean_temporaries(path)
    meta, arrays = read_checkpoint(path)
    if meta.get("estimator") != GENERATION:
        # the regions it never splits again would keep the estimates of another error control (the first release
        # wrote no generation: its estimates converged silently on jumps and kinks)
        theirs = meta.get("estimator")
        raise CheckpointError(f"{path}: written by another version of the error control (generation "
                              f"{theirs if theirs is not None else 1}, this cubage {GENERATION}); resume it with the "
                              f"cubage that wrote it, or start the run again")
    settings = dict(meta["settings"])
    path_keys = ("rule", "degree", "split", "queue", "batch", "estimate", "batch_points")
    for k, v in overrides.items():
        if v is None:
            continue
        if k in path_keys and v != settings.get(k):
            raise CheckpointError(f"{path}: cannot change {k!r} when resuming (checkpoint has {settings.get(k)!r})")
        settings[k] = v
    run = cls(f, domain, evaluator=evaluator, fingerprint=fingerprint,
              snapshot_interval=snapshot_interval, **settings)
    if run.fingerprint() != meta["fingerprint"]:
        mine = json.dumps(domain.to_json())
        theirs = json.dumps(meta["domain"])
        what = "domain" if mine != theirs else "integrand or method"
        raise CheckpointError(f"{path}: checkpoint belongs to another problem (its {what} differs)")
    run.m = int(meta["components"])
    cols = run.region_columns()
    regions = {k[2:]: v for k, v in arrays.items() if k.startswith("r_")}
    try:
        run.store = RegionStore.from_arrays(cols, regions)
    except (KeyError, ValueError) as exc:
        raise CheckpointError(f"{path}: checkpoint region data does not fit this problem ({exc})") from None
    run.queue.idx = arrays["q_idx"].astype(np.int64)
    run.queue.key = arrays["q_key"].astype(np.float64)
    run.queue.thr = float(meta["queue_thr"])
    run._hist = [row for row in arrays["history"]]
    run.total_value = arrays["total_value"]
    run.total_error = arrays["total_error"]
    run.key_weight = arrays["key_weight"]
    run._depth_err = arrays["depth_err"].copy()
    if "node_rows" in arrays and "node_values" in arrays:
        run._node_cache = (arrays["node_rows"].astype(np.int64), arrays["node_values"].astype(np.float64))
    if all(k in arrays for k in ("corner_rows", "corner_values", "corner_boxes")):
        run._corner_cache = (arrays["corner_rows"].astype(np.int64), arrays["corner_values"].astype(np.float64),
                             arrays["corner_boxes"].astype(np.float64))
    if all(k in arrays for k in ("memo_vertices", "memo_points", "memo_values")):
        run._vertex_memo = tuple(arrays[k].astype(np.float64) for k in ("memo_vertices", "memo_points", "memo_values"))
    if all(k in arrays for k in ("first_points", "first_values")):
        run._first_probes = (arrays["first_points"].astype(np.float64), arrays["first_values"].astype(np.float64))
    run.step_count = int(meta["step"])
    run.evaluations = int(meta["evaluations"])
    run.elapsed_before = float(meta["elapsed"])
    run.message = meta.get("message", "")
    run.checks.update(meta.get("checks", {}))
    run._audit_ok = bool(meta.get("audit_ok", False))
    status = meta.get("status", "running")
    run.status = "running" if status in ("stopped", "time-limit", "budget-spent", "paused", "region-limit",
                                                   "memory-ceiling") else status
    return run
