"""Evaluating a step's integrand points in parallel: processes, threads or a dask cluster.

The engine calls ``evaluator(f, X)`` once per step with all of that step's
points ``X`` (n, d) in user coordinates.  :func:`make_evaluator` builds such
an evaluator (or returns ``None`` for the engine's own in-process call).

Chunks and values
-----------------
A step's points are cut into chunks whose boundaries depend only on ``n`` and
the chunk size (:func:`chunk_bounds`) -- never on timing, on the worker count
or on the backend.  The integrand is called once per chunk, the chunks are
grouped into tasks (a few per worker, consecutive chunks; the grouping changes
only who computes a chunk, not what is computed) and the results are
concatenated in order.  The integrand is elementwise per point, so the
integral is bit-identical for any worker count and any backend, and whether
or not the automatic mode decides to go parallel.

Backends
--------
``"serial"``
    In-process, no joblib (``make_evaluator`` returns ``None``).
``"processes"``
    A process pool of joblib's loky (``joblib.externals.loky``), used through
    its executor.  Works for any integrand.
``"threads"``
    A thread pool (:class:`concurrent.futures.ThreadPoolExecutor`); pays off
    only for integrands that release the GIL (numpy ufuncs on large arrays
    do, pure-Python loops do not).
``"dask"``
    A ``dask.distributed`` cluster (``cluster`` is ``"tcp://host:8786"``, a
    scheduler-file path or a ``Client``), through the client's futures: the
    tasks of a lost worker run again on the remaining ones, and a cluster
    left without workers ends the step with a clear message (see
    :class:`_DaskPool`).  Needs the ``cluster`` extra:
    ``pip install 'cubage[cluster]'``.
``"auto"`` (the default)
    Serial until measurements say parallel pays, then ``processes`` (or
    ``dask`` when a cluster is given), see below.

The pool is created once and kept for the whole run, so there is no pool
start-up per step: for processes and threads one executor whose futures are
waited on directly (``joblib.Parallel``'s result loop polls every 10 ms, a
cost per step that a run of many short steps would feel), for dask the
client's futures.  :meth:`Evaluator.close` (or leaving a ``with`` block)
shuts it down; :meth:`PoolEvaluator.cancel` gives up on a step in progress
(worker processes killed and reaped, dask tasks cancelled).

How integrands travel
---------------------
The integrand is pickled once per run in this process (with cloudpickle, so
that lambdas and closures travel too) and each worker process unpickles it
once, caching it in the one module-level dict :data:`_WORKER_INTEGRANDS`
keyed by the pickle's SHA-256.  A problem's integrands pickle by reference:
an expression (:class:`cubage.problem.expr.CompiledExpression`) as its
source, compiled once in each worker; a Python integrand
(:class:`cubage.problem.python_integrand.PythonIntegrand`) as its import path
and code digest, imported once in each worker.  This module imports nothing
of the problem layer (issue 11).  Threads share the callable.

The automatic rule
------------------
In ``"auto"`` mode every step starts in-process, timed with
:func:`time.perf_counter`.  A timing counts as a measurement of the
per-point cost once the call took at least :data:`MIN_MEASURE_SECONDS`
(1 ms, so fixed call overhead is a few per cent at most); the estimate is the
smallest per-point cost among the last two measurements, so one slow first
call (imports, caches) cannot trigger the pool; nothing goes parallel before
two measurements exist.  A step goes to the pool only if

1. it has at least two chunks,
2. its estimated serial time (per-point cost x n) exceeds
   :data:`MIN_PARALLEL_SECONDS` (20 ms) and 10x the dispatch round-trip, and
3. the serial evaluation time spent so far exceeds the backend's expected
   start-up cost (:data:`STARTUP_SECONDS`, 0.5 s for processes), so that a
   short run does not pay for a pool it cannot amortise.

Before the pool exists the dispatch round-trip is a conservative constant
(:data:`DISPATCH_GUESS`); right after the pool starts it is measured (a
round of empty tasks, one per worker, after a warm-up round).  Cheap
integrands therefore never start a pool, and a step that is small (early on,
or at the end of a run) is still evaluated in-process.  The decision changes
speed only, never the value.

Failures
--------
An exception raised by the integrand in a worker, or a worker process that
dies, raises :class:`cubage.IntegrandError` whose one-line message names the
integrand (expression source or import path) and the error.  The evaluator
stays usable and :meth:`Evaluator.close` still works.
"""

from __future__ import annotations

import json
import os
import re
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from cubage.engine.run import IntegrandError

__all__ = ["make_evaluator", "describe_evaluator", "chunk_bounds", "resolve_workers", "Evaluator", "worker_setup",
           "PoolEvaluator", "integrand_name", "BACKENDS", "MIN_PARALLEL_SECONDS", "MIN_MEASURE_SECONDS",
           "DISPATCH_GUESS",
           "STARTUP_SECONDS"]

#: Backend names accepted by :func:`make_evaluator`.
BACKENDS = ("auto", "serial", "processes", "threads", "dask")

