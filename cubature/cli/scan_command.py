"""``cubage run`` / ``cubage resume`` for problems with a ``[scan]`` table.

The terminal shows one table row per finished point (in the order points
finish) and, on a terminal, a progress bar over points on stderr.  ``--json``
prints one object with every point.  With ``--run-dir`` the scan's files
(:mod:`cubage.session.scan`) go there, with the table as ``scan.csv`` beside
``verdict.json``; ``cubage resume DIR`` continues it.  Exit 0 when every point
met its goal, 3 when any stopped short, 2 on bad input, 1 when a point's
integrand failed.
"""

from __future__ import annotations

import os
import socket
import sys
import threading
import time
from pathlib import Path

import numpy as np

EXIT_OK, EXIT_FAILED, EXIT_BAD_INPUT, EXIT_SHORT = 0, 1, 2, 3


def is_scan_dir(path) -> bool:
    """Whether ``path`` is a run directory holding a scan."""
    from cubage.session.jsonio import read_json_object
    from cubage.session.run_directory import LEDGER
    info = read_json_object(Path(path) / LEDGER)
    return info is not None and info.get("command") == "scan"


def _bar(done: int, total: int, width: int = 30) -> str:
    k = int(round(width * done / total)) if total else width
    return "[" + "#" * k + "." * (width - k) + f"] {done}/{total} points"


class _Rows:
    """Prints the table as points finish, and a progress bar over points on a terminal."""

    def __init__(self, names, total, *, quiet: bool, tty: bool):
        self.names = list(names)
        self.total = total
        self.quiet = quiet
        self.tty = tty
        self.widths = [max(10, len(n)) for n in self.names]
        self.started = False

    def header(self) -> None:
        if self.quiet:
            return
        cols = ["#".rjust(5)] + [n.rjust(w) for n, w in zip(self.names, self.widths)]
        cols += ["value".rjust(20), "error".rjust(9), "evaluations".rjust(12), "status"]
        print("  ".join(cols), flush=True)

    def __call__(self, pr, done, total) -> None:
        if self.quiet:
            return
        from cubage.cli.terminal_display import fmt_err
        v, e = np.atleast_1d(pr.value), np.atleast_1d(pr.error)
        cols = [str(pr.index).rjust(5)] + [f"{pr.constants[n]:.6g}".rjust(w) for n, w in zip(self.names, self.widths)]
        cols += [f"{float(v[0]):.12e}".rjust(20), fmt_err(float(e[0])).rjust(9), f"{pr.evaluations:,}".rjust(12),
                 pr.status]
        if self.tty:
            sys.stderr.write("\r\x1b[K")
        print("  ".join(cols), flush=True)
        for j in range(1, v.size):
            print(" " * (5 + sum(w + 2 for w in self.widths)) + f"  {float(v[j]):.12e}  {fmt_err(float(e[j]))}",
                  flush=True)
        if self.tty:
            sys.stderr.write(_bar(done, total))
            sys.stderr.flush()

    def close(self) -> None:
        if self.tty and not self.quiet:
            sys.stderr.write("\r\x1b[K")
            sys.stderr.flush()


class _StopFlag:
    """What :class:`cubage.session.driver.StopSignals` stops: the scan's stop event."""

    def __init__(self):
        self.event = threading.Event()

    def stop(self, reason: str = "") -> None:
        self.event.set()


def _record(res, problem, name, *, run_dir=None, stop_reason=None) -> dict:
    rec = res.to_json()
    rec.update({"problem": name, "title": problem.title, "components": int(problem.components),
                "status": "converged" if res.converged else ("stopped" if res.stopped else "short"),
                "points_converged": sum(p.converged for p in res.points)})
    if run_dir is not None:
        rec["run_dir"] = str(run_dir)
        rec["csv"] = str(Path(run_dir) / "scan.csv")
    if stop_reason:
        rec["stopped_by"] = stop_reason
    return rec


def _exit(res) -> int:
    if any(p.status == "failed" for p in res.points):
        return EXIT_FAILED
    return EXIT_OK if res.converged else EXIT_SHORT


