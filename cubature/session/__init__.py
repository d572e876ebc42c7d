"""The session layer: what both front ends (the ``cubage`` command and the text UI) share, each idea once.

Module map::

    prepare.py          a problem + the user's overrides -> a validated engine Run (PreparedRun):
                        every check of tolerances, budget, time limit, workers, rule and degree
                        (check_*, Overrides, InputError); the one evaluator construction
                        (make_evaluator); resume_run reads a checkpoint once
    driver.py           RunDriver: steps a Run in any thread, hands snapshots to a display (whose
                        failures never end the run), keeps the trail, checkpoints, honours stop /
                        pause / goal and budget changes; StopSignals: a command's signal handling,
                        installed before any worker pool starts and covering every phase
    run_directory.py    the run directory: layout (source.toml, ledger.json, partition.npz,
                        trail.jsonl, trail-map.json, verdict.json, occupant.json, halt-request),
                        the lock, refusals (in use, another problem, links, older layout), TrailLog
    progress_records.py the trail line and the map record <-> Snapshot
    follower.py         RunFollower: follows a run directory from another process (cubage watch,
                        the UI), and says when its runner is gone and how to continue
    result_record.py    the one result record (run --json, verdict.json, the UI's save), with the
                        engine's trust checks when its Result has them
    jsonio.py           the one JSON rule for non-finite numbers; write_json over the one atomic write
    forecast.py         the one time-to-goal forecast, and the one duration format (duration_text)
    status.py           the status words (engine + session), which are final, exit codes

Dependencies point down only: this package imports the engine and the problem
format, never a front end.  Nothing here is imported by ``import cubage``;
import the module you need (``from cubage.session.prepare import prepare_run``).
"""
