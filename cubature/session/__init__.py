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
    status.py           the status words (engine + session), which are final or reopenable, exit codes
    trust.py            the engine's trust checks in words (the UI's read-out and notes, the summary)
    scan.py             scans: one integral over a grid of constants, warm-started, resumable
                        (cubage.scan; its run-directory files sit beside the ones above)
    scan_follower.py    ScanFollower: follows a scan's run directory from another process (the scan
                        view, cubage watch --plain, cubage plot); read_scan_points

Dependencies point down only: this package imports the engine and the problem
format, never a front end.  ``import cubage`` loads none of it (``cubage.scan``
loads scan.py on first use); import the module you need
(``from cubage.session.prepare import prepare_run``).

The API in ten lines (what a front end calls)::

    prep = prepare_run(problem, Overrides(rel_tol=..., budget=..., workers=..., labels={...}))
    prep.start_evaluator()                  # after StopSignals is installed (it may start a pool)
    driver = RunDriver(prep.run, rundir=rd, on_snapshot=show)   # any thread
    driver.pause() / resume() / stop(reason) / set_goal(rel_tol=, budget=)   # any thread
    out = driver.drive()                    # Outcome: result, snapshot, failure, stop_reason, storage_error
    rec = result_record(out.result, problem=problem, settings=prep.settings_record(), written_by=...)
    write_json(path, rec)                   # the JSON rule + atomic write with fsync
    f = RunFollower(dir); f.poll(); f.snapshot, f.status, f.gone_message, f.request_stop()
    forecast(history, goal, rate, budget=...) -> Forecast; duration_text(seconds)
    is_final(status), REOPENABLE, meaning(status); check_tolerance/check_budget/check_workers(x, where)
"""
