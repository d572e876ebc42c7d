"""The ``cubage`` command.

::

    cubage                       the text UI (same as ``cubage tui``)
    cubage run FILE [options]    a headless run; FILE is a path or a problem name
    cubage check FILE            validate and describe a problem
    cubage resume DIR [options]  continue a run directory from its checkpoint
    cubage list [DIR]            the available problems
    cubage tui [PATH ...]        the text UI on some problems
    cubage watch DIR             the text UI following a run directory
    cubage bench ...             benchmarks

Exit codes: 0 the goal was met; 3 the run stopped short of the goal (budget,
time, request, region limit, stall) — the current estimate is reported; 2 bad
input (problem file, option, run directory, checkpoint); 1 the integrand
failed, or an internal error.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import socket
import sys
import time
import tomllib
import traceback
from pathlib import Path

EXIT_OK, EXIT_FAILED, EXIT_BAD_INPUT, EXIT_SHORT = 0, 1, 2, 3
SNAPSHOT_INTERVAL = 0.25


class UsageError(Exception):
    """Bad input: printed as one line (or the problem error's own lines), exit 2."""


# --------------------------------------------------------------------------
# argument parsing
# --------------------------------------------------------------------------

class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (exit 2)."""

    def error(self, message):  # noqa: D401 - argparse API
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: {message} (see: {self.prog} --help)\n")


def _number(text: str, what: str) -> float:
    try:
        x = float(text.replace("_", ""))
    except ValueError:
        raise argparse.ArgumentTypeError(f"{what}, got {text!r}") from None
    if math.isnan(x):
        raise argparse.ArgumentTypeError(f"{what}, got NaN")
    return x


def _tolerance(text: str) -> float:
    x = _number(text, "must be a number >= 0 like 1e-8")
    if not (0 <= x < math.inf):
        raise argparse.ArgumentTypeError(f"must be a finite number >= 0, got {text!r}")
    return x


def _duration(text: str, *, zero_ok: bool, what: str) -> float:
    x = _number(text, what)
    if not ((0 <= x if zero_ok else 0 < x) and x < math.inf):
        raise argparse.ArgumentTypeError(f"must be a number of seconds {'>=' if zero_ok else '>'} 0, got {text!r}")
    return x


def _seconds(text: str) -> float:
    return _duration(text, zero_ok=False, what="must be a number of seconds > 0")


def _every(text: str) -> float:
    return _duration(text, zero_ok=True, what="must be a number of seconds (0 = only at the end)")


def _count(text: str) -> int:
    t = text.replace("_", "").replace(",", "")
    try:
        x = int(t)
    except ValueError:
        try:
            f = float(t)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be a whole number like 10_000_000 or 1e7, got {text!r}") from None
        if not (math.isfinite(f) and f == int(f)):
            raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None
        x = int(f)
    if x <= 0:
        raise argparse.ArgumentTypeError(f"must be positive, got {text!r}")
    return x


def _workers(text: str):
    if text == "auto":
        return "auto"
    try:
        x = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f'must be a whole number >= 1 or "auto", got {text!r}') from None
    if x < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {text!r}")
    return x


def _add_goal_options(p) -> None:
    g = p.add_argument_group("goal (overrides the problem's [goal])")
    g.add_argument("--rel-tol", type=_tolerance, metavar="X", help="relative tolerance on the total error estimate")
    g.add_argument("--abs-tol", type=_tolerance, metavar="X", help="absolute tolerance on the total error estimate")
    g.add_argument("--budget", type=_count, metavar="N", help="budget of integrand evaluations")
    g.add_argument("--time-limit", type=_seconds, metavar="S", help="seconds of work (summed over resumes)")


def _add_parallel_options(p) -> None:
    from cubage.problem.problem_file import BACKENDS
    g = p.add_argument_group("evaluation (overrides the problem's [method])")
    g.add_argument("--workers", type=_workers, metavar="N", help='worker processes or threads, or "auto"')
    g.add_argument("--backend", choices=BACKENDS, metavar="B", help=f"one of: {', '.join(BACKENDS)}")
    g.add_argument("--cluster", metavar="ADDR", help="dask scheduler address or scheduler file")


def _add_common(p, *, run_dir: bool) -> None:
    p.add_argument("--json", action="store_true",
                   help="print exactly one JSON object on stdout at the end (and nothing else there)")
    p.add_argument("--checkpoint-every", type=_every, metavar="S", default=None,
                   help="seconds between checkpoints in the run directory (default 60; 0 = only at the end)")
    p.add_argument("--allow-python", action="store_true",
                   help="allow problems whose integrand is your own Python code (python = ...)")
    p.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``cubage`` (all subcommands)."""
    from cubage import __version__
    from cubage.problem.problem_file import RULES
    top = _Parser(prog="cubage",
                  description="Adaptive multi-dimensional cubature over boxes, simplices and unbounded "
                              "regions. With no command, opens the text UI.",
                  epilog="Exit codes: 0 goal met, 3 stopped short of the goal (estimate reported), "
                         "2 bad input, 1 integrand failure or internal error. Error figures are "
                         "heuristic estimates, not guaranteed bounds.")
    top.add_argument("--version", action="version", version=f"cubage {__version__}")
    sub = top.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("run", help="integrate a problem without the UI",
                       description="Integrate one problem headless. On a terminal a live panel shows the "
                                   "progress; otherwise a log line goes to stderr every few seconds. "
                                   "SIGINT/SIGTERM/SIGHUP stop cleanly with the current estimate (exit 3).")
    p.add_argument("file", metavar="FILE", help="problem file, or the name of a problem in ./problems or the "
                                                "bundled examples (see: cubage list)")
    p.add_argument("--run-dir", metavar="DIR", help="keep a run directory (problem copy, settings, checkpoints, "
                                                    "progress log, result); continue it with: cubage resume DIR")
    _add_goal_options(p)
    m = p.add_argument_group("method (overrides the problem's [method])")
    m.add_argument("--rule", choices=RULES, metavar="R", help=f"rule family: {', '.join(RULES)}")
    m.add_argument("--second-opinion", action="store_true",
                   help="afterwards integrate again with other nodes and region boundaries (another rule or "
                        "split policy) to the same goal, and say whether the two answers agree within their "
                        "error estimates (about doubles the work)")
    sc = p.add_argument_group("scans (problems with a [scan] table)")
    sc.add_argument("--cold", action="store_true",
                    help="start every point from the whole domain instead of its neighbour's partition")
    sc.add_argument("--chains", type=_count, metavar="N",
                    help="cut the scan's path into N chains run in parallel (default: one per 50 points); "
                         "results depend on N, never on --workers")
    _add_parallel_options(p)
    _add_common(p, run_dir=True)

    p = sub.add_parser("check", help="validate a problem and describe it",
                       description="Read a problem, report the first mistake (exit 2) or describe it: "
                                   "dimension, domain, integrand, goal, method, rule and reference.")
    p.add_argument("file", metavar="FILE", help="problem file or problem name")
    p.add_argument("--allow-python", action="store_true", help="allow python = ... integrands (imports your code)")

    p = sub.add_parser("resume", help="continue a run directory from its checkpoint",
                       description="Continue the run in DIR from its last checkpoint, appending to its "
                                   "progress log. Goal options loosen or tighten the goal.")
    p.add_argument("dir", metavar="DIR", help="run directory made by: cubage run FILE --run-dir DIR")
    _add_goal_options(p)
    _add_parallel_options(p)
    _add_common(p, run_dir=True)

    p = sub.add_parser("list", help="list the available problems",
                       description="List problems (name, dimension, domain kind, title) in DIR, or in "
                                   "./problems and the bundled examples.")
    p.add_argument("dir", metavar="DIR", nargs="?", help="folder of *.toml problem files")

    p = sub.add_parser("tui", help="open the text UI", description="Open the text UI on some problems.")
    p.add_argument("paths", metavar="PATH", nargs="*", help="problem files or folders")
    p.add_argument("--allow-python", action="store_true", help="allow python = ... integrands")

    p = sub.add_parser("watch", help="follow a run directory in the text UI",
                       description="Follow a headless run (its progress log) in the text UI.")
    p.add_argument("dir", metavar="DIR", help="run directory")

    sub.add_parser("bench", help="benchmarks (see: cubage bench --help)", add_help=False)
    return top


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------

def _err(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


def _load(name: str, allow_python: bool):
    from cubage.problem.problem_file import find_problem, load_problem
    return load_problem(find_problem(name), allow_python=allow_python)


def _rule_info(problem, rule: str | None, degree: int | None, where: str) -> tuple[str, int]:
    """(rule name, nodes per region) for the problem's domain; UsageError when they do not fit."""
    from cubage.engine.domains import Simplex
    from cubage.engine.rules import box_rule, default_rule, simplex_rule
    kind = "simplex" if isinstance(problem.domain, Simplex) else "box"
    name = rule or default_rule(kind, problem.domain.dim)
    try:
        dim = problem.domain.dim
        r = simplex_rule(name, dim, degree or 7) if kind == "simplex" else box_rule(name, dim)
    except ValueError as exc:
        raise UsageError(f"{where}: {name} does not fit this {problem.domain.dim}-D {kind}: {exc}") from None
    return name, int(r.size)


def _problem_where(problem) -> str:
    return str(problem.path) if problem.path is not None else "<problem>"


def _settings(problem, args) -> dict:
    """Engine settings from the problem's goal and method plus command-line overrides."""
    from cubage.engine.run import DEFAULT_BUDGET
    g = problem.goal
    rel = args.rel_tol if args.rel_tol is not None else g.rel_tol
    abs_ = args.abs_tol if args.abs_tol is not None else g.abs_tol
    if rel == 0 and abs_ == 0:
        raise UsageError("--rel-tol/--abs-tol: both tolerances are zero; the goal could never be met")
    rule = getattr(args, "rule", None) or problem.method.rule
    where = "--rule" if getattr(args, "rule", None) else f"{_problem_where(problem)}: [method] rule"
    name, _ = _rule_info(problem, rule, problem.method.degree, where)
    s = {"rel_tol": rel, "abs_tol": abs_,
         "budget": args.budget or g.budget or DEFAULT_BUDGET,
         "time_limit": args.time_limit if args.time_limit is not None else g.time_limit,
         "rule": name}
    if problem.method.degree is not None:
        s["degree"] = problem.method.degree
    return s


def _parallel(problem, workers, backend, cluster):
    """(evaluator or None, description, note): the problem's method with overrides."""
    given_workers, given_backend, given_cluster = workers, backend, cluster
    workers = workers if workers is not None else problem.method.workers
    backend = backend if backend is not None else problem.method.backend
    cluster = cluster if cluster is not None else problem.method.cluster
    want = workers not in (1, None) or backend not in ("auto", "serial", None) or cluster
    try:
        from cubage.engine import parallel
    except ImportError:
        note = ("parallel evaluation is not available in this installation; evaluating serially"
                if want else None)
        return None, "serial", note
    try:
        ev = parallel.make_evaluator(workers=workers, backend=backend, cluster=cluster, spec=problem.integrand_spec)
    except (ValueError, TypeError) as exc:
        msg = str(exc)
        key = "cluster" if ("cluster" in msg or "scheduler" in msg) and cluster else \
            "workers" if "workers" in msg else "backend"
        given = {"workers": given_workers, "backend": given_backend, "cluster": given_cluster}[key]
        where = f"--{key}" if given is not None else f"{_problem_where(problem)}: [method] {key}"
        raise UsageError(f"{where}: {msg}") from None
    if ev is None:
        return None, "serial", None
    desc = ev.describe() if hasattr(ev, "describe") else type(ev).__name__
    return ev, desc, None


def _close(ev) -> None:
    if ev is not None and hasattr(ev, "close"):
        try:
            ev.close()
        except Exception:  # noqa: BLE001 - closing must never hide the run's outcome
            pass


def _result_record(result, problem, *, name: str, run_dir=None, extra: dict | None = None) -> dict:
    """The JSON object of ``--json`` and ``result.json``."""
    import numpy as np

    from cubage.engine.run import STATUSES
    from cubage.session.run_directory import json_numbers
    rec = result.to_json()
    vals = np.atleast_1d(np.asarray(result.values if np.size(result.values) else result.value, dtype=float))
    rec["value"] = json_numbers(result.value)
    rec["error"] = json_numbers(result.error)
    rec["status_meaning"] = STATUSES.get(result.status, "")
    rec["error_note"] = "heuristic estimate, not a guaranteed bound"
    rec["problem"] = name
    rec["title"] = problem.title
    rec["components"] = int(problem.components)
    if problem.reference is not None:
        ref = np.atleast_1d(np.asarray(problem.reference.value, dtype=float))
        rec["reference"] = problem.reference.value
        rec["reference_source"] = problem.reference.source
        if ref.size == vals.size:
            diff = vals - ref
            rec["true_error"] = json_numbers(diff[0] if vals.size == 1 and np.ndim(result.value) == 0 else diff)
    if run_dir is not None:
        rec["run_dir"] = str(run_dir)
    if extra:
        rec.update(extra)
    return rec


def _exit_code(status: str) -> int:
    if status == "converged":
        return EXIT_OK
    if status == "failed":
        return EXIT_FAILED
    return EXIT_SHORT


def _interactive(args) -> bool:
    return (not args.json) and sys.stdout.isatty() and os.environ.get("TERM") != "dumb"


def _continue_hint(res, run, rundir) -> str:
    """How to go on after stopping short of the goal (empty when there is nothing to say)."""
    if res.status in ("converged", "failed"):
        return ""
    opt = ""
    if res.status == "budget-spent":
        opt = f" --budget {2 * int(run.settings.budget):_}"
    elif res.status == "time-limit" and run.settings.time_limit:
        opt = f" --time-limit {2 * run.settings.time_limit:g}"
    elif res.status in ("region-limit", "stalled"):
        return "the goal may be out of reach for this rule; try a looser --rel-tol/--abs-tol or another --rule"
    if rundir is not None:
        return f"continue with: cubage resume {rundir.path}{opt}"
    return f"run again with{opt} (or keep a --run-dir to be able to continue)" if opt else \
        "keep a --run-dir to be able to continue a stopped run"


def _execute(run, problem, args, *, name: str, rundir, method_text: str, log_after: float = -1.0,
             checkpoint_every: float = 60.0) -> int:
    """Drive the run with the right display, write the result, print the ending; the exit code."""
    from cubage.cli.terminal_display import LivePanel, PlainTicker, summary_lines
    from cubage.engine.run import STATUSES
    from cubage.session.run_directory import RESULT, drive, write_json

    title = problem.title or name
    if _interactive(args):
        show = LivePanel(title, problem.reference, extra=method_text)
    else:
        show = PlainTicker(problem.reference)
    if isinstance(show, LivePanel):
        with show:
            out = drive(run, rundir=rundir, on_snapshot=show, checkpoint_every=checkpoint_every, log_after=log_after)
    else:
        out = drive(run, rundir=rundir, on_snapshot=show, checkpoint_every=checkpoint_every, log_after=log_after)
        if out.snapshot.evaluations > 0:
            show(out.snapshot, final=True)
    res = out.result
    extra = {"stopped_by": out.stop_reason} if out.stop_reason else {}
    second = None
    if getattr(args, "second_opinion", False) and not out.failure and not out.stop_reason and res.evaluations > 0:
        second = _second_opinion(run, problem, res)
        extra["second_opinion"] = second
    rec = _result_record(res, problem, name=name, run_dir=rundir.path if rundir else None, extra=extra)
    if rundir is not None:
        write_json(rundir.file(RESULT), rec)
    code = _exit_code(res.status)
    if args.json:
        print(json.dumps(rec, allow_nan=False), flush=True)
    elif res.evaluations > 0:
        more = []
        if out.stop_reason:
            more.append(f"{'stopped by':<11} {out.stop_reason}")
        if rundir is not None:
            more.append(f"{'run dir':<11} {rundir.path}")
        hint = _continue_hint(res, run, rundir)
        if hint:
            more.append(f"{'next':<11} {hint}")
        if second is not None:
            more.extend(_second_opinion_lines(second))
        for line in summary_lines(res, STATUSES, problem.reference, more):
            print(line, flush=True)
    if second is not None and second.get("agree") is False:
        _err("cubage: warning: the second opinion disagrees beyond both error estimates; at least one of them is "
             "wrong (see the Cautions in the README)")
    if out.failure:
        kept = " (the estimate above is from before the failing step)" if res.evaluations > 0 and not args.json else ""
        _err(f"cubage: integrand failed: {out.failure}{kept}")
    elif code == EXIT_SHORT and args.json:
        _err(f"cubage: stopped short of the goal: {res.status} ({STATUSES.get(res.status, '')})")
    return code


def _second_opinion(run, problem, res) -> dict:
    """Integrate again with other nodes and boundaries (:func:`cubage.engine.rules.second_opinion`); compare."""
    import numpy as np

    from cubage.engine.rules import second_opinion
    from cubage.engine.run import IntegrandError, Run
    from cubage.session.run_directory import json_numbers
    opts, words = second_opinion(problem.domain.kind, problem.domain.dim, run.rule_name, run.settings.split)
    s = run.settings
    try:
        alt = Run(problem.integrand, problem.domain, evaluator=run.evaluator, fingerprint=problem.fingerprint(),
                  rel_tol=s.rel_tol, abs_tol=s.abs_tol, budget=s.budget, time_limit=s.time_limit, **opts)
        r2 = alt.run()
    except (IntegrandError, ValueError) as exc:
        return {"method": words, "status": "failed", "message": str(exc), "agree": None}
    diff = np.abs(np.asarray(res.values) - np.asarray(r2.values))
    agree = bool(np.all(diff <= np.asarray(res.errors) + np.asarray(r2.errors)))
    scalar = np.ndim(res.value) == 0
    return {"method": words, "value": json_numbers(r2.value), "error": json_numbers(r2.error),
            "status": r2.status, "evaluations": int(r2.evaluations), "seconds": round(float(r2.seconds), 6),
            "difference": json_numbers(float(diff[0]) if scalar else diff), "agree": agree}


def _second_opinion_lines(so: dict) -> list[str]:
    import numpy as np

    from cubage.cli.terminal_display import fmt_err, fmt_value
    head = f"{'second':<11} {so['method']}"
    if so["status"] == "failed":
        return [head, f"{'':<11} failed: {so.get('message', '')}"]
    vals = np.atleast_1d(np.asarray(so["value"], dtype=float))
    errs = np.atleast_1d(np.asarray(so["error"], dtype=float))
    lines = [head] + [f"{'':<11} {fmt_value(v)} ± {fmt_err(e)}" for v, e in zip(vals, errs)]
    verdict = ("agrees within the two error estimates" if so["agree"] else
               "DISAGREES beyond both error estimates: at least one answer is wrong")
    lines.append(f"{'':<11} {so['status']}, {so['evaluations']:,} evaluations; {verdict}")
    return lines


# --------------------------------------------------------------------------
# commands
# --------------------------------------------------------------------------

def cmd_run(args) -> int:
    from cubage import __version__
    from cubage.engine.run import Run
    from cubage.session.run_directory import RunDir

    problem = _load(args.file, args.allow_python)
    settings = _settings(problem, args)
    name = problem.path.stem if problem.path is not None else args.file
    if problem.scan is not None:
        from cubage.cli.scan_command import run_scan_command
        return run_scan_command(args, problem, settings, name)
    ev, desc, note = _parallel(problem, args.workers, args.backend, args.cluster)
    rd = None
    try:
        if note:
            _err(f"cubage: note: {note}")
        try:
            run = Run(problem.integrand, problem.domain, evaluator=ev, fingerprint=problem.fingerprint(),
                      snapshot_interval=SNAPSHOT_INTERVAL, **settings)
        except ValueError as exc:
            raise UsageError(str(exc)) from None
        if args.run_dir:
            rd = RunDir(Path(args.run_dir))
            rd.check_new_run(problem.fingerprint())
            info = {
                "cubage_version": __version__, "command": "run", "problem": name, "title": problem.title,
                "problem_source": str(problem.path.resolve()) if problem.path is not None else None,
                "problem_fingerprint": problem.fingerprint(), "run_fingerprint": run.fingerprint(),
                "settings": {k: v for k, v in run.settings.__dict__.items()},
                "overrides": {k: getattr(args, k) for k in ("rel_tol", "abs_tol", "budget", "time_limit", "rule",
                                                             "workers", "backend", "cluster", "checkpoint_every")
                              if getattr(args, k) is not None},
                "allow_python": bool(args.allow_python), "evaluation": desc,
                "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "host": socket.gethostname(), "pid": os.getpid(),
            }
            rd.create(problem.text, info)
            for n in rd.notes:
                _err(f"cubage: note: {n}")
        every = args.checkpoint_every if args.checkpoint_every is not None else 60.0
        return _execute(run, problem, args, name=name, rundir=rd, method_text=f"{run.rule_name}, {desc}",
                        checkpoint_every=every)
    finally:
        if rd is not None:
            rd.release()
        _close(ev)


def cmd_resume(args) -> int:
    from cubage import __version__
    from cubage.cli.scan_command import is_scan_dir, resume_scan_command
    from cubage.engine.checkpoint import read_checkpoint
    from cubage.engine.run import Run
    from cubage.problem.problem_file import ProblemError, parse_problem
    from cubage.session.run_directory import PROBLEM, RESULT, RunDir, RunDirError
    if is_scan_dir(args.dir):
        return resume_scan_command(args)
    rd = RunDir(Path(args.dir))
    info = rd.open_existing()
    ev = None
    try:
        for n in rd.notes:
            _err(f"cubage: note: {n}")
        copy = rd.file(PROBLEM)
        try:
            text = copy.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise RunDirError(f"{copy}: cannot read the problem copy ({exc})") from None
        path = copy
        try:
            if "python" in (tomllib.loads(text).get("integrand") or {}) and info.get("problem_source"):
                path = Path(info["problem_source"])   # relative file.py:function resolves beside the original
        except tomllib.TOMLDecodeError:
            pass
        trust = args.allow_python
        try:
            problem = parse_problem(text, path=path, allow_python=trust)
        except ProblemError:
            raise
        name = info.get("problem") or copy.stem
        saved = info.get("overrides", {})
        ev, desc, note = _parallel(problem, args.workers if args.workers is not None else saved.get("workers"),
                                   args.backend or saved.get("backend"), args.cluster or saved.get("cluster"))
        if note:
            _err(f"cubage: note: {note}")
        read_checkpoint(rd.checkpoint)          # a clear CheckpointError before anything else
        goal = {k: getattr(args, k) for k in ("rel_tol", "abs_tol", "budget", "time_limit")
                if getattr(args, k) is not None}
        run = Run.from_checkpoint(rd.checkpoint, problem.integrand, problem.domain, evaluator=ev,
                                  fingerprint=problem.fingerprint(), snapshot_interval=SNAPSHOT_INTERVAL, **goal)
        if goal and run.status == "converged":
            run.set_goal(**goal)
        rd.add_resume(info, {"started": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "host": socket.gethostname(),
                             "pid": os.getpid(), "cubage_version": __version__, "overrides": goal,
                             "from_evaluations": run.evaluations, "evaluation": desc})
        rd.file(RESULT).unlink(missing_ok=True)   # a watcher must not take the old ending for this run's
        every = args.checkpoint_every if args.checkpoint_every is not None else \
            float(saved.get("checkpoint_every", 60.0))
        return _execute(run, problem, args, name=name, rundir=rd, method_text=f"{run.rule_name}, {desc}",
                        log_after=rd.last_logged_evaluations(), checkpoint_every=every)
    finally:
        rd.release()
        _close(ev)


def cmd_check(args) -> int:
    from cubage.engine.domains import Simplex
    problem = _load(args.file, args.allow_python)
    where = f"{_problem_where(problem)}: [method] rule"
    name, nodes = _rule_info(problem, problem.method.rule, problem.method.degree, where)
    rows = [("problem", str(problem.path))]
    if problem.title:
        rows.append(("title", problem.title))
    rows += problem.describe()
    kind = "simplex" if isinstance(problem.domain, Simplex) else (
        "box" if problem.domain.bounded else "box with infinite bounds (mapped to a finite one)")
    how = "from the problem" if problem.method.rule else "default for this domain"
    per = "2 children per split (bisection)"
    rows.insert(3, ("kind", kind))
    idx = [i for i, (k, _) in enumerate(rows) if k == "method"][0] + 1
    rows.insert(idx, ("rule", f"{name} ({how}), {nodes} nodes per region, {per}"))
    if problem.notes:
        rows.append(("notes", " ".join(problem.notes.split())))
    width = max(len(k) for k, _ in rows)
    for k, v in rows:
        print(f"{k:>{width}}  {v}")
    print(f"{'':>{width}}  ok: the problem is valid")
    return EXIT_OK


def cmd_list(args) -> int:
    from cubage.engine.domains import Simplex
    from cubage.problem.problem_file import ProblemError, bundled_problem_dir, list_problems, load_problem, problem_dirs
    if args.dir:
        d = Path(args.dir)
        if not d.is_dir():
            raise UsageError(f"cubage list: {d}: no such folder")
        dirs = [d]
    else:
        dirs = problem_dirs()
        if bundled_problem_dir() not in dirs:
            dirs.append(bundled_problem_dir())
    files = list_problems(dirs)
    if not files:
        print(f"no problems (*.toml) in {', '.join(str(d) for d in dirs)}")
        return EXIT_OK
    rows = []
    for f in files:
        try:
            p = load_problem(f)
            kind = "simplex" if isinstance(p.domain, Simplex) else ("box" if p.domain.bounded else "box, unbounded")
            rows.append((f.stem, str(p.dim), kind, p.title or ""))
        except ProblemError as exc:
            needs_code = "--allow-python" in str(exc)
            note = "needs --allow-python (python integrand)" if needs_code else "invalid: see cubage check"
            title, dim, kind = "", "?", "?"
            try:
                data = tomllib.loads(f.read_text(encoding="utf-8"))
                title = str(data.get("title", ""))
                dom = data.get("domain") or {}
                dim = str(len(dom.get("variables") or [])) or "?"
                kind = "simplex" if "simplex" in dom else "box"
            except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, TypeError, AttributeError):
                pass
            rows.append((f.stem, dim, kind, f"{title}  [{note}]".strip()))
    head = ("name", "dim", "domain", "title")
    w = [max(len(r[i]) for r in [head, *rows]) for i in range(3)]
    print(f"{head[0]:<{w[0]}}  {head[1]:>{w[1]}}  {head[2]:<{w[2]}}  {head[3]}")
    for r in rows:
        print(f"{r[0]:<{w[0]}}  {r[1]:>{w[1]}}  {r[2]:<{w[2]}}  {r[3]}")
    return EXIT_OK


def _ui(paths=None, watch=None, allow_python=False) -> int:
    try:
        from cubage.tui import app
    except Exception as exc:  # noqa: BLE001 - any import failure means no UI
        _err(f"cubage: the text UI is not available ({type(exc).__name__}: {exc}); "
             "headless commands still work: cubage run FILE")
        return EXIT_FAILED
    return int(app.main(paths=paths, watch=watch, allow_python=allow_python) or 0)


def _bench(argv: list[str]) -> int:
    try:
        from cubage.bench import suite as bench
    except Exception as exc:  # noqa: BLE001
        _err(f"cubage: benchmarks are not available ({type(exc).__name__}: {exc})")
        return EXIT_FAILED
    return int(bench.main(argv) or 0)


# --------------------------------------------------------------------------
# entry point
# --------------------------------------------------------------------------

def main(argv: list[str] | None = None) -> int:
    """Run ``cubage`` with ``argv`` (default ``sys.argv[1:]``); returns the exit code."""
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv and argv[0] == "bench":
        return _bench(argv[1:])
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:           # --help, --version, usage errors: argparse has printed
        return exc.code if isinstance(exc.code, int) else EXIT_BAD_INPUT
    debug = bool(getattr(args, "debug", False))
    from cubage.engine.checkpoint import CheckpointError
    from cubage.engine.domains import DomainError
    from cubage.problem.problem_file import ProblemError
    from cubage.session.run_directory import RunDirError
    try:
        if args.command is None:
            return _ui()
        if args.command == "tui":
            return _ui(paths=args.paths or None, allow_python=args.allow_python)
        if args.command == "watch":
            return _ui(watch=args.dir)
        return {"run": cmd_run, "resume": cmd_resume, "check": cmd_check, "list": cmd_list}[args.command](args)
    except ProblemError as exc:
        _err(str(exc))
        return EXIT_BAD_INPUT
    except (UsageError, RunDirError, CheckpointError, DomainError) as exc:
        _err(f"cubage: {exc}")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        _err("cubage: interrupted")
        return 130
    except BrokenPipeError:
        try:
            sys.stdout = open(os.devnull, "w")
        except OSError:
            pass
        return EXIT_FAILED
    except Exception as exc:  # noqa: BLE001 - the last line of defence
        if debug:
            traceback.print_exc()
        else:
            _err(f"cubage: internal error: {type(exc).__name__}: {exc} (rerun with --debug for the traceback)")
        return EXIT_FAILED


if __name__ == "__main__":
    sys.exit(main())
