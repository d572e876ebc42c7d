"""Calls that the caller can give up on: how a run ends even when its integrand never returns.

The engine makes every integrand call (in-process, or through an evaluator)
in a helper thread and waits for it in short slices.  Between slices it asks
its ``should_abandon`` callback whether to go on waiting: a stop request, a
time limit or a cancel returns a reason, and the caller stops waiting at once
and raises :class:`Abandoned`.  The call itself is left to finish (or not) in
its daemon thread; its result, if it ever comes, is dropped.  Nothing of the
run's state has changed at that point (the engine writes a step's results
only after its evaluation), so the run ends with the state and checkpoint of
its last complete step.

Two side effects of calling in a thread, both wanted:

* ``SystemExit`` and ``KeyboardInterrupt`` raised *by the integrand* stay in
  the helper thread and come back as :class:`CallFailed`, so the engine
  reports them as integrand failures (issue 10 item 5), while a real Ctrl-C
  (delivered to the waiting main thread) still interrupts the caller;
* signal handlers run in the main thread within one wait slice, even while
  the integrand is stuck in a long computation or a blocking call.

The call runs in a copy of the caller's :mod:`contextvars` context, so a
``numpy.errstate`` (or any other context variable) set around the engine
applies to the integrand as if it were called directly.

The helper thread is kept between calls (a hand-over costs tens of
microseconds, not a thread start) and ends by itself after
:data:`IDLE_SECONDS` without work, so runs that are dropped leave no thread.
"""

from __future__ import annotations

import contextvars
import queue
import threading
from collections.abc import Callable

#: Seconds of each wait slice, between two questions to ``should_abandon``.
SLICE_SECONDS = 0.05
#: A helper thread with no work for this long ends.
IDLE_SECONDS = 5.0

__all__ = ["Abandoned", "CallFailed", "AbandonableCaller", "SLICE_SECONDS", "IDLE_SECONDS"]


class Abandoned(Exception):
    """The caller stopped waiting for a call; ``reason`` is what ``should_abandon`` returned."""

    def __init__(self, reason: str):
        super().__init__(reason)
        self.reason = reason


class CallFailed(Exception):
    """The call raised; ``error`` is what it raised (any ``BaseException``, ``SystemExit`` included)."""

    def __init__(self, error: BaseException):
        super().__init__(f"{type(error).__name__}: {error}")
        self.error = error


class _Job:
    __slots__ = ("fn", "args", "context", "done", "value", "error")

    def __init__(self, fn: Callable, args: tuple):
        self.fn = fn
        self.args = args
        self.context = contextvars.copy_context()   # the caller's numpy errstate and other context
        self.done = threading.Event()
        self.value = None
        self.error: BaseException | None = None


class AbandonableCaller:
    """Runs calls in a helper thread; :meth:`call` waits and can give up.

    One caller serves one run (calls are sequential); it is safe to drop
    without closing it.
    """

    def __init__(self, name: str = "cubage-integrand"):
        self.name = name
        self._jobs: queue.SimpleQueue | None = None
        self._thread: threading.Thread | None = None
        self._lock = threading.Lock()

    def _worker(self, jobs: queue.SimpleQueue) -> None:
        while True:
            try:
                job = jobs.get(timeout=IDLE_SECONDS)
            except queue.Empty:
                with self._lock:
                    if self._jobs is jobs and jobs.empty():
                        self._jobs = None
                        self._thread = None
                        return
                continue
            try:
                job.value = job.context.run(job.fn, *job.args)
            except BaseException as exc:  # noqa: BLE001 - SystemExit/KeyboardInterrupt of user code included
                job.error = exc
            finally:
                job.done.set()
            job = None
            with self._lock:
                if self._jobs is not jobs:      # abandoned while busy: a new thread serves the caller
                    return

    def _submit(self, job: _Job) -> None:
        with self._lock:
            if self._jobs is None or self._thread is None or not self._thread.is_alive():
                self._jobs = queue.SimpleQueue()
                self._thread = threading.Thread(target=self._worker, args=(self._jobs,), name=self.name,
                                                daemon=True)
                self._thread.start()
            self._jobs.put(job)

    def _abandon(self) -> None:
        with self._lock:
            self._jobs = None
            self._thread = None

    def call(self, fn: Callable, args: tuple, should_abandon: Callable[[], str | None] | None = None):
        """``fn(*args)`` in the helper thread; its value.

        Raises
        ------
        CallFailed
            ``fn`` raised (the original exception is ``.error``).
        Abandoned
            ``should_abandon()`` returned a reason before ``fn`` returned.
        BaseException
            Whatever interrupts the waiting thread itself (a real
            ``KeyboardInterrupt``); the call is abandoned then too.
        """
        job = _Job(fn, args)
        self._submit(job)
        try:
            while not job.done.wait(SLICE_SECONDS):
                why = should_abandon() if should_abandon is not None else None
                if why:
                    self._abandon()
                    raise Abandoned(why)
        except Abandoned:
            raise
        except BaseException:
            self._abandon()
            raise
        if job.error is not None:
            err, job.error = job.error, None
            raise CallFailed(err) from None
        return job.value