#: A step goes parallel (in auto mode) only if its estimated serial time exceeds this (seconds).
MIN_PARALLEL_SECONDS = 0.020
#: ... and exceeds this multiple of the measured dispatch round-trip.
DISPATCH_FACTOR = 10.0
#: A serial call shorter than this (seconds) is not trusted as a per-point cost measurement.
MIN_MEASURE_SECONDS = 0.001
#: Dispatch round-trip assumed before a pool exists (seconds), per backend: conservative.
DISPATCH_GUESS = {"processes": 0.002, "threads": 0.0002, "dask": 0.005}
#: Serial evaluation time that must have been spent before a pool is started (seconds).
STARTUP_SECONDS = {"processes": 0.5, "threads": 0.0, "dask": 0.0}

#: Seconds between two checks of the dask cluster while waiting for a step's tasks.
DASK_POLL_SECONDS = 0.5
#: A dask cluster without any worker for this long ends the wait (the run fails with a clear message).
DASK_NO_WORKER_SECONDS = 10.0
#: Seconds between two checks, in a worker process, that its parent is still alive.
PARENT_POLL_SECONDS = 0.5
#: Worker processes write nothing to the terminal (their stdout/stderr go to /dev/null).
QUIET_WORKERS = True

#: Chunk size limits used when ``chunk_points`` is not given (see :func:`chunk_bounds`).
CHUNK_MIN = 1024
CHUNK_MAX = 8192
CHUNKS_PER_STEP = 16
#: Tasks per worker in one step (consecutive chunks are grouped into tasks).
TASKS_PER_WORKER = 2

# The one piece of module-level state: integrands re-created from a spec inside a
# worker process, keyed by the spec's JSON, so each worker compiles/imports once.
_WORKER_INTEGRANDS: dict[str, Callable] = {}


# ---------------------------------------------------------------------------
# chunks
# ---------------------------------------------------------------------------

