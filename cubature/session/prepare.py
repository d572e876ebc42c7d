"""Preparing a run: a problem plus the user's overrides -> a validated engine Run and its evaluator.

Every check of a goal or method value a user can type lives here, once:
tolerances, budget, time limit, workers, rule and degree.  The command line's
option parsers and the UI's fields call the ``check_*`` functions; the
problem file's own values are checked by :mod:`cubage.problem.problem_file`
and the combination (both tolerances zero, a rule that does not fit the
domain, a budget below one region) by :func:`prepare_run`.

Each failure is an :class:`InputError` whose text is one line naming where
the value came from (``--rel-tol``, ``problems/x.toml: [method] rule``, the
UI's field).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

__all__ = ["InputError", "check_tolerance", "check_budget", "check_time_limit", "check_workers",
           "parse_number", "parse_count", "Overrides", "PreparedRun", "prepare_run", "resume_run", "scan_settings",
           "make_evaluator", "choose_cluster", "open_cluster", "PreparedScan", "prepare_scan", "worker_count",
           "GOAL_KEYS", "METHOD_KEYS"]

GOAL_KEYS = ("rel_tol", "abs_tol", "budget", "time_limit", "memory_ceiling")
METHOD_KEYS = ("rule", "degree", "workers", "backend", "cluster")


class InputError(ValueError):
    """A value the user gave that cannot be used; ``str(err)`` is one line naming where it came from."""


def _where(where: str, msg: str) -> InputError:
    return InputError(f"{where}: {msg}" if where else msg)


# --------------------------------------------------------------------------
# values
# --------------------------------------------------------------------------

def parse_number(text: str, what: str = "must be a number") -> float:
    """A float from user text (``1e-8``, ``1_000``); NaN refused.  Raises ValueError with a one-line text."""
    try:
        x = float(str(text).strip().replace("_", ""))
    except ValueError:
        raise ValueError(f"{what}, got {text!r}") from None
    if math.isnan(x):
        raise ValueError(f"{what}, got NaN")
    return x


def parse_count(text: str) -> int:
    """A positive whole number from user text (``10_000_000``, ``1e7``, ``10,000``)."""
    t = str(text).strip().replace("_", "").replace(",", "")
    try:
        x = int(t)
    except ValueError:
        try:
            f = float(t)
        except ValueError:
            raise ValueError(f"must be a whole number like 10_000_000 or 1e7, got {text!r}") from None
        if not (math.isfinite(f) and f == int(f)):
            raise ValueError(f"must be a whole number, got {text!r}") from None
        x = int(f)
    if x <= 0:
        raise ValueError(f"must be positive, got {text!r}")
    return x


def _is_real(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def check_tolerance(x, where: str = "") -> float:
    """A tolerance: a finite number >= 0."""
    if not _is_real(x) or not (0 <= x < math.inf):
        raise _where(where, f"must be a finite number >= 0 like 1e-8, got {x!r}")
    return float(x)


def check_budget(x, where: str = "") -> int:
    """An evaluation budget: a whole number >= 1."""
    if isinstance(x, float) and math.isfinite(x) and x == int(x):
        x = int(x)
    if not isinstance(x, int) or isinstance(x, bool) or x < 1:
        raise _where(where, f"must be a whole number >= 1 like 10_000_000, got {x!r}")
    return x


def check_time_limit(x, where: str = "") -> float | None:
    """A time limit: None or a finite number of seconds > 0."""
    if x is None:
        return None
    if not _is_real(x) or not (0 < x < math.inf):
        raise _where(where, f"must be a number of seconds > 0, got {x!r}")
    return float(x)


#: Most workers a user may ask for: beyond it the number is a slip of the keyboard, and starting that many worker
#: processes or threads would bring the machine down before the first step.
MAX_WORKERS = 1024


def check_workers(x, where: str = "") -> int | str:
    """Workers: a whole number from 1 to :data:`MAX_WORKERS`, or ``"auto"``."""
    if x == "auto":
        return "auto"
    if isinstance(x, str):
        try:
            x = int(x.strip())
        except ValueError:
            raise _where(where, f'must be a whole number >= 1 or "auto", got {x!r}') from None
    if not isinstance(x, int) or isinstance(x, bool) or x < 1:
        raise _where(where, f'must be a whole number >= 1 or "auto", got {x!r}')
    if x > MAX_WORKERS:
        raise _where(where, f"{x:,} workers is more than any machine runs (at most {MAX_WORKERS:,}; \"auto\" "
                            "uses every core)")
    return x


_CHECKS = {"rel_tol": check_tolerance, "abs_tol": check_tolerance, "budget": check_budget,
           "time_limit": check_time_limit, "workers": check_workers}


# --------------------------------------------------------------------------
# overrides
# --------------------------------------------------------------------------

@dataclass
class Overrides:
    """What the user chose on top of the problem file (None = keep the file's).

    ``labels`` maps a key to how the front end names it in messages (the
    command line: ``{"rel_tol": "--rel-tol", ...}``; default: the key).
    """

    rel_tol: float | None = None
    abs_tol: float | None = None
    budget: int | None = None
    time_limit: float | None = None
    memory_ceiling: int | None = None
    rule: str | None = None
    degree: int | None = None
    workers: int | str | None = None
    backend: str | None = None
    cluster: str | None = None
    labels: dict = field(default_factory=dict)

    def given(self) -> dict:
        """The keys given (not None), for the ledger."""
        return {k: getattr(self, k) for k in GOAL_KEYS + METHOD_KEYS if getattr(self, k) is not None}

    def label(self, key: str) -> str:
        return self.labels.get(key, key)

    def validate(self) -> None:
        """Check every given value (:class:`InputError`)."""
        for k, fn in _CHECKS.items():
            v = getattr(self, k)
            if v is not None:
                setattr(self, k, fn(v, self.label(k)))


def _problem_where(problem, table: str, key: str) -> str:
    path = getattr(problem, "path", None)
    return f"{path if path is not None else '<problem>'}: [{table}] {key}"


# --------------------------------------------------------------------------
# the evaluator
# --------------------------------------------------------------------------

def make_evaluator(problem, workers=None, backend=None, cluster=None, *, labels: dict | None = None
                   ) -> tuple[Any, str, str | None]:
    """The evaluator for ``problem``'s method with overrides (the one construction of both front ends).

    Returns
    -------
    evaluator or None, str, str or None
        The evaluator (None: in-process), a one-line description, and a note
        for the user (e.g. parallel evaluation unavailable) or None.

    Raises
    ------
    InputError
        A bad workers/backend/cluster value, naming the option or file key it came from.
    """
    labels = labels or {}
    given = {"workers": workers, "backend": backend, "cluster": cluster}
    m = problem.method
    workers = workers if workers is not None else m.workers
    backend = backend if backend is not None else m.backend
    cluster, _ = choose_cluster(problem, cluster)
    want = workers not in (1, None) or backend not in ("auto", "serial", None) or cluster
    try:
        from cubage.engine import parallel
    except ImportError:
        note = "parallel evaluation is not available in this installation; evaluating serially" if want else None
        return None, "in-process", note
    try:
        ev = parallel.make_evaluator(workers=workers, backend=backend, cluster=cluster, spec=problem.integrand_spec)
    except (ValueError, TypeError) as exc:
        msg = str(exc)
        key = "cluster" if ("cluster" in msg or "scheduler" in msg) and cluster else \
            "workers" if "workers" in msg else "backend"
        where = labels.get(key, key) if given[key] is not None else _problem_where(problem, "method", key)
        raise InputError(f"{where}: {msg}") from None
    return ev, parallel.describe_evaluator(ev), _method_note(problem, given)


def choose_cluster(problem, named: str | None = None) -> tuple[str | None, str | None]:
    """The dask cluster a run or a scan of ``problem`` connects to, and a note for the user (one rule for both).

    A cluster is contacted only when the user names it (``named``: ``--cluster ADDR``) or trusts the file
    (``--allow-python``, the UI's trust question): :func:`cubage.problem.problem_file.bind_problem` keeps
    ``[method] cluster`` only for a trusted file and otherwise moves it to ``Method.cluster_ignored``, which
    gives the note (a dask scheduler can run code in the process that connects to it; issue 10 item 0).

    Returns
    -------
    str or None, str or None
        The scheduler address or file to connect to (None: evaluate on this machine), and the note (or None).
    """
    m = problem.method
    if named is not None:
        return named, None
    if m.cluster is not None:
        return m.cluster, None
    ignored = getattr(m, "cluster_ignored", None)
    if ignored:
        return None, (f"{_problem_where(problem, 'method', 'cluster')} {ignored} not used: cubage connects only "
                      "to a cluster named with --cluster (or a trusted file's, with --allow-python), since a dask "
                      "scheduler can run code in this process; evaluating on this machine")
    return None, None


class open_cluster:
    """``with open_cluster(address, label) as client``: a dask client for ``address`` (None: no cluster, the
    client is None), closed on exit when this opened it.  For scans, whose chains go to the cluster's executor.

    Raises
    ------
    InputError
        The address cannot be used (not a scheduler, unreachable, dask not installed), named by ``label``.
    """

    def __init__(self, address: str | None, label: str = "cluster"):
        self.address = address
        self.label = label
        self.client = None
        self._owned = False

    def __enter__(self):
        if not self.address:
            return None
        from cubage.engine.parallel import _connect
        try:
            self.client, self._owned, _ = _connect(self.address)
        except (ValueError, ImportError) as exc:
            raise InputError(f"{self.label}: {str(exc).splitlines()[0] if str(exc) else type(exc).__name__}") \
                from None
        return self.client

    def __exit__(self, *exc) -> bool:
        if self.client is not None and self._owned:
            try:
                self.client.close()
            except Exception:  # noqa: BLE001 - closing must never hide the scan's outcome
                pass
        return False


def _method_note(problem, given: dict) -> str | None:
    """What of the file's method was not applied: an untrusted cluster, workers above the cores (issue 10
    items 0 and 15d; the problem file keeps them in ``cluster_ignored`` / ``workers_asked``)."""
    m = problem.method
    notes = []
    _, cluster_note = choose_cluster(problem, given.get("cluster"))
    if cluster_note:
        notes.append(cluster_note)
    if given.get("workers") is None and getattr(m, "workers_asked", None):
        notes.append(f"{_problem_where(problem, 'method', 'workers')} = {m.workers_asked} capped at this "
                     f"machine's {m.workers} cores (--workers N sets any number)")
    return "; ".join(notes) or None


def close_evaluator(ev) -> None:
    """Close an evaluator; never raises (closing must not hide the run's outcome)."""
    for name in ("close", "shutdown"):
        fn = getattr(ev, name, None)
        if callable(fn):
            try:
                fn()
            except Exception:  # noqa: BLE001
                pass
            return


# --------------------------------------------------------------------------
# the run
# --------------------------------------------------------------------------

@dataclass
class PreparedRun:
    """A validated run, ready to drive.

    Attributes
    ----------
    problem : Problem
    run : cubage.Run
        The engine run (its rule built once, its fingerprint given once).
    evaluator : Evaluator or None
        None until :meth:`start_evaluator` (or when evaluating in-process).
    evaluation : str
        What evaluates the integrand ("in-process", "2 processes", ...).
    fingerprint : str
        The problem's fingerprint (hashed once per run).
    overrides : Overrides
    notes : list of str
        One-line notes for the user.
    """

    problem: Any
    run: Any
    overrides: Overrides
    fingerprint: str
    evaluator: Any = None
    evaluation: str = "in-process"
    notes: list = field(default_factory=list)

    @property
    def nodes(self) -> int:
        """Integrand evaluations per region of the run's rule."""
        return int(self.run.rule.size)

    @property
    def method_text(self) -> str:
        """``"<rule>, <evaluation>"`` for displays."""
        return f"{self.run.rule_name}, {self.evaluation}"

    def settings_record(self) -> dict:
        """The goal and method the run uses (for the result record and the ledger)."""
        s = self.run.settings
        rec = {"rel_tol": s.rel_tol, "abs_tol": s.abs_tol, "budget": int(s.budget), "time_limit": s.time_limit,
               "rule": self.run.rule_name, "evaluation": self.evaluation}
        if getattr(self.problem.domain, "kind", None) == "simplex" or "degree" in self.overrides.given():
            rec["degree"] = s.degree
        return rec

    def start_evaluator(self) -> None:
        """Build the evaluator (may start a worker pool: install signal handling first)."""
        o = self.overrides
        ev, how, note = make_evaluator(self.problem, o.workers, o.backend, o.cluster, labels=o.labels)
        self.evaluator, self.evaluation = ev, how
        self.run.evaluator = ev
        if note:
            self.notes.append(note)

    def close(self) -> None:
        """Close the evaluator (never raises)."""
        ev, self.evaluator = self.evaluator, None
        if ev is not None:
            close_evaluator(ev)
            self.run.evaluator = None

    def __enter__(self) -> PreparedRun:
        return self

    def __exit__(self, *exc) -> bool:
        self.close()
        return False


def _goal(problem, o: Overrides) -> dict:
    from cubage.engine.run import DEFAULT_BUDGET
    g = problem.goal
    rel = o.rel_tol if o.rel_tol is not None else g.rel_tol
    abs_ = o.abs_tol if o.abs_tol is not None else g.abs_tol
    if rel == 0 and abs_ == 0:
        which = [o.label(k) for k in ("rel_tol", "abs_tol") if getattr(o, k) is not None]
        where = "/".join(which) if which else _problem_where(problem, "goal", "rel_tol/abs_tol")
        raise InputError(f"{where}: both tolerances are zero; the goal could never be met")
    return {"rel_tol": rel, "abs_tol": abs_, "budget": o.budget or g.budget or DEFAULT_BUDGET,
            "time_limit": o.time_limit if o.time_limit is not None else g.time_limit,
            "memory_ceiling": (o.memory_ceiling if o.memory_ceiling is not None
                               else getattr(g, "memory_ceiling", None))}


def scan_settings(problem, overrides: Overrides | None = None) -> dict:
    """The engine settings (goal, rule, degree) of ``problem`` with ``overrides``, checked, without a Run.

    For runs of many points (scans), each of which builds its own Run.

    Raises
    ------
    InputError
    """
    from cubage.engine.rules import box_rule, default_rule, simplex_rule
    o = overrides or Overrides()
    o.validate()
    settings = _goal(problem, o)
    kind = getattr(problem.domain, "kind", "box")
    rule = o.rule or problem.method.rule or default_rule(kind, problem.domain.dim)
    degree = o.degree if o.degree is not None else problem.method.degree
    try:
        if kind == "simplex":
            simplex_rule(rule, problem.domain.dim, degree or 7)
        else:
            box_rule(rule, problem.domain.dim)
    except (ValueError, TypeError) as exc:
        raise _run_error(problem, o, exc) from None
    settings["rule"] = rule
    if degree is not None:
        settings["degree"] = degree
    return settings


def worker_count(workers) -> int:
    """A number of workers as a count: ``None`` -> 1, ``"auto"`` -> this machine's cores, else the number."""
    import os
    if workers in (None, 1):
        return 1
    if workers == "auto":
        return max(1, os.cpu_count() or 1)
    return max(1, int(workers))


@dataclass
class PreparedScan:
    """A validated scan of a problem with a ``[scan]`` table: what :func:`cubage.session.scan.run_scan` needs
    besides the problem, decided once for the command line and the text UI.

    Attributes
    ----------
    settings : dict
        The engine settings of every point (goal, rule, degree; :func:`scan_settings`).
    workers : int
        Worker processes running chains side by side.
    cluster : str or None
        The dask scheduler to connect to (:func:`choose_cluster`: named, or a trusted file's), or None.
    notes : list of str
        One-line notes for the user (a file's cluster not used, workers capped at the cores).
    """

    settings: dict
    workers: int
    cluster: str | None
    notes: list = field(default_factory=list)


def prepare_scan(problem, overrides: Overrides | None = None) -> PreparedScan:
    """Validate ``overrides`` against ``problem`` for a scan: settings, workers and the cluster (one rule with
    runs: a file's ``[method] cluster`` only when the file is trusted; cleanup item 1).

    Raises
    ------
    InputError
    """
    o = overrides or Overrides()
    settings = scan_settings(problem, o)
    workers = worker_count(o.workers if o.workers is not None else problem.method.workers)
    cluster, _ = choose_cluster(problem, o.cluster)
    note = _method_note(problem, {"cluster": o.cluster, "workers": o.workers})
    return PreparedScan(settings, workers, cluster, [note] if note else [])


def prepare_run(problem, overrides: Overrides | None = None, *, snapshot_interval: float = 0.25,
                start_evaluator: bool = False) -> PreparedRun:
    """Validate ``overrides`` against ``problem`` and build the engine Run.

    Parameters
    ----------
    problem : Problem
        A bound problem (its integrand callable).
    overrides : Overrides, optional
    snapshot_interval : float
        Seconds between the run's snapshots.
    start_evaluator : bool
        Also build the evaluator now (else call :meth:`PreparedRun.start_evaluator`).

    Raises
    ------
    InputError
    """
    from cubage.engine.run import Run
    o = overrides or Overrides()
    o.validate()
    settings = _goal(problem, o)
    rule = o.rule or problem.method.rule
    degree = o.degree if o.degree is not None else problem.method.degree
    if rule is not None:
        settings["rule"] = rule
    if degree is not None:
        settings["degree"] = degree
    settings.update(getattr(problem, "features", None) or {})    # declared + detected (cubage.problem.features)
    fp = problem.fingerprint()
    try:
        run = Run(problem.integrand, problem.domain, fingerprint=fp, snapshot_interval=snapshot_interval, **settings)
    except (ValueError, TypeError) as exc:
        raise _run_error(problem, o, exc) from None
    prep = PreparedRun(problem, run, o, fp)
    if start_evaluator:
        prep.start_evaluator()
    return prep


def _run_error(problem, o: Overrides, exc: Exception) -> InputError:
    msg = str(exc)
    from cubage.engine.partition import FeatureError
    if isinstance(exc, FeatureError):
        path = getattr(problem, "path", None)
        return InputError(f"{path if path is not None else '<problem>'}: [features] {msg} "
                          "([method] align = \"declared\" or \"off\" leaves out what was found in the expression)")
    kind = getattr(problem.domain, "kind", "box")
    if "budget" in msg:
        where = o.label("budget") if o.budget is not None else _problem_where(problem, "goal", "budget")
        return InputError(f"{where}: {msg}")
    if "degree" in msg:
        where = o.label("degree") if o.degree is not None else _problem_where(problem, "method", "degree")
        return InputError(f"{where}: {msg}")
    where = o.label("rule") if o.rule is not None else _problem_where(problem, "method", "rule")
    if "unknown rule" in msg:
        return InputError(f"{where}: {msg}")
    rule = o.rule or problem.method.rule or "the default rule"
    return InputError(f"{where}: {rule} does not fit this {problem.domain.dim}-D {kind}: {msg}")


def resume_run(problem, checkpoint, overrides: Overrides | None = None, *, snapshot_interval: float = 0.25
               ) -> PreparedRun:
    """Continue the run saved in ``checkpoint`` (read and verified once), with goal overrides.

    Raises
    ------
    InputError
        A bad override.
    cubage.CheckpointError
        A damaged checkpoint or one of another problem.
    """
    from cubage.engine.checkpoint import CheckpointError
    from cubage.engine.run import Run
    o = overrides or Overrides()
    o.validate()
    goal = {k: getattr(o, k) for k in GOAL_KEYS if getattr(o, k) is not None}
    fp = problem.fingerprint()
    try:
        run = Run.from_checkpoint(checkpoint, problem.integrand, problem.domain, fingerprint=fp,
                                  snapshot_interval=snapshot_interval, **goal)
    except CheckpointError:
        why = _first_release_python(problem, checkpoint)
        if why:
            raise CheckpointError(why) from None
        raise
    except (ValueError, TypeError, KeyError, IndexError, AttributeError) as exc:
        if goal and isinstance(exc, ValueError) and any(w in str(exc) for w in ("tol", "budget", "time_limit")):
            raise _run_error(problem, o, exc) from None
        raise CheckpointError(f"{checkpoint}: checkpoint is damaged ({type(exc).__name__}: {exc})") from None
    if goal and run.status == "converged":
        try:
            run.set_goal(**goal)
        except ValueError as exc:
            raise _run_error(problem, o, exc) from None
    return PreparedRun(problem, run, o, fp)


def _first_release_fingerprint(problem) -> str | None:
    """The fingerprint the first release gave ``problem`` if its integrand is Python code, else None.

    That release identified a Python integrand by its import path and, for a ``file.py:function`` target, the
    digest of that one file's bytes; later releases use the digest of all the code it imports
    (:meth:`cubage.problem.problem_file.Problem.fingerprint`), so such a checkpoint never matches again.
    """
    import hashlib
    import json
    from pathlib import Path
    spec = getattr(problem, "integrand_spec", None) or {}
    if spec.get("kind") != "python":
        return None
    target = spec["target"]
    module = target.rpartition(":")[0].strip()
    old = {"kind": "python", "target": target}
    if module.endswith(".py"):
        file = Path(module) if Path(module).is_absolute() else Path(spec.get("base_dir") or ".") / module
        try:
            old["file_sha256"] = hashlib.sha256(file.read_bytes()).hexdigest()
        except OSError:
            old["base_dir"] = spec.get("base_dir")
    payload = json.dumps({"domain": problem.domain.to_json(), "integrand": old}, sort_keys=True,
                         separators=(",", ":"))
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()


def _first_release_python(problem, checkpoint) -> str | None:
    """One line for a checkpoint of a Python integrand written by the first release (cleanup item 4), else None.

    Recognised by the checkpoint's problem fingerprint: the first release's formula applied to this problem, or
    a checkpoint of format version 1 (that release's) whose fingerprint is not today's.
    """
    from pathlib import Path

    from cubage.engine.checkpoint import CheckpointError, read_checkpoint
    old = _first_release_fingerprint(problem)
    if old is None:
        return None
    try:
        meta, _ = read_checkpoint(checkpoint)
    except (CheckpointError, OSError, ValueError):
        return None
    theirs = meta.get("integrand")
    if theirs == problem.fingerprint() or not (theirs == old or meta.get("version") == 1):
        return None
    folder = Path(checkpoint).parent
    source = getattr(problem, "path", None) or "FILE"
    kept = f" (its last estimate stays in {folder / 'verdict.json'})" if (folder / "verdict.json").is_file() else ""
    return (f"{folder}: written by cubage's first release, which identified Python integrands differently, so it "
            f"cannot be resumed; start again with: cubage run {source} --allow-python --run-dir NEW-DIR{kept}")