def _execute(problem, args, *, name: str, settings: dict, rd, warm: bool, chains, workers: int, cluster) -> int:
    from cubage.cli.terminal_display import fmt_count
    from cubage.session.driver import StopSignals
    from cubage.session.run_directory import VERDICT
    from cubage.session.scan import CSV_FILE, ExprSource, run_scan
    grid = problem.scan
    tty = (not args.json) and sys.stderr.isatty() and os.environ.get("TERM") != "dumb"
    rows = _Rows(grid.names, grid.size, quiet=args.json, tty=tty)
    if not args.json:
        title = problem.title or name
        print(f"{title}: scan of {grid.describe()}, {'warm' if warm else 'cold'} start", flush=True)
        rows.header()
    flag = _StopFlag()
    every = args.checkpoint_every if args.checkpoint_every is not None else 60.0
    source = ExprSource.from_problem(problem)
    try:
        with StopSignals() as sigs:
            sigs.attach(flag)
            res = run_scan(source, problem.domain, grid, settings, warm=warm, chains=chains, workers=workers,
                           cluster=cluster, run_dir=rd.path if rd is not None else None, checkpoint_every=every,
                           on_point=rows, stop_event=flag.event)
    finally:
        rows.close()
    stop_reason = sigs.received if res.stopped else None
    rec = _record(res, problem, name, run_dir=rd.path if rd is not None else None, stop_reason=stop_reason)
    if rd is not None:
        from cubage.engine.checkpoint import write_atomic
        write_atomic(rd.file(CSV_FILE), res.csv_text().encode("utf-8"))
        if not res.stopped:
            rd.write_file(VERDICT, rec)
    code = _exit(res)
    if args.json:
        from cubage.session.jsonio import dumps
        print(dumps(rec), flush=True)
    else:
        short = [p for p in res.points if not p.converged]
        print(f"{len(res.points)}/{grid.size} points, {len(res.points) - len(short)} met the goal, "
              f"{fmt_count(res.evaluations)} evaluations (error figures are heuristic estimates, not bounds)",
              flush=True)
        if rd is not None:
            print(f"table: {rd.file(CSV_FILE)}; pictures (PNG, SVG): cubage plot {rd.path}", flush=True)
    if res.stopped:
        hint = f"; continue with: cubage resume {rd.path}" if rd is not None else \
            " (keep a --run-dir to be able to continue)"
        print(f"cubage: scan stopped{' by ' + stop_reason if stop_reason else ''} after "
              f"{len(res.points)}/{grid.size} points{hint}", file=sys.stderr, flush=True)
    elif code != EXIT_OK:
        bad = [p for p in res.points if not p.converged]
        print(f"cubage: {len(bad)} point(s) stopped short of the goal (first: #{bad[0].index} {bad[0].status}"
              f"{': ' + bad[0].message if bad[0].message else ''})", file=sys.stderr, flush=True)
    return code


def _cluster_label(args, problem) -> str:
    """How messages name the cluster: the option, or the file's key."""
    if getattr(args, "cluster", None):
        return "--cluster"
    return f"{problem.path if problem.path is not None else '<problem>'}: [method] cluster"


def run_scan_command(args, problem, plan, name: str) -> int:
    """``cubage run FILE`` for a problem with ``[scan]`` (``plan``: the session's
    :class:`~cubage.session.prepare.PreparedScan` of the problem and the command line's overrides)."""
    from cubage import __version__
    from cubage.cli.commands import UsageError
    from cubage.session.prepare import open_cluster
    from cubage.session.run_directory import RunDir
    if getattr(args, "second_opinion", False):
        raise UsageError("--second-opinion does not apply to a scan")
    for note in plan.notes:
        print(f"cubage: note: {note}", file=sys.stderr, flush=True)
    settings, workers, warm = plan.settings, plan.workers, not args.cold
    rd = None
    try:
        if args.run_dir:
            rd = RunDir(Path(args.run_dir))
            rd.check_new_run(problem.fingerprint())
            from cubage.session.scan import POINTS_FILE
            if (rd.path / POINTS_FILE).exists():
                from cubage.session.run_directory import RunDirError
                raise RunDirError(f"--run-dir {rd.path}: already holds this scan; continue it with: "
                                  f"cubage resume {rd.path}")
            info = {"cubage_version": __version__, "command": "scan", "problem": name, "title": problem.title,
                    "problem_source": str(problem.path.resolve()) if problem.path is not None else None,
                    "problem_fingerprint": problem.fingerprint(), "settings": settings,
                    "warm": warm, "chains": args.chains, "workers": workers,
                    "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "host": socket.gethostname(),
                    "pid": os.getpid()}
            rd.create(problem.text, info)
        with open_cluster(plan.cluster, _cluster_label(args, problem)) as client:
            return _execute(problem, args, name=name, settings=settings, rd=rd, warm=warm, chains=args.chains,
                            workers=workers, cluster=client)
    finally:
        if rd is not None:
            rd.release()