def chunk_bounds(n: int, chunk_points: int | None = None) -> np.ndarray:
    """Chunk boundaries ``[0, b1, ..., n]`` for ``n`` points.

    Parameters
    ----------
    n : int
        Number of points in the step.
    chunk_points : int, optional
        Fixed chunk size.  Without it the size is ``ceil(n / 16)`` clamped to
        [1024, 8192]: a function of ``n`` alone.  A full step of 32768 points
        gives 16 chunks of 2048; a step under 2048 points is one chunk and
        is evaluated in-process.  Smaller chunks would make integrands that
        loop over numpy calls pay their per-call overhead too often; for an
        integrand costing milliseconds a point on a large cluster, pass a
        smaller ``chunk_points`` so that every worker gets work.

    Returns
    -------
    numpy.ndarray
        Increasing int64 boundaries; chunk ``i`` is ``X[b[i]:b[i+1]]``.  They
        depend only on ``n`` and ``chunk_points``, never on workers or timing.
    """
    n = int(n)
    if chunk_points is None:
        size = min(CHUNK_MAX, max(CHUNK_MIN, -(-n // CHUNKS_PER_STEP)))
    else:
        size = int(chunk_points)
    if n <= 0:
        return np.zeros(1, np.int64)
    b = np.arange(0, n, size, dtype=np.int64)
    return np.append(b, np.int64(n))


def _group(bounds: np.ndarray, tasks: int) -> list[np.ndarray]:
    """Split the chunk list into at most ``tasks`` runs of consecutive chunks."""
    nchunks = bounds.size - 1
    tasks = max(1, min(tasks, nchunks))
    cut = np.linspace(0, nchunks, tasks + 1).round().astype(np.int64)
    return [bounds[cut[i]:cut[i + 1] + 1] for i in range(tasks) if cut[i + 1] > cut[i]]


# ---------------------------------------------------------------------------
# the worker side
# ---------------------------------------------------------------------------

class _WorkerFailure(Exception):
    """Raised inside a worker; carries only a plain message so it always unpickles."""

    def __init__(self, message: str):
        super().__init__(message)
        self.message = message

    def __reduce__(self):
        return (_WorkerFailure, (self.message,))


def _one_line(exc: BaseException) -> str:
    msg = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {msg}" if msg else type(exc).__name__


def _worker_integrand(key: str, blob: bytes) -> Callable:
    """The integrand pickled in ``blob``, unpickled once in this worker process."""
    f = _WORKER_INTEGRANDS.get(key)
    if f is None:
        import pickle
        f = pickle.loads(blob)  # noqa: S301 - pickled by this cubage process for its own workers
        _WORKER_INTEGRANDS[key] = f
    return f


def _pickled(f: Callable) -> tuple[str, bytes]:
    """(SHA-256 hex, pickle) of an integrand, for worker processes; one-line IntegrandError if impossible."""
    import hashlib
    try:
        import cloudpickle as pickler  # what loky uses (a dependency of joblib's loky and of dask)
    except ImportError:                  # pragma: no cover - plain pickle still carries a problem's integrands
        import pickle as pickler
    try:
        blob = pickler.dumps(f)
    except Exception as exc:  # noqa: BLE001 - whatever the pickler raised
        raise IntegrandError(f"integrand {integrand_name(f)} cannot be sent to worker processes "
                             f"({_one_line(exc)}); use threads or one worker") from None
    return hashlib.sha256(blob).hexdigest(), blob


def _eval_chunks(f: Callable, X: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """Evaluate ``f`` chunk by chunk over ``X`` (chunk boundaries relative to ``X``)."""
    out = []
    for a, b in zip(bounds[:-1].tolist(), bounds[1:].tolist()):
        r = np.asarray(f(X[a:b]), dtype=np.float64)
        k = b - a
        if r.ndim == 0:
            r = np.full(k, float(r))
        if r.ndim > 2 or r.shape[0] != k:
            raise _WorkerFailure(f"returned shape {r.shape} for {k} points; expected ({k},) or ({k}, m)")
        if out and (r.ndim, r.shape[1:]) != (out[0].ndim, out[0].shape[1:]):
            raise _WorkerFailure(f"returned arrays of different shapes for different points ({out[0].shape}, "
                                 f"{r.shape}); expected (n,) or (n, m) with the same m everywhere")
        out.append(r)
    return out[0] if len(out) == 1 else np.concatenate(out)


def _run_task(payload: tuple, X: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """One task: re-create or unwrap the integrand, evaluate its chunks."""
    if payload[0] == "pickled":
        try:
            f = _worker_integrand(payload[1], payload[2])
        except (Exception, SystemExit, KeyboardInterrupt) as exc:  # noqa: BLE001 - whatever the import raised
            raise _WorkerFailure(f"could not be loaded in the worker: {_one_line(exc)}") from None
    else:
        f = payload[1]
    if not X.flags.writeable:  # arrays may arrive as read-only buffers or memory maps
        X = np.array(X)
    try:
        with np.errstate(all="ignore"):
            return _eval_chunks(f, X, bounds - bounds[0])
    except _WorkerFailure:
        raise
    except (Exception, SystemExit, KeyboardInterrupt) as exc:  # noqa: BLE001 - the user's code; an exit or
        # interrupt raised by it is a failure of the integrand, not of the worker (issue 10 item 5)
        raise _WorkerFailure(f"raised {_one_line(exc)}") from None


def _preload(key: str, blob: bytes) -> int:
    """Warm-up task: unpickle the integrand once in this worker (errors wait for the first real task)."""
    try:
        _worker_integrand(key, blob)
    except (Exception, SystemExit, KeyboardInterrupt):  # noqa: BLE001 - reported by the first real task
        pass
    return os.getpid()


def _watch_parent(parent: int) -> None:
    """Worker side: end this worker as soon as its parent process is gone (issue 10 item 15a)."""
    while True:
        time.sleep(PARENT_POLL_SECONDS)
        if os.getppid() != parent:
            os._exit(0)


def _init_worker(parent: int, quiet: bool) -> None:
    """Initializer of every loky worker.

    * Its stdout and stderr go to ``/dev/null`` (``quiet``), so a worker never
      holds the parent's output pipes open (a caller reading them -- ssh,
      tee, a script -- would wait for the worker, issue 10 item 15a) and a
      worker killed by a signal prints no fault dump (issue 10 item 13); the
      parent reports a dead worker in one line.
    * A daemon thread ends the worker when the parent is gone, whatever the
      moment the parent was killed (it is then re-parented).
    """
    import threading
    if quiet:
        try:
            fd = os.open(os.devnull, os.O_RDWR)
            for target in (0, 1, 2):
                os.dup2(fd, target)
            os.close(fd)
        except OSError:
            pass
        try:
            import faulthandler
            faulthandler.disable()
        except Exception:  # noqa: BLE001
            pass
    threading.Thread(target=_watch_parent, args=(parent,), name="cubage-parent-watch", daemon=True).start()


def worker_setup() -> tuple[Callable, tuple]:
    """``(initializer, initargs)`` for any loky pool of this process: quiet workers that end with it.

    Pass them to ``ProcessPoolExecutor`` / ``get_reusable_executor`` so that
    every worker process of cubage behaves like the evaluator's (issue 10
    items 13 and 15a): no output on the terminal, no pipes held after cubage
    exits.
    """
    return _init_worker, (os.getpid(), QUIET_WORKERS)


class _DaemonThreadPool:
    """A minimal thread pool of daemon threads (``submit`` -> Future, ``shutdown``).

    Unlike :class:`concurrent.futures.ThreadPoolExecutor`, whose threads the
    interpreter joins at exit, a thread stuck in an integrand that never
    returns cannot keep the process from exiting (issue 10 item 9).
    """

    def __init__(self, workers: int, name: str):
        import queue
        import threading
        self._queue: queue.SimpleQueue = queue.SimpleQueue()
        self._threads = [threading.Thread(target=self._loop, name=f"{name}-{i}", daemon=True)
                         for i in range(workers)]
        for t in self._threads:
            t.start()

    def _loop(self) -> None:
        while True:
            item = self._queue.get()
            if item is None:
                return
            fut, fn, args = item
            if not fut.set_running_or_notify_cancel():
                continue
            try:
                fut.set_result(fn(*args))
            except BaseException as exc:  # noqa: BLE001 - handed to the waiting caller
                fut.set_exception(exc)

    def submit(self, fn, *args):
        from concurrent.futures import Future
        fut: Future = Future()
        self._queue.put((fut, fn, args))
        return fut

    def shutdown(self, wait: bool = True, cancel_futures: bool = False, **_):
        if cancel_futures:
            import queue
            while True:
                try:
                    item = self._queue.get_nowait()
                except queue.Empty:
                    break
                if item is not None:
                    item[0].cancel()
        for _t in self._threads:
            self._queue.put(None)
        if wait:
            for t in self._threads:
                t.join(timeout=5)


class _DaskPool:
    """Tasks on a dask cluster through the client's futures (``client.submit``), waited on in slices.

    A task whose worker is lost is run again by the scheduler on the
    remaining workers (up to its ``allowed-failures``, then ``KilledWorker``).
    While waiting, the pool checks the cluster: with no worker left for
    :data:`DASK_NO_WORKER_SECONDS`, or the scheduler gone, the wait ends with
    a one-line ConnectionError instead of blocking (issue 10 item 15b).
    """

    def __init__(self, client):
        self.client = client
        self._futures: list = []

    def run_all(self, calls: list) -> list:
        client = self.client
        futs = [client.submit(fn, *args, pure=False) for fn, args in calls]
        self._futures = futs
        try:
            return [self._result(fut) for fut in futs]
        except BaseException:
            self.cancel()
            raise
        finally:
            self._futures = []

    def _result(self, fut):
        """One task's value, waiting in slices and checking the cluster between them."""
        client = self.client
        empty_since = None
        while True:
            try:
                return fut.result(timeout=DASK_POLL_SECONDS)
            except TimeoutError:
                pass
            if client.status not in ("running", "connecting"):
                raise ConnectionError(f"lost the connection to the dask scheduler ({client.status})")
            try:
                alive = len(client.nthreads())
            except Exception as exc:  # noqa: BLE001 - the scheduler is unreachable
                raise ConnectionError(f"lost the connection to the dask scheduler ({_one_line(exc)})") from None
            if alive:
                empty_since = None
            elif empty_since is None:
                empty_since = time.monotonic()
            elif time.monotonic() - empty_since > DASK_NO_WORKER_SECONDS:
                raise ConnectionError(f"the dask cluster has had no worker for {DASK_NO_WORKER_SECONDS:g} s")

    def cancel(self) -> None:
        futs, self._futures = self._futures, []
        if futs:
            try:
                self.client.cancel(futs, force=True)
            except Exception:  # noqa: BLE001 - cancelling must not raise
                pass


def _noop(pause: float = 0.0) -> int:
    if pause:
        time.sleep(pause)
    return os.getpid()


# ---------------------------------------------------------------------------
# naming and options
# ---------------------------------------------------------------------------

def _clip(s: str, width: int = 80) -> str:
    s = " ".join(str(s).split())
    return s if len(s) <= width else s[: width - 3] + "..."


def integrand_name(f: Callable | None = None, spec: dict | None = None) -> str:
    """How error messages name the integrand: its expression or its import path."""
    if spec is not None:
        if spec.get("kind") == "python":
            return _clip(str(spec.get("target")))
        if spec.get("kind") == "expr":
            src = spec.get("source")
            src = "; ".join(src) if isinstance(src, (list, tuple)) else str(src)
            return f'"{_clip(src)}"'
    src = getattr(f, "source", None)
    if isinstance(src, (str, list)) and hasattr(f, "variables"):
        src = "; ".join(src) if isinstance(src, list) else src
        return f'"{_clip(src)}"'
    mod = getattr(f, "__module__", None) or "?"
    qual = getattr(f, "__qualname__", None) or type(f).__name__
    return _clip(f"{mod}:{qual}")


def resolve_workers(workers) -> int:
    """``workers`` as a positive int (``"auto"`` = :func:`os.cpu_count`).

    Raises
    ------
    ValueError
        One line naming the option, for anything but a positive int or "auto".
    """
    if isinstance(workers, str):
        w = workers.strip().lower()
        if w == "auto":
            return max(1, os.cpu_count() or 1)
        try:
            workers = int(w)
        except ValueError:
            raise ValueError(f"workers must be a positive integer or 'auto', got {workers!r}") from None
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ValueError(f"workers must be a positive integer or 'auto', got {workers!r}")
    return int(workers)


def _need_distributed():
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise ValueError("the dask backend needs the cluster extra: pip install 'cubage[cluster]'") from None
    return distributed


#: Seconds a dask scheduler has to send its handshake (and the client to finish connecting, x3).
CONNECT_SECONDS = 5.0
#: Address schemes of dask schedulers accepted by :func:`make_evaluator`.
CLUSTER_SCHEMES = ("tcp", "tls")


def _read_exactly(sock, n: int, deadline: float) -> bytes:
    buf = b""
    while len(buf) < n:
        left = deadline - time.monotonic()
        if left <= 0:
            raise TimeoutError(f"no dask handshake within {CONNECT_SECONDS:g} s")
        sock.settimeout(left)
        try:
            part = sock.recv(n - len(buf))
        except TimeoutError:
            raise TimeoutError(f"no dask handshake within {CONNECT_SECONDS:g} s") from None
        if not part:
            raise ConnectionError("the server closed the connection without a dask handshake")
        buf += part
    return buf


def _probe_scheduler(address: str) -> None:
    """Check, within :data:`CONNECT_SECONDS`, that a dask scheduler answers at a ``tcp://`` address.

    A dask server sends its handshake first, as one message framed by an
    8-byte little-endian length (``distributed.comm.tcp``); anything else (an
    HTTP server, a silent port, a closed one) is refused here, before the
    cluster client would block on it for minutes (issue 10 item 15b).
    Nothing is sent to the server.
    """
    import socket
    import struct
    hostport = address.split("://", 1)[1]
    host, sep, port = hostport.rpartition(":")
    host = host.strip("[]")
    if not sep or not host or not port.isdigit() or not 0 < int(port) < 65536:
        raise ValueError("is not a scheduler address like tcp://host:8786")
    deadline = time.monotonic() + CONNECT_SECONDS
    try:
        sock = socket.create_connection((host, int(port)), timeout=CONNECT_SECONDS)
    except (OSError, UnicodeError) as exc:
        raise ValueError(f"cannot connect: {_one_line(exc)}") from None
    try:
        with sock:
            (size,) = struct.unpack("<Q", _read_exactly(sock, 8, deadline))
            if not 0 < size <= 1 << 16:
                raise ValueError("is not a dask scheduler (it answers, but without a dask handshake)")
            body = _read_exactly(sock, size, deadline)
            if b"compression" not in body or b"python" not in body:
                raise ValueError("is not a dask scheduler (it answers, but without a dask handshake)")
    except (TimeoutError, ConnectionError, OSError) as exc:
        raise ValueError(f"is not a dask scheduler ({_one_line(exc)})") from None


def _scheduler_address(where: str) -> str:
    """The address in a dask scheduler file (JSON with an ``address``), or a one-line ValueError."""
    p = Path(where)
    if not p.is_file():
        raise ValueError(f"cluster {where!r}: no such scheduler file "
                         "(give tcp://host:port or the path of a scheduler file)")
    try:
        if p.stat().st_size > 1 << 20:
            raise ValueError("too large")
        info = json.loads(p.read_text(encoding="utf-8"))
        address = info["address"]
        if not isinstance(address, str) or "://" not in address:
            raise ValueError("no address")
    except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError):
        raise ValueError(f"cluster {where!r}: not a dask scheduler file (JSON with an \"address\")") from None
    return address


def _connect(cluster):
    """A ``distributed.Client`` for an address, a scheduler file or a Client (returned as is).

    An address is checked first (scheme, then the scheduler's handshake
    within :data:`CONNECT_SECONDS`); the client must then connect within
    three times that.  Every failure is a one-line ValueError.
    """
    distributed = _need_distributed()
    if isinstance(cluster, distributed.Client):
        return cluster, False, str(cluster.scheduler.address)
    where = str(cluster).strip()
    if not where:
        raise ValueError("cluster must be a scheduler address (tcp://host:8786) or a scheduler-file path")
    address = where if "://" in where else _scheduler_address(where)
    scheme = address.split("://", 1)[0].lower()
    if scheme not in CLUSTER_SCHEMES:
        raise ValueError(f"cluster {where!r}: unsupported scheme {scheme!r} "
                         f"(a dask scheduler address starts with {' or '.join(s + '://' for s in CLUSTER_SCHEMES)})")
    if scheme == "tcp":
        try:
            _probe_scheduler(address)
        except ValueError as exc:
            raise ValueError(f"cluster {where!r}: {exc}") from None
    box: dict = {}

    def connect():
        try:
            box["client"] = distributed.Client(address, timeout=f"{CONNECT_SECONDS:g}s", set_as_default=False)
        except BaseException as exc:  # noqa: BLE001 - reported below
            box["error"] = exc

    import threading
    t = threading.Thread(target=connect, name="cubage-dask-connect", daemon=True)
    t.start()
    t.join(3 * CONNECT_SECONDS)
    if "client" not in box:
        err = box.get("error")
        why = _one_line(err) if err is not None else f"no connection within {3 * CONNECT_SECONDS:g} s"
        raise ValueError(f"cannot reach the dask scheduler at {where}: {_clip(why, 160)}")
    client = box["client"]
    return client, True, str(client.scheduler.address)


# ---------------------------------------------------------------------------
# evaluators
# ---------------------------------------------------------------------------

class Evaluator:
    """Base class: ``evaluator(f, X) -> F``, a context manager with :meth:`close`."""

    #: "serial" while steps are evaluated in-process, "parallel" once they go to the pool.
    mode = "serial"

    def __call__(self, f: Callable, X: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def describe(self) -> str:
        """One line for the UI."""
        raise NotImplementedError

    def close(self) -> None:
        """Release workers; idempotent."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


class PoolEvaluator(Evaluator):
    """Chunked evaluation on a pool: loky processes, threads or a dask cluster (via joblib).

    Parameters
    ----------
    workers : int
        Number of workers (ignored for dask, which uses the cluster's).
    backend : {"processes", "threads", "dask"}
        Pool kind.
    cluster : str or distributed.Client, optional
        For dask: ``tcp://host:port``, a scheduler-file path or a Client.
    spec : dict, optional
        ``Problem.integrand_spec``; the integrand is sent to workers as this
        spec (expression source or import path) instead of being pickled.
    chunk_points : int, optional
        Fixed chunk size (default: :func:`chunk_bounds`'s rule).
    auto : bool
        Decide per step whether to use the pool (module docstring); the pool
        starts only when first needed.  If False every step with two or more
        chunks goes to the pool, started at once (a one-chunk step is
        evaluated in-process: same value, no round-trip).
    min_serial_seconds : float, optional
        Auto mode: serial evaluation time to spend before the pool may start
        (default :data:`STARTUP_SECONDS` of the backend).

    Attributes
    ----------
    mode : str
        "serial" until a step has gone to the pool, then "parallel".
    steps_parallel, steps_serial : int
        How many steps went each way.
    cost_per_point : float or None
        The current per-point cost estimate (seconds), auto mode.
    dispatch_seconds : float or None
        The measured dispatch round-trip, once the pool exists.
    """

    def __init__(self, workers: int = 2, backend: str = "processes", cluster=None, spec: dict | None = None,
                 *, chunk_points: int | None = None, auto: bool = False,
                 min_serial_seconds: float | None = None):
        if backend not in ("processes", "threads", "dask"):
            raise ValueError(f"backend must be one of processes, threads, dask here, got {backend!r}")
        if chunk_points is not None and (isinstance(chunk_points, bool) or int(chunk_points) < 1):
            raise ValueError(f"chunk_points must be a positive integer, got {chunk_points!r}")
        self.backend = backend
        self.workers = resolve_workers(workers)
        self.spec = dict(spec) if spec is not None else None
        self.chunk_points = None if chunk_points is None else int(chunk_points)
        self.auto = bool(auto)
        self.min_serial_seconds = (STARTUP_SECONDS[backend] if min_serial_seconds is None
                                   else float(min_serial_seconds))
        self.mode = "serial"
        self.steps_parallel = 0
        self.steps_serial = 0
        self.cost_per_point: float | None = None
        self.dispatch_seconds: float | None = None
        self._measures: list[float] = []
        self._serial_spent = 0.0
        self._parallel = None
        self._client = None
        self._own_client = False
        self._address = None
        self._executor = None
        self._closed = False
        self._payload_cache: tuple | None = None
        if backend == "dask":
            if cluster is None:
                raise ValueError("the dask backend needs a cluster: --cluster tcp://host:8786 or a scheduler file")
            self._client, self._own_client, self._address = _connect(cluster)
        if not self.auto:
            self._start()

    # -- pool ----------------------------------------------------------------
    def _effective_workers(self) -> int:
        if self.backend == "dask" and self._client is not None:
            try:
                return max(1, sum(self._client.nthreads().values()))
            except Exception:  # noqa: BLE001 - scheduler hiccup: grouping only
                return max(1, self.workers)
        return self.workers

    def _start(self) -> None:
        if self._executor is not None or self._parallel is not None:
            return
        if self.backend == "processes":
            from joblib.externals.loky import ProcessPoolExecutor
            per = str(max(1, (os.cpu_count() or 1) // self.workers))
            env = {"OMP_NUM_THREADS": per, "OPENBLAS_NUM_THREADS": per, "MKL_NUM_THREADS": per}
            self._executor = ProcessPoolExecutor(max_workers=self.workers, env=env, initializer=_init_worker,
                                                 initargs=(os.getpid(), QUIET_WORKERS))
        elif self.backend == "threads":
            self._executor = _DaemonThreadPool(self.workers, "cubage-eval")
        else:
            self._parallel = _DaskPool(self._client)
        # warm-up (spawns the worker processes; unpickles the integrand there when it is known),
        # then time one round of empty tasks
        w = self._effective_workers()
        cached = self._payload_cache
        if cached is not None and cached[1][0] == "pickled":
            self._run_all([(_preload, cached[1][1:])] * w)
        else:
            self._run_all([(_noop, ())] * w)
        t0 = time.perf_counter()
        self._run_all([(_noop, ())] * w)
        self.dispatch_seconds = time.perf_counter() - t0

    def _run_all(self, calls: list) -> list:
        """Run ``[(fn, args), ...]`` on the pool; results in order."""
        ex = self._executor
        if ex is not None:
            futures = [ex.submit(fn, *args) for fn, args in calls]
            try:
                return [fu.result() for fu in futures]
            except BaseException:
                for fu in futures:
                    fu.cancel()
                if self.backend == "processes" and self._executor is ex:
                    # kill what still runs (or is broken); a fresh pool starts on the next step
                    self._executor = None
                    try:
                        ex.shutdown(wait=True, kill_workers=True)
                    except Exception:  # noqa: BLE001
                        pass
                raise
        return self._parallel.run_all(calls)

    def cancel(self) -> None:
        """Give up on the evaluation in progress (the run abandoned it, issue 10 item 9).

        Worker processes are killed and reaped (a fresh pool starts if the
        evaluator is used again); a thread pool is left to its stuck threads
        (daemon threads, they cannot keep the process alive) and replaced;
        dask tasks are cancelled.  The evaluator stays usable.
        """
        ex, self._executor = self._executor, None
        if ex is not None:
            try:
                if self.backend == "processes":
                    ex.shutdown(wait=True, kill_workers=True)
                else:
                    ex.shutdown(wait=False, cancel_futures=True)
            except Exception:  # noqa: BLE001 - cancelling must not raise
                pass
        if self._parallel is not None:
            self._parallel.cancel()

    def worker_pids(self) -> list[int]:
        """Process ids answering a round of short tasks (for tests and diagnostics)."""
        if self._executor is None and self._parallel is None:
            return []
        w = self._effective_workers()
        return sorted(set(self._run_all([(_noop, (0.1,))] * (2 * w))))

    def close(self) -> None:
        """Shut the pool down (and the dask client this evaluator opened); idempotent."""
        if self._closed:
            return
        self._closed = True
        ex, self._executor = self._executor, None
        if ex is not None:
            try:
                if self.backend == "threads":
                    ex.shutdown(wait=True, cancel_futures=True)
                else:
                    ex.shutdown(wait=True, kill_workers=True)   # reaped, even if one is stuck
            except Exception:  # noqa: BLE001 - closing must not raise
                pass
        par, self._parallel = self._parallel, None
        if par is not None:
            par.cancel()
        if self._client is not None and self._own_client:
            try:
                self._client.close(timeout=10)
            except Exception:  # noqa: BLE001
                pass
        self._client = None

    # -- description ------------------------------------------------------------
    def _pool_words(self) -> str:
        if self.backend == "dask":
            return f"dask at {self._address}"
        if self.backend == "threads":
            return f"{self.workers} thread{'s' if self.workers != 1 else ''}"
        return f"{self.workers} loky process{'es' if self.workers != 1 else ''}"

    def describe(self) -> str:
        """One line, e.g. ``"2 loky processes"``, ``"dask at tcp://host:8786"`` or
        ``"auto: in-process so far (0.05 us/point); 2 loky processes when a step is costly"``."""
        if not self.auto:
            return self._pool_words()
        cost = "" if self.cost_per_point is None else f" ({self.cost_per_point * 1e6:.3g} us/point)"
        if self.mode == "serial":
            return f"auto: in-process so far{cost}; {self._pool_words()} when a step is costly"
        return f"auto: {self._pool_words()}{cost}"

    # -- evaluation ---------------------------------------------------------------
    def _payload(self, f: Callable) -> tuple:
        if self.backend == "threads":
            return ("callable", f)
        cached = self._payload_cache
        if cached is not None and cached[0] is f:
            return cached[1]
        payload = ("pickled", *_pickled(f))
        self._payload_cache = (f, payload)
        return payload

    def _want_parallel(self, n: int, nchunks: int) -> bool:
        if nchunks < 2:
            return False
        if not self.auto:
            return True
        if len(self._measures) < 2:
            return False
        est = self.cost_per_point * n
        dispatch = self.dispatch_seconds if self.dispatch_seconds is not None else DISPATCH_GUESS[self.backend]
        if est <= max(MIN_PARALLEL_SECONDS, DISPATCH_FACTOR * dispatch):
            return False
        started = self._executor is not None or self._parallel is not None
        return started or self._serial_spent >= self.min_serial_seconds

    def _serial(self, f: Callable, X: np.ndarray):
        t0 = time.perf_counter()
        out = f(X)
        if self.auto:
            dt = time.perf_counter() - t0
            self._serial_spent += dt
            if dt >= MIN_MEASURE_SECONDS and X.shape[0] > 0:
                self._measures = (self._measures + [dt / X.shape[0]])[-2:]
                self.cost_per_point = min(self._measures)
        self.steps_serial += 1
        return out

    def __call__(self, f: Callable, X: np.ndarray) -> np.ndarray:
        if self._closed:
            raise RuntimeError("this evaluator has been closed")
        X = np.asarray(X, dtype=np.float64)
        n = X.shape[0]
        bounds = chunk_bounds(n, self.chunk_points)
        if not self._want_parallel(n, bounds.size - 1):
            return self._serial(f, X)
        self._payload(f)                 # pickled once (and preloaded by the workers as they start)
        try:
            self._start()
        except Exception as exc:  # noqa: BLE001 - cannot start workers: say so, as an integrand failure
            raise IntegrandError(f"could not start {self._pool_words()}: {_one_line(exc)}") from None
        return self._dispatch(f, X, bounds)

    def _dispatch(self, f: Callable, X: np.ndarray, bounds: np.ndarray) -> np.ndarray:
        payload = self._payload(f)
        groups = _group(bounds, TASKS_PER_WORKER * self._effective_workers())
        # the engine's points are column-major; a row slice of them would be pickled in row-major
        # order, making column access slower in the worker -- keep the caller's layout
        fortran = self.backend != "threads" and X.flags.f_contiguous and not X.flags.c_contiguous
        parts_in = (np.asfortranarray(X[g[0]:g[-1]]) if fortran else X[g[0]:g[-1]] for g in groups)
        calls = [(_run_task, (payload, part, g)) for part, g in zip(parts_in, groups)]
        name = integrand_name(f, self.spec)
        try:
            parts = self._run_all(calls)
        except _WorkerFailure as exc:
            raise IntegrandError(f"integrand {name} {exc.message} (in a worker: {self._pool_words()})") from None
        except (KeyboardInterrupt, SystemExit):
            raise
        except BaseException as exc:  # noqa: BLE001 - dead worker, lost connection, unpickling trouble
            raise IntegrandError(self._lost_worker_message(name, exc)) from None
        self.mode = "parallel"
        self.steps_parallel += 1
        if len(parts) == 1:
            return parts[0]
        shapes = {(p.ndim, p.shape[1:]) for p in parts}
        if len(shapes) > 1:
            raise IntegrandError(f"integrand {name} returned arrays of different shapes for different points "
                                 f"({', '.join(sorted(str(p.shape) for p in parts[:4]))}); expected (n,) or (n, m) "
                                 "with the same m everywhere")
        return np.concatenate(parts)

    def _lost_worker_message(self, name: str, exc: BaseException) -> str:
        kind = type(exc).__name__
        first = (str(exc).strip().splitlines() or [""])[0].strip()
        if kind in ("TerminatedWorkerError", "BrokenProcessPool", "KilledWorker", "CommClosedError"):
            codes = re.search(r"exit codes of the workers are \{([^}]*)\}", str(exc))
            if codes:
                detail = f" ({kind}, exit code {codes.group(1)})"
            else:
                detail = f" ({kind}: {_clip(first, 120)})" if first else f" ({kind})"
            return f"a worker died while evaluating integrand {name}{detail}"
        return f"evaluating integrand {name} on {self._pool_words()} failed: {kind}: {_clip(first, 200)}"


def make_evaluator(workers=1, backend: str = "auto", cluster=None, spec: dict | None = None, *,
                   chunk_points: int | None = None) -> Evaluator | None:
    """Build the evaluator the engine calls once per step.

    Parameters
    ----------
    workers : int or "auto"
        Number of local workers (``"auto"`` = :func:`os.cpu_count`).  Ignored
        by the dask backend, which uses every worker of the cluster.
    backend : {"auto", "serial", "processes", "threads", "dask"}
        See the module docstring.  With ``cluster`` given, "auto" means dask.
    cluster : str or distributed.Client, optional
        Dask scheduler: ``"tcp://host:8786"`` or a scheduler-file path.
    spec : dict, optional
        ``Problem.integrand_spec``: how workers re-create the integrand.
    chunk_points : int, optional
        Fixed chunk size; by default a function of the step's point count.

    Returns
    -------
    Evaluator or None
        ``None`` when everything runs in-process (backend "serial", or "auto"
        with one worker and no cluster): the engine then calls ``f(X)``
        itself.  Otherwise an :class:`Evaluator`; close it when done (it is a
        context manager).

    Raises
    ------
    ValueError
        One-line message for a bad option, dask without the cluster extra, or
        a scheduler that cannot be reached.
    """
    if not isinstance(backend, str) or backend.strip().lower() not in BACKENDS:
        raise ValueError(f"backend must be one of {', '.join(BACKENDS)}, got {backend!r}")
    backend = backend.strip().lower()
    w = resolve_workers(workers)
    if cluster is not None and isinstance(cluster, str) and not cluster.strip():
        cluster = None
    if cluster is not None and backend not in ("auto", "dask"):
        raise ValueError(f"a cluster is used by the dask backend only, not by backend {backend!r}")
    if backend == "serial":
        return None
    if backend == "dask" or (backend == "auto" and cluster is not None):
        _need_distributed()
        return PoolEvaluator(w, "dask", cluster, spec, chunk_points=chunk_points, auto=(backend == "auto"))
    if backend == "auto":
        if w == 1:
            return None
        return PoolEvaluator(w, "processes", None, spec, chunk_points=chunk_points, auto=True)
    return PoolEvaluator(w, backend, None, spec, chunk_points=chunk_points, auto=False)


def describe_evaluator(evaluator: Evaluator | None) -> str:
    """One line for the UI; ``None`` (the engine's own call) reads "in-process"."""
    if evaluator is None:
        return "in-process"
    return evaluator.describe()
