"""The ``cubage`` command.

::

    cubage                       the text UI (same as ``cubage tui``; needs a terminal)
    cubage run FILE [options]    a headless run; FILE is a path or a problem name
    cubage check FILE            validate and describe a problem
    cubage resume DIR [options]  continue a run directory from its checkpoint
    cubage list [DIR]            the available problems
    cubage tui [PATH ...]        the text UI on some problems
    cubage watch DIR             follow a run directory (the text UI; plain lines without a terminal)
    cubage bench ...             benchmarks

Exit codes: 0 the goal was met; 3 the run stopped short of the goal (budget,
time, request, region limit, stall) — the current estimate is reported; 2 bad
input (problem file, option, run directory, checkpoint, storage); 1 the
integrand failed, or an internal error; 130 interrupted before a run started.

The commands are thin: preparing, driving and recording a run is
:mod:`cubage.session` (shared with the text UI).  This module imports
nothing heavy at the top, so that ``--help`` is quick and Ctrl-C during
start-up is quiet.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import tomllib
import traceback
from pathlib import Path

EXIT_OK, EXIT_FAILED, EXIT_BAD_INPUT, EXIT_SHORT, EXIT_INTERRUPTED = 0, 1, 2, 3, 130
SNAPSHOT_INTERVAL = 0.25


class UsageError(Exception):
    """Bad input: printed as one line (or the problem error's own lines), exit 2."""


# --------------------------------------------------------------------------
# argument parsing
# --------------------------------------------------------------------------

class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (exit 2)."""

    def error(self, message):  # noqa: D401 - argparse API
        raise UsageError(f"{self.prog}: {message} (see: {self.prog} --help)")


def _arg(check):
    """An argparse type from a session check (one place for every value rule)."""
    def conv(text: str):
        try:
            return check(text)
        except ValueError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None
    conv.__name__ = check.__name__
    return conv


def _tolerance(text: str) -> float:
    from cubage.session.prepare import check_tolerance, parse_number
    return check_tolerance(parse_number(text, "must be a number >= 0 like 1e-8"))


def _seconds(text: str) -> float:
    from cubage.session.prepare import check_time_limit, parse_number
    return check_time_limit(parse_number(text, "must be a number of seconds > 0"))


def _every(text: str) -> float:
    from cubage.session.prepare import parse_number
    x = parse_number(text, "must be a number of seconds (0 = only at the end)")
    if not 0 <= x < math.inf:
        raise ValueError(f"must be a number of seconds >= 0, got {text!r}")
    return x


def _count(text: str) -> int:
    from cubage.session.prepare import parse_count
    return parse_count(text)


def _memory_size(text: str) -> int:
    from cubage.engine.run import parse_memory_size
    return parse_memory_size(text)


def _workers(text: str):
    from cubage.session.prepare import check_workers
    return check_workers(text)


def _names(kind: str, show: bool) -> str:
    """The valid rule or backend names for the help text (imported only when the help is shown)."""
    if not show:
        return "see --help"
    if kind == "rule":
        from cubage.engine.rules import RULE_NAMES
        return ", ".join(RULE_NAMES)
    from cubage.engine.parallel import BACKENDS
    return ", ".join(BACKENDS)


def _add_goal_options(p) -> None:
    g = p.add_argument_group("goal (overrides the problem's [goal])")
    g.add_argument("--rel-tol", type=_arg(_tolerance), metavar="X",
                   help="relative tolerance on the total error estimate")
    g.add_argument("--abs-tol", type=_arg(_tolerance), metavar="X",
                   help="absolute tolerance on the total error estimate")
    g.add_argument("--budget", type=_arg(_count), metavar="N", help="budget of integrand evaluations")
    g.add_argument("--time-limit", type=_arg(_seconds), metavar="S", help="seconds of work (summed over resumes)")
    g.add_argument("--memory-ceiling", type=_arg(_memory_size), metavar="SIZE",
                   help='memory the run may use, like "4G" or "800M" (default: half of this machine\'s memory); '
                        "the run stops with its estimate before going beyond it")


def _add_parallel_options(p, show: bool) -> None:
    g = p.add_argument_group("evaluation (overrides the problem's [method])")
    g.add_argument("--workers", type=_arg(_workers), metavar="N", help='worker processes or threads, or "auto"')
    g.add_argument("--backend", metavar="B", help=f"one of: {_names('backend', show)}")
    g.add_argument("--cluster", metavar="ADDR", help="dask scheduler address or scheduler file")


def _add_common(p) -> None:
    p.add_argument("--json", action="store_true",
                   help="print exactly one JSON object on stdout at the end (and nothing else there); "
                        "errors too are one JSON object")
    p.add_argument("--checkpoint-every", type=_arg(_every), metavar="S", default=None,
                   help="seconds between checkpoints in the run directory (default 60; 0 = only at the end)")
    p.add_argument("--allow-python", action="store_true",
                   help="allow problems whose integrand is your own Python code (python = ...)")
    p.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")


def build_parser(show_names: bool = True) -> argparse.ArgumentParser:
    """The argument parser of ``cubage`` (all subcommands).

    ``show_names=False`` leaves the rule and backend names out of the help
    texts, so that parsing does not import the engine.
    """
    from cubage import __version__
    top = _Parser(prog="cubage",
                  description="Adaptive multi-dimensional cubature over boxes, simplices and unbounded "
                              "regions. With no command (on a terminal), opens the text UI.",
                  epilog="Exit codes: 0 goal met, 3 stopped short of the goal (estimate reported), "
                         "2 bad input, 1 integrand failure or internal error, 130 interrupted. Error figures "
                         "are heuristic estimates, not guaranteed bounds.")
    top.add_argument("--version", action="version", version=f"cubage {__version__}")
    sub = top.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("run", help="integrate a problem without the UI",
                       description="Integrate one problem headless. On a terminal a live panel shows the "
                                   "progress; otherwise a log line goes to stderr every few seconds. "
                                   "SIGINT/SIGTERM/SIGHUP stop cleanly with the current estimate (exit 3).")
    p.add_argument("file", metavar="FILE", help="problem file, or the name of a problem in ./problems or the "
                                                "bundled examples (see: cubage list)")
    p.add_argument("--run-dir", metavar="DIR", help="keep a run directory (problem copy, ledger, partition "
                                                    "checkpoints, trail, verdict); continue it with: "
                                                    "cubage resume DIR; follow it with: cubage watch DIR")
    _add_goal_options(p)
    m = p.add_argument_group("method (overrides the problem's [method])")
    m.add_argument("--rule", metavar="R", help=f"rule family: {_names('rule', show_names)}")
    m.add_argument("--second-opinion", action="store_true",
                   help="afterwards integrate again with other nodes and region boundaries (another rule or "
                        "split policy) to the same goal, and say whether the two answers agree within their "
                        "error estimates (about doubles the work)")
    sc = p.add_argument_group("scans (problems with a [scan] table)")
    sc.add_argument("--cold", action="store_true",
                    help="start every point from the whole domain instead of its neighbour's partition")
    sc.add_argument("--chains", type=_arg(_count), metavar="N",
                    help="cut the scan's path into N chains run in parallel (default: one per 50 points); "
                         "results depend on N, never on --workers")
    _add_parallel_options(p, show_names)
    _add_common(p)

    p = sub.add_parser("check", help="validate problems and describe them",
                       description="Read each problem, report its first mistake or describe it: dimension, "
                                   "domain, integrand, goal, method, rule and reference. Exit 2 if any is bad.")
    p.add_argument("files", metavar="FILE", nargs="+", help="problem files or problem names")
    p.add_argument("--allow-python", action="store_true", help="allow python = ... integrands (imports your code)")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object on stdout: {\"ok\": ..., \"problems\": [...]}, bad ones with "
                        "their error")

    p = sub.add_parser("resume", help="continue a run directory from its checkpoint",
                       description="Continue the run in DIR from its last checkpoint, appending to its "
                                   "trail. Goal options loosen or tighten the goal, or raise the budget.")
    p.add_argument("dir", metavar="DIR", help="run directory made by: cubage run FILE --run-dir DIR")
    _add_goal_options(p)
    _add_parallel_options(p, show_names)
    _add_common(p)

    p = sub.add_parser("list", help="list the available problems",
                       description="List problems (name, dimension, domain kind, title) in DIR, or in "
                                   "./problems and the bundled examples. Files that are not valid problems "
                                   "are listed as invalid. Reading a problem never imports its Python code.")
    p.add_argument("dir", metavar="DIR", nargs="?", help="folder of *.toml problem files")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object on stdout: {\"folders\": [...], \"problems\": [...]}")

    p = sub.add_parser("tui", help="open the text UI", description="Open the text UI on some problems.")
    p.add_argument("paths", metavar="PATH", nargs="*", help="problem files, folders, or problem names as for "
                                                            "cubage run (default: ./problems or the bundled ones)")
    p.add_argument("--allow-python", action="store_true", help="allow python = ... integrands")

    p = sub.add_parser("watch", help="follow a run directory",
                       description="Follow a run directory (its trail) while another process works in it: "
                                   "the text UI on a terminal, else one plain line every few seconds on "
                                   "stdout. Says when the working process is gone and how to continue.")
    p.add_argument("dir", metavar="DIR", help="run directory")
    p.add_argument("--plain", action="store_true", help="plain lines even on a terminal")
    p.add_argument("--once", action="store_true", help="print the current state once and exit (implies --plain)")
    p.add_argument("--every", type=_arg(_seconds), metavar="S", default=5.0,
                   help="seconds between plain lines (default 5)")

    p = sub.add_parser("plot", help="draw a scan or a benchmark as PNG and SVG (needs the extra 'plot')",
                       description="Draw I(p) with error bars from a scan's run directory (a heat map for two "
                                   "scanned constants), or the error-versus-evaluations chart from a benchmark's "
                                   "output folder (runs.csv), as PNG and SVG. Needs matplotlib: "
                                   "pip install 'cubage[plot]'.")
    p.add_argument("source", metavar="DIR", help="a scan's run directory or a benchmark's output folder")
    p.add_argument("--out", metavar="STEM", help="output path without suffix (default: scan or "
                                                 "error-vs-evaluations inside DIR)")

    sub.add_parser("bench", help="benchmarks (see: cubage bench --help)", add_help=False)
    return top


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------

def _err(msg: str) -> None:
    try:
        print(msg, file=sys.stderr, flush=True)
    except (OSError, ValueError):
        pass


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


def _overrides(args):
    """The session's Overrides from the command line (labels name the options in messages)."""
    from cubage.session.prepare import Overrides
    keys = ("rel_tol", "abs_tol", "budget", "time_limit", "memory_ceiling", "rule", "workers", "backend", "cluster")
    return Overrides(**{k: getattr(args, k, None) for k in keys},
                     labels={k: "--" + k.replace("_", "-") for k in keys})


def _interactive(args) -> bool:
    return (not args.json) and sys.stdout is not None and sys.stdout.isatty() and os.environ.get("TERM") != "dumb"


def _continue_hint(res, run, rundir) -> str:
    """How to go on after stopping short of the goal (empty when there is nothing to say)."""
    if res.status in ("converged", "failed"):
        return ""
    opt = ""
    if res.status == "budget-spent":
        # twice what was spent, not only twice the budget: a run resumed with a budget below its evaluations
        # stops at once, and twice that budget may still be below them
        opt = f" --budget {2 * max(int(run.settings.budget), int(res.evaluations)):_}"
    elif res.status == "time-limit" and run.settings.time_limit:
        opt = f" --time-limit {2 * run.settings.time_limit:g}"
    elif res.status == "memory-ceiling":
        from cubage.engine.run import default_memory_ceiling
        now = run.settings.memory_ceiling or default_memory_ceiling()
        opt = f" --memory-ceiling {max(1, 2 * now >> 20)}M"
    elif res.status in ("region-limit", "stalled"):
        return "the goal may be out of reach for this rule; try a looser --rel-tol/--abs-tol or another --rule"
    if rundir is not None:
        return f"continue with: cubage resume {rundir.path}{opt}"
    return f"run again with{opt} (or keep a --run-dir to be able to continue)" if opt else \
        "keep a --run-dir to be able to continue a stopped run"


def _print_json(obj: dict) -> None:
    from cubage.session.jsonio import dumps
    print(dumps(obj), flush=True)


def _execute(prep, args, *, name: str, guard, rundir=None, log_after: float = -1.0,
             checkpoint_every: float = 60.0, written_by: str) -> int:
    """Drive the prepared run with the right display, write the verdict, print the ending; the exit code."""
    from cubage.cli.terminal_display import LivePanel, PlainTicker, summary_lines
    from cubage.session.driver import RunDriver
    from cubage.session.result_record import result_record
    from cubage.session.run_directory import VERDICT, RunDirError
    from cubage.session.status import exit_code, meaning

    problem, run = prep.problem, prep.run
    title = problem.title or name
    show = LivePanel(title, problem.reference, extra=prep.method_text) if _interactive(args) else \
        PlainTicker(problem.reference)
    driver = RunDriver(run, rundir=rundir, checkpoint_every=checkpoint_every, log_after=log_after)
    guard.attach(driver)
    try:
        if isinstance(show, LivePanel):
            with show:
                out = driver.drive(show)
        else:
            out = driver.drive(show)
            if out.snapshot.evaluations > 0:
                show(out.snapshot, final=True)
    finally:
        guard.detach(driver)
        driver.close()
    res = out.result
    extra = {"stopped_by": out.stop_reason} if out.stop_reason else {}
    if out.storage_error:
        extra["storage_error"] = out.storage_error
    second = None
    if (getattr(args, "second_opinion", False) and not out.failure and not out.stop_reason
            and not out.storage_error and res.evaluations > 0):
        second = _second_opinion(prep, res, guard)
        extra["second_opinion"] = second
    rec = result_record(res, problem=problem, name=name, written_by=written_by,
                        settings=prep.settings_record(), run_dir=rundir.path if rundir else None, extra=extra)
    if rundir is not None and not out.storage_error:
        try:
            rundir.write_file(VERDICT, rec)
        except RunDirError as exc:
            out.storage_error = rec["storage_error"] = str(exc)
    code = exit_code(res.status)
    if args.json:
        _print_json(rec)
    elif res.evaluations > 0:
        more = []
        if out.stop_reason:
            more.append(f"{'stopped by':<11} {out.stop_reason}")
        if rundir is not None:
            more.append(f"{'run dir':<11} {rundir.path}")
        hint = _continue_hint(res, run, rundir)
        if hint and not out.storage_error:
            more.append(f"{'next':<11} {hint}")
        if second is not None:
            more.extend(_second_opinion_lines(second))
        for line in summary_lines(res, None, problem.reference, more, names=problem.spec.variables):
            print(line, flush=True)
    if out.display_errors:
        _err(f"cubage: note: the display failed {out.display_errors} time(s) ({out.display_error}); "
             "the run went on")
    if second is not None and second.get("agree") is False:
        _err("cubage: warning: the second opinion disagrees beyond both error estimates; at least one of them is "
             "wrong (see the Cautions in the README)")
    if out.storage_error:
        _err(f"cubage: {out.storage_error}")
        return EXIT_BAD_INPUT
    if out.failure:
        kept = " (the estimate above is from before the failing step)" if res.evaluations > 0 and not args.json else ""
        _err(f"cubage: integrand failed: {out.failure}{kept}")
    elif code == EXIT_SHORT and args.json:
        _err(f"cubage: stopped short of the goal: {res.status} ({meaning(res.status)})")
    return code


def _second_opinion(prep, res, guard) -> dict:
    """Integrate again with other nodes and boundaries (:func:`cubage.engine.rules.second_opinion`); compare.

    The same signal handling covers this phase: a signal stops the second run and the main result is kept.
    """
    import numpy as np

    from cubage.engine.rules import second_opinion
    from cubage.engine.run import Run
    from cubage.session.driver import RunDriver
    from cubage.session.jsonio import json_safe
    problem, run = prep.problem, prep.run
    opts, words = second_opinion(run.geometry.kind, problem.domain.dim, run.rule_name, run.settings.split)
    s = run.settings
    feats = {k: getattr(s, k) for k in ("breaks", "cuts", "singular") if getattr(s, k, None)}   # same boundaries
    try:
        alt = Run(problem.integrand, problem.domain, evaluator=run.evaluator, fingerprint=prep.fingerprint,
                  rel_tol=s.rel_tol, abs_tol=s.abs_tol, budget=s.budget, time_limit=s.time_limit, **opts, **feats)
    except ValueError as exc:
        return {"method": words, "status": "failed", "message": str(exc), "agree": None}
    driver = RunDriver(alt)
    guard.attach(driver)
    try:
        out = driver.drive()
    finally:
        guard.detach(driver)
    if out.failure:
        return {"method": words, "status": "failed", "message": out.failure, "agree": None}
    r2 = out.result
    if r2.status == "stopped":
        return json_safe({"method": words, "status": "stopped", "stopped_by": out.stop_reason,
                          "evaluations": int(r2.evaluations), "agree": None})
    diff = np.abs(np.asarray(res.values) - np.asarray(r2.values))
    agree = bool(np.all(diff <= np.asarray(res.errors) + np.asarray(r2.errors)))
    scalar = np.ndim(res.value) == 0
    return json_safe({"method": words, "value": r2.value, "error": r2.error,
                      "status": r2.status, "evaluations": int(r2.evaluations), "seconds": round(float(r2.seconds), 6),
                      "difference": float(diff[0]) if scalar else diff, "agree": agree})


def _second_opinion_lines(so: dict) -> list[str]:
    import numpy as np

    from cubage.cli.terminal_display import fmt_err, fmt_value
    from cubage.session.jsonio import number_from_json
    head = f"{'second':<11} {so['method']}"
    if so["status"] == "failed":
        return [head, f"{'':<11} failed: {so.get('message', '')}"]
    if so["status"] == "stopped":
        return [head, f"{'':<11} stopped by {so.get('stopped_by')} after {so.get('evaluations', 0):,} evaluations; "
                      "no comparison"]
    vals = np.atleast_1d([number_from_json(v) for v in np.atleast_1d(so["value"])])
    errs = np.atleast_1d([number_from_json(v) for v in np.atleast_1d(so["error"])])
    lines = [head] + [f"{'':<11} {fmt_value(v)} ± {fmt_err(e)}" for v, e in zip(vals, errs)]
    verdict = ("agrees within the two error estimates" if so["agree"] else
               "DISAGREES beyond both error estimates: at least one answer is wrong")
    lines.append(f"{'':<11} {so['status']}, {so['evaluations']:,} evaluations; {verdict}")
    return lines


def _session_entry(prep, command: str) -> dict:
    import socket
    import time

    from cubage import __version__
    return {"command": command, "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "host": socket.gethostname(),
            "pid": os.getpid(), "cubage_version": __version__, "evaluation": prep.evaluation,
            "from_evaluations": int(prep.run.evaluations), "overrides": prep.overrides.given()}


# --------------------------------------------------------------------------
# commands
# --------------------------------------------------------------------------

def cmd_run(args, guard) -> int:
    from cubage.session.prepare import prepare_run
    from cubage.session.run_directory import RunDir

    problem = _load(args.file, args.allow_python)
    if problem.scan is not None:
        from cubage.cli.scan_command import run_scan_command
        from cubage.session.prepare import prepare_scan
        return run_scan_command(args, problem, prepare_scan(problem, _overrides(args)), args.file
                                if problem.path is None else problem.path.stem)
    prep = prepare_run(problem, _overrides(args), snapshot_interval=SNAPSHOT_INTERVAL)
    name = problem.path.stem if problem.path is not None else args.file
    rd = RunDir(Path(args.run_dir)) if args.run_dir else None
    if rd is not None:
        rd.check_new_run(prep.fingerprint)
    try:
        guard.attach(prep.run)                 # a signal from here on stops the run at its first step
        prep.start_evaluator()                 # may start a worker pool: the signal handling is in place
        for n in prep.notes:
            _err(f"cubage: note: {n}")
        if rd is not None:
            rd.create(problem.text, {
                "problem": name, "title": problem.title,
                "problem_source": str(problem.path.resolve()) if problem.path is not None else None,
                "problem_fingerprint": prep.fingerprint, "run_fingerprint": prep.run.fingerprint(),
                "settings": dict(prep.run.settings.__dict__),
                "overrides": {**prep.overrides.given(), **({"checkpoint_every": args.checkpoint_every}
                                                           if args.checkpoint_every is not None else {})},
                "allow_python": bool(args.allow_python), "sessions": [_session_entry(prep, "run")]})
            for n in rd.notes:
                _err(f"cubage: note: {n}")
        every = args.checkpoint_every if args.checkpoint_every is not None else 60.0
        return _execute(prep, args, name=name, guard=guard, rundir=rd, checkpoint_every=every,
                        written_by="cubage run")
    finally:
        guard.detach(prep.run)
        if rd is not None:
            rd.release()
        prep.close()


def cmd_resume(args, guard) -> int:
    from cubage.cli.scan_command import is_scan_dir, resume_scan_command
    from cubage.problem.problem_file import parse_problem
    from cubage.session.prepare import check_time_limit, check_workers, resume_run
    from cubage.session.run_directory import LEDGER, RunDir, RunDirError
    if is_scan_dir(args.dir):
        return resume_scan_command(args)
    rd = RunDir(Path(args.dir))
    ledger = rd.open_existing()
    prep = None
    try:
        for n in rd.notes:
            _err(f"cubage: note: {n}")
        text = rd.read_source()
        path = rd.file("source.toml")
        try:
            if "python" in (tomllib.loads(text).get("integrand") or {}) and ledger.get("problem_source"):
                path = Path(ledger["problem_source"])   # relative file.py:function resolves beside the original
        except tomllib.TOMLDecodeError:
            pass
        problem = parse_problem(text, path=path, allow_python=args.allow_python)
        name = ledger.get("problem") or "source"
        saved = ledger.get("overrides", {})
        where = f"{rd.file(LEDGER)}: overrides"
        o = _overrides(args)
        try:                                  # the ledger's values pass the same checks as the options
            if o.workers is None and saved.get("workers") is not None:
                o.workers = check_workers(saved["workers"], f"{where}.workers")
                cores = os.cpu_count() or 1
                if isinstance(o.workers, int) and o.workers > cores:     # issue 10 item 15d
                    _err(f"cubage: note: {where}.workers = {o.workers} capped at this machine's {cores} cores "
                         "(--workers N sets any number)")
                    o.workers = cores
            for k in ("backend", "cluster"):
                if getattr(o, k) is None and saved.get(k) is not None:
                    if not isinstance(saved[k], str):
                        raise RunDirError(f"{where}.{k}: must be a string, not {type(saved[k]).__name__}")
                    setattr(o, k, saved[k])
            if args.cluster is None and o.cluster is not None and not args.allow_python:
                # a saved cluster is never reconnected without being named again (issue 10 item 0)
                _err(f"cubage: note: {where}.cluster names the dask cluster {o.cluster}, not reconnected: a dask "
                     "scheduler can run code in this process; name it again with --cluster (or pass "
                     "--allow-python); evaluating on this machine")
                o.cluster = None
                if args.backend is None and o.backend == "dask":
                    o.backend = None
            every = args.checkpoint_every
            if every is None:
                every = saved.get("checkpoint_every", 60.0)
                if every != 0:
                    every = check_time_limit(every, f"{where}.checkpoint_every")
        except ValueError as exc:
            raise RunDirError(str(exc)) from None
        prep = resume_run(problem, rd.checkpoint, o, snapshot_interval=SNAPSHOT_INTERVAL)
        guard.attach(prep.run)
        prep.start_evaluator()
        for n in prep.notes:
            _err(f"cubage: note: {n}")
        rd.add_session(ledger, _session_entry(prep, "resume"))
        rd.clear_verdict()                     # a follower must not take the old ending for this session's
        return _execute(prep, args, name=name, guard=guard, rundir=rd, log_after=rd.last_logged_evaluations(),
                        checkpoint_every=float(every), written_by="cubage resume")
    finally:
        if prep is not None:
            guard.detach(prep.run)
            prep.close()
        rd.release()


def _check_rows(problem) -> tuple[list[tuple[str, str]], dict]:
    """Rows describing a bound problem for ``cubage check`` and the JSON fields they add."""
    from cubage.engine.domains import Simplex
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
    rows.insert(3 if problem.title else 2, ("kind", kind))
    idx = [i for i, (k, _) in enumerate(rows) if k == "method"][0] + 1
    rows.insert(idx, ("rule", f"{name} ({how}), {nodes} nodes per region, {per}"))
    if problem.notes:
        rows.append(("notes", " ".join(problem.notes.split())))
    rows += _feature_rows(problem)
    return rows, {"rule": name, "nodes_per_region": nodes, "components": int(problem.components)}


def cmd_check(args) -> int:
    """``cubage check FILE...``: describe each problem or report its first mistake; exit 2 if any is bad."""
    from cubage.problem.problem_file import ProblemError, find_problem, load_problem
    entries = []
    for i, name in enumerate(args.files):
        try:
            problem = load_problem(find_problem(name), allow_python=args.allow_python)
            rows, extra = _check_rows(problem)
        except ProblemError as exc:
            entries.append({"file": str(name), "ok": False, **exc.to_json()})
            if not args.json:
                _err(str(exc))
            continue
        except UsageError as exc:
            entries.append({"file": str(name), "ok": False, "error": "bad-input", "message": str(exc)})
            if not args.json:
                _err(f"cubage: {exc}")
            continue
        entries.append({"file": str(problem.path), "ok": True, "problem": problem.spec.to_json(), **extra,
                        "description": {k: v for k, v in rows}})
        if not args.json:
            if i:
                print()
            width = max(len(k) for k, _ in rows)
            for k, v in rows:
                print(f"{k:>{width}}  {v}")
            print(f"{'':>{width}}  ok: the problem is valid", flush=True)
    ok = all(e["ok"] for e in entries)
    if args.json:
        _print_json({"ok": ok, "problems": entries})
    return EXIT_OK if ok else EXIT_BAD_INPUT


def _list_entry(f: Path) -> dict:
    """One row of ``cubage list``: the problem read as data (no user code imported), or why it is invalid."""
    from cubage.problem.problem_file import ProblemError, load_problem_spec
    entry = {"name": f.stem, "path": str(f)}
    try:
        spec = load_problem_spec(f)
    except ProblemError as exc:
        entry.update(ok=False, error=exc.to_json())
        return entry
    except Exception as exc:  # noqa: BLE001 - one unreadable file never ends the listing
        entry.update(ok=False, error={"error": "bad-input", "message": f"{f}: {type(exc).__name__}: {exc}"})
        return entry
    kind = "simplex" if spec.domain.kind == "simplex" else ("box" if spec.domain.bounded else "box, unbounded")
    entry.update(ok=True, dimension=spec.dim, kind=kind, title=spec.title, integrand=spec.kind,
                 needs_allow_python=spec.needs_python)
    return entry


def _feature_rows(problem) -> list[tuple[str, str]]:
    """The decomposition the problem's features give (issue 13)."""
    from cubage.engine.partition import FeatureError, describe_features
    rows = []                        # the feature lines themselves are in problem.describe()
    if getattr(problem, "features", None):
        try:
            rows.append(("pieces", describe_features(problem.domain, problem.features, problem.method.degree)))
        except FeatureError as exc:
            raise UsageError(f"{_problem_where(problem)}: [features] {exc}") from None
    return rows


def cmd_list(args) -> int:
    """``cubage list [DIR]``: the problems, with invalid files listed as such (never a failure as a whole)."""
    from cubage.problem.problem_file import bundled_problem_dir, list_problems, problem_dirs
    if args.dir:
        d = Path(args.dir)
        if not d.is_dir():
            raise UsageError(f"{d}: no such folder")
        dirs = [d]
    else:
        dirs = problem_dirs()
        if bundled_problem_dir() not in dirs:
            dirs.append(bundled_problem_dir())
    entries = [_list_entry(f) for f in list_problems(dirs)]
    if args.json:
        _print_json({"folders": [str(d) for d in dirs], "problems": entries})
        return EXIT_OK
    if not entries:
        print(f"no problems (*.toml) in {', '.join(str(d) for d in dirs)}")
        return EXIT_OK
    rows = []
    for e in entries:
        if not e["ok"]:
            rows.append((e["name"], "?", "?", "[invalid: see cubage check]"))
            continue
        title = e["title"]
        if e["needs_allow_python"]:
            title = f"{title}  [python integrand: runs with --allow-python]".strip()
        rows.append((e["name"], str(e["dimension"]), e["kind"], title))
    head = ("name", "dim", "domain", "title")
    w = [max(len(r[i]) for r in [head, *rows]) for i in range(3)]
    print(f"{head[0]:<{w[0]}}  {head[1]:>{w[1]}}  {head[2]:<{w[2]}}  {head[3]}")
    for r in rows:
        print(f"{r[0]:<{w[0]}}  {r[1]:>{w[1]}}  {r[2]:<{w[2]}}  {r[3]}")
    return EXIT_OK


def cmd_watch(args) -> int:
    """Follow a run directory: the text UI on a terminal, else plain lines until the run ends."""
    import time

    from cubage.cli.terminal_display import PlainTicker, verdict_lines
    from cubage.session.follower import RunFollower
    from cubage.session.jsonio import number_from_json
    from cubage.session.run_directory import LEDGER, OLD_LAYOUT_FILES, OUR_FILES, RunDir
    from cubage.session.status import EXIT_SHORT as SHORT
    from cubage.session.status import exit_code
    from cubage.session.trust import trust_of
    d = Path(args.dir)
    if not d.is_dir():
        raise UsageError(f"{d}: no such run directory")
    if not os.path.lexists(d / LEDGER) and any(os.path.lexists(d / n) for n in OLD_LAYOUT_FILES):
        RunDir(d)._refuse_old_layout(None)
    if not os.path.lexists(d / LEDGER):
        # an empty folder may be a run about to start (waited for); one holding other files is not a run directory
        try:
            others = sorted(n for n in os.listdir(d) if n not in OUR_FILES and not n.startswith("."))
        except OSError:
            others = []
        if others:
            raise UsageError(f"{d}: not a run directory (no {LEDGER}; it holds {others[0]}"
                             f"{' and more' if len(others) > 1 else ''}); make one with: cubage run FILE --run-dir DIR")
    plain = args.plain or args.once or not (sys.stdout is not None and sys.stdout.isatty()
                                            and sys.stdin is not None and sys.stdin.isatty())
    if not plain:
        return _ui(watch=args.dir)
    from cubage.cli.scan_command import is_scan_dir, watch_scan_plain
    if is_scan_dir(d):
        return watch_scan_plain(args)
    f = RunFollower(d)
    ticker = PlainTicker(None, every=args.every, stream=sys.stdout, prefix="watch")
    said: set[str] = set()
    first = True
    try:                                  # Ctrl-C leaves the viewer; the run it follows goes on
        while True:
            f.poll()
            if f.last_error and f.last_error not in said:
                said.add(f.last_error)
                _err(f"cubage: note: {f.last_error}")
            status = f.status
            if f.snapshot is not None:
                ticker(f.snapshot, final=first or args.once)
                first = False
            if f.result is not None:
                res = f.result
                try:
                    v = ", ".join(f"{number_from_json(x):.12e}" for x in
                                  (res["value"] if isinstance(res.get("value"), list) else [res.get("value")]))
                    e = ", ".join(f"{number_from_json(x):.2e}" for x in
                                  (res["error"] if isinstance(res.get("error"), list) else [res.get("error")]))
                    print(f"cubage watch: ended: {status}: {v} ± {e} (estimate)", flush=True)
                except (TypeError, ValueError, KeyError):
                    print(f"cubage watch: ended: {status}", flush=True)
                names = (res.get("problem") or {}).get("variables") or []
                for line in verdict_lines(res.get("message"), trust_of(res), names if isinstance(names, list) else []):
                    print(line, flush=True)
                return exit_code(status)
            if status == "runner-gone":
                print(f"cubage watch: {f.gone_message}", flush=True)
                return SHORT
            if args.once:
                if f.snapshot is None:
                    print(f"cubage watch: {status}: no progress line yet", flush=True)
                return EXIT_OK
            time.sleep(0.5)
    except KeyboardInterrupt:
        print("cubage watch: left; the run goes on", flush=True)
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


def _terminal() -> bool:
    return all(s is not None and s.isatty() for s in (sys.stdin, sys.stdout))


# --------------------------------------------------------------------------
# entry point
# --------------------------------------------------------------------------

def _fail(message: str, code: int, kind: str, want_json: bool) -> int:
    """Report an error: its line(s) on stderr, and with ``--json`` one JSON object on stdout."""
    _err(message)
    if want_json:
        try:
            _print_json({"schema": "cubage-error 1", "status": "error", "error": kind,
                         "message": message.splitlines()[0] if message else "", "exit_code": code})
        except (OSError, ValueError):
            pass
    return code


def main(argv: list[str] | None = None) -> int:
    """Run ``cubage`` with ``argv`` (default ``sys.argv[1:]``); returns the exit code.

    Signal handling (:class:`cubage.session.driver.StopSignals`) is installed
    first and covers every phase: before a run exists a signal ends the
    command quietly (exit 130); during a run it stops the run cleanly with its
    estimate (exit 3).
    """
    argv = list(sys.argv[1:] if argv is None else argv)
    want_json = "--json" in argv
    for name in ("stdout", "stderr"):     # closed by the caller: Python leaves None there; write into the void
        if getattr(sys, name) is None:
            setattr(sys, name, open(os.devnull, "w"))
    try:
        from cubage.session.driver import StopSignals
        guard = StopSignals()
    except KeyboardInterrupt:
        return _fail("cubage: interrupted", EXIT_INTERRUPTED, "interrupted", want_json)
    try:
        with guard:
            from cubage.cli import interrupted_while_loading
            if interrupted_while_loading():     # a signal while loading whose interrupt Python ignored
                raise KeyboardInterrupt
            return _main(argv, guard, want_json)
    except KeyboardInterrupt:
        return _fail("cubage: interrupted", EXIT_INTERRUPTED, "interrupted", want_json)


def _main(argv: list[str], guard, want_json: bool) -> int:
    if argv and argv[0] == "bench":
        return _bench(argv[1:])
    try:
        parser = build_parser(show_names=any(a in ("-h", "--help") for a in argv))
        args = parser.parse_args(argv)
    except SystemExit as exc:           # --help, --version: argparse has printed
        return exc.code if isinstance(exc.code, int) else EXIT_BAD_INPUT
    except UsageError as exc:
        return _fail(str(exc), EXIT_BAD_INPUT, "bad-input", want_json)
    debug = bool(getattr(args, "debug", False))
    want_json = bool(getattr(args, "json", False))
    if not debug:
        # the engine turns non-finite values into one-line messages (or estimates); numpy's floating-point warnings
        # from its own arithmetic would only print source lines on the terminal (user code keeps its warnings)
        import warnings
        warnings.filterwarnings("ignore", category=RuntimeWarning, module=r"cubage\.engine(\.|$)")
    try:
        if args.command is None or args.command == "tui":
            if not _terminal():
                parser.print_help(sys.stderr)
                return _fail("cubage: the text UI needs a terminal; for a headless run: cubage run FILE "
                             "(see: cubage --help)", EXIT_BAD_INPUT, "bad-input", False)
            if args.command is None:
                return _ui()
            return _ui(paths=args.paths or None, allow_python=args.allow_python)
        if args.command == "watch":
            return cmd_watch(args)
        if args.command == "plot":
            from cubage.cli.pictures import plot_command
            return plot_command(args)
        if args.command in ("run", "resume"):
            return {"run": cmd_run, "resume": cmd_resume}[args.command](args, guard)
        return {"check": cmd_check, "list": cmd_list}[args.command](args)
    except KeyboardInterrupt:
        raise
    except Exception as exc:  # noqa: BLE001 - sorted into bad input, closed output and internal errors
        return _report(exc, debug, want_json)


def _report(exc: Exception, debug: bool, want_json: bool) -> int:
    import errno

    from cubage.engine.checkpoint import CheckpointError
    from cubage.engine.domains import DomainError
    from cubage.problem.problem_file import ProblemError
    from cubage.session.prepare import InputError
    from cubage.session.run_directory import RunDirError
    if isinstance(exc, ProblemError):
        return _fail(str(exc), EXIT_BAD_INPUT, "bad-input", want_json)
    if isinstance(exc, (UsageError, RunDirError, CheckpointError, DomainError, InputError)):
        return _fail(f"cubage: {exc}", EXIT_BAD_INPUT, "bad-input", want_json)
    if isinstance(exc, OSError) and exc.errno in (errno.EPIPE, errno.EBADF):
        try:                                   # the caller closed our output: nothing more to say there
            sys.stdout = open(os.devnull, "w")
        except OSError:
            pass
        _err("cubage: standard output was closed by the caller; the output is lost "
             "(a run directory keeps the verdict)")
        return EXIT_FAILED
    if debug:
        traceback.print_exc()
        return EXIT_FAILED
    return _fail(f"cubage: internal error: {type(exc).__name__}: {exc} (rerun with --debug for the traceback)",
                 EXIT_FAILED, "internal", want_json)


if __name__ == "__main__":
    sys.exit(main())