def resume_scan_command(args) -> int:
    """``cubage resume DIR`` for a scan's run directory."""
    from cubage.problem.problem_file import parse_problem
    from cubage.session.jsonio import read_json_object
    from cubage.session.prepare import choose_cluster, open_cluster, worker_count
    from cubage.session.run_directory import HALT_REQUEST, LEDGER, SOURCE, VERDICT, RunDir, RunDirError
    rd = RunDir(Path(args.dir))
    rd._refuse_links()
    info = read_json_object(rd.file(LEDGER))
    if info is None:
        raise RunDirError(f"{rd.path}: not a cubage run directory (no readable {LEDGER})")
    text = rd.read_source()
    problem = parse_problem(text, path=rd.file(SOURCE), allow_python=bool(getattr(args, "allow_python", False)))
    if problem.scan is None:
        raise RunDirError(f"{rd.path}: the problem copy has no [scan] table")
    settings = dict(info.get("settings") or {})
    for k in ("rel_tol", "abs_tol", "budget", "time_limit"):
        v = getattr(args, k, None)
        if v is not None:
            settings[k] = v
    workers = worker_count(args.workers if args.workers is not None else info.get("workers", 1))
    cluster, note = choose_cluster(problem, getattr(args, "cluster", None))     # the one rule of runs and scans
    if note:
        print(f"cubage: note: {note}", file=sys.stderr, flush=True)
    rd.acquire()
    try:
        rd.file(HALT_REQUEST).unlink(missing_ok=True)
        rd.file(VERDICT).unlink(missing_ok=True)
        entry = {"command": "resume", "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "host": socket.gethostname(),
                 "pid": os.getpid()}
        rd.add_session(info, entry)
        with open_cluster(cluster, _cluster_label(args, problem)) as client:
            return _execute(problem, args, name=info.get("problem") or "scan", settings=settings, rd=rd,
                            warm=bool(info.get("warm", True)), chains=info.get("chains"), workers=workers,
                            cluster=client)
    finally:
        rd.release()



def watch_scan_plain(args) -> int:
    """``cubage watch DIR --plain`` on a scan: a row per finished point until the scan ends (or ``--once``)."""
    from cubage.session.scan_follower import ScanFollower
    d = Path(args.dir)
    follower = ScanFollower(d)
    shown: set[int] = set()
    rows = None
    while True:
        pts = follower.poll()
        if rows is None and pts:            # the columns are the first point's constants
            rows = _Rows(list(next(iter(pts.values())).constants), 0, quiet=False, tty=False)
            rows.header()
        for k in sorted(set(pts) - shown):
            shown.add(k)
            rows(pts[k], len(shown), 0)
        verdict = follower.verdict
        if verdict is not None:
            ok = bool(verdict.get("converged"))
            print(f"watch: the scan has ended: {verdict.get('points_done')}/{verdict.get('points_total')} points, "
                  f"{'every point met its goal' if ok else 'some points stopped short of the goal'}", flush=True)
            return EXIT_OK if ok else EXIT_SHORT
        if args.once:
            print(f"watch: {len(shown)} points finished so far", flush=True)
            return EXIT_OK
        if follower.runner_alive() is False:
            print(f"watch: the scan's process is gone after {len(shown)} points; continue it with: "
                  f"cubage resume {d}", flush=True)
            return EXIT_SHORT
        time.sleep(min(float(args.every), 2.0))
