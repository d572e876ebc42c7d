"""Checkpoint integrity (issue 10 item 15f) and the memory ceiling of runs (issue 10 item 15c)."""

from __future__ import annotations

import io
import json
import math
import os
import subprocess
import sys
import zipfile

import numpy as np
import pytest

import cubage
from cubage.engine.checkpoint import CheckpointError, read_checkpoint
from cubage.engine.run import STATUSES, default_memory_ceiling, parse_memory_size

BOX2 = cubage.Box([0.0, 0.0], [1.0, 1.0])
A = 0.01   # width of the Lorentzian peaks below


def peaks(X):
    """A product of two narrow Lorentzians centred at (0.3, 0.6)."""
    return 1.0 / ((A * A + (X[:, 0] - 0.3) ** 2) * (A * A + (X[:, 1] - 0.6) ** 2))


# int_0^1 dx / (a^2 + (x - c)^2) = (atan((1 - c)/a) + atan(c/a)) / a (elementary antiderivative, by hand)
PEAKS_EXACT = ((math.atan(0.7 / A) + math.atan(0.3 / A)) / A) * ((math.atan(0.4 / A) + math.atan(0.6 / A)) / A)


def _checkpoint(tmp_path):
    run = cubage.Run(peaks, BOX2, rel_tol=1e-10)
    for _ in range(30):
        run.step()
    path = tmp_path / "ck.npz"
    run.save_checkpoint(path)
    return run, path


def _rewrite(path, edit_meta):
    """Rewrite a checkpoint with its metadata changed by ``edit_meta`` (the arrays untouched)."""
    with np.load(path, allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    meta = json.loads(arrays.pop("meta").tobytes().decode())
    edit_meta(meta)
    buf = io.BytesIO()
    np.savez(buf, meta=np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8), **arrays)
    path.write_bytes(buf.getvalue())


# ---------------------------------------------------------------------------
# item 15f
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("key, value", [("evaluations", 1), ("step", 2), ("elapsed", 0.0),
                                        ("status", "failed"), ("queue_thr", 0.5)])
def test_edited_metadata_is_caught_by_the_digest(tmp_path, key, value):
    """issue 10 item 15f: the digest covers the metadata too (an edited count is refused)."""
    run, path = _checkpoint(tmp_path)
    read_checkpoint(path)                     # intact: reads
    _rewrite(path, lambda m: m.__setitem__(key, value))
    with pytest.raises(CheckpointError, match="digest"):
        read_checkpoint(path)
    with pytest.raises(CheckpointError):
        cubage.Run.from_checkpoint(path, peaks, BOX2)


def test_bit_flips_in_the_zip_structure_are_one_line_errors(tmp_path):
    """issue 10 item 14/15f: a flipped bit anywhere in the zip headers is a CheckpointError (or, where
    the byte does not matter, the same data) -- never another exception."""
    run, path = _checkpoint(tmp_path)
    good = path.read_bytes()
    meta0, arrays0 = read_checkpoint(path)
    with zipfile.ZipFile(path) as z:
        offsets = [i.header_offset for i in z.infolist()]
    spots = sorted({*range(0, 64), *range(len(good) - 200, len(good)),
                    *(o + j for o in offsets for j in range(0, 46))})
    for pos in spots:
        bad = bytearray(good)
        bad[pos] ^= 0x10
        path.write_bytes(bytes(bad))
        try:
            meta, arrays = read_checkpoint(path)
        except CheckpointError as exc:
            assert "\n" not in str(exc)
            continue
        assert meta == meta0 and all(np.array_equal(arrays[k], arrays0[k]) for k in arrays0)


def test_version_1_checkpoints_still_load(tmp_path):
    """issue 10 item 15f: checkpoints written before the metadata was digested still resume."""
    from cubage.engine import checkpoint as ck
    run, path = _checkpoint(tmp_path)

    def to_v1(meta):
        with np.load(path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files if k != "meta"}
        meta["version"] = 1
        meta["digest"] = ck._digest(arrays)        # version 1: the arrays only
    _rewrite(path, to_v1)
    again = cubage.Run.from_checkpoint(path, peaks, BOX2)
    assert again.evaluations == run.evaluations



@pytest.mark.parametrize("generation", [None, 1, "previous", 99])
def test_a_checkpoint_of_another_error_control_is_refused(tmp_path, generation):
    """A checkpoint written under another error control (the first release wrote no generation) must not resume:
    the regions the run never splits again would keep estimates this version does not vouch for, and its
    ``converged`` could rest on them.  Before, it resumed without a word."""
    from cubage.engine import checkpoint as ck
    _, path = _checkpoint(tmp_path)

    def other(meta):
        with np.load(path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files if k != "meta"}
        if generation is None:
            meta.pop("estimator")
        else:
            meta["estimator"] = ck.GENERATION - 1 if generation == "previous" else generation
        meta["digest"] = ck._digest(arrays, meta)
    _rewrite(path, other)
    with pytest.raises(CheckpointError, match="another version of the error control") as err:
        cubage.Run.from_checkpoint(path, peaks, BOX2)
    assert "\n" not in str(err.value)


def test_resume_refuses_a_run_directory_of_another_error_control(tmp_path, cli):
    """The same through ``cubage resume``: one line, exit 2, and the checkpoint left as it was."""
    from cubage.engine import checkpoint as ck
    prob = tmp_path / "p.toml"
    prob.write_text('[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n[integrand]\n'
                    'expr = "1 / (1e-4 + (x - 0.3)**2 + (y - 0.6)**2)"\n[goal]\nrel_tol = 1e-13\nbudget = 30000\n')
    d = tmp_path / "rd"
    code, out, err = cli("run", prob, "--run-dir", d)
    assert code == 3 and (d / "partition.npz").is_file(), err     # budget spent: a checkpoint to resume
    path = d / "partition.npz"

    def first_release(meta):
        with np.load(path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files if k != "meta"}
        meta.pop("estimator")
        meta["digest"] = ck._digest(arrays, meta)
    _rewrite(path, first_release)
    before = path.read_bytes()
    code, out, err = cli("resume", d, "--budget", "60000")
    assert code == 2
    assert "another version of the error control" in err and len(err.strip().splitlines()) == 1, err
    assert path.read_bytes() == before

def test_temporary_files_of_a_crashed_write_are_removed_on_resume(tmp_path):
    """issue 10 item 15f: a crash during a checkpoint write leaves .NAME.tmp-PID; resuming removes it
    (when its writer is gone), and leaves the one of a live writer alone."""
    run, path = _checkpoint(tmp_path)
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    stale = tmp_path / f".ck.npz.tmp-{dead.pid}"
    stale.write_bytes(b"half a checkpoint")
    live = tmp_path / f".ck.npz.tmp-{os.getppid()}"
    live.write_bytes(b"being written")
    cubage.Run.from_checkpoint(path, peaks, BOX2)
    assert not stale.exists() and live.exists()


# ---------------------------------------------------------------------------
# item 15c
# ---------------------------------------------------------------------------

def test_memory_ceiling_ends_the_run_with_its_estimate():
    """issue 10 item 15c: a run that would outgrow its memory ceiling stops with status memory-ceiling
    and a good estimate, having stayed below the ceiling."""
    ceiling = 24 << 20
    run = cubage.Run(peaks, BOX2, rel_tol=1e-15, memory_ceiling="24M")
    res = run.run()
    assert res.status == "memory-ceiling" and "memory-ceiling" in STATUSES
    assert run.memory_needed() > ceiling
    assert run.store.nbytes <= ceiling
    assert abs(res.value - PEAKS_EXACT) <= 1e-6 * PEAKS_EXACT
    # a higher ceiling lets the same run go on
    run.set_goal(memory_ceiling="64M")
    assert run.status == "running"


def test_default_memory_ceiling_is_half_the_machine_memory():
    """issue 10 item 15c: the default is half of the physical memory (compared with /proc/meminfo)."""
    try:
        with open("/proc/meminfo") as fh:
            total = next(int(line.split()[1]) * 1024 for line in fh if line.startswith("MemTotal:"))
    except (OSError, StopIteration):
        pytest.skip("no /proc/meminfo")
    assert abs(default_memory_ceiling() - total // 2) <= 1 << 20


@pytest.mark.parametrize("text, expect", [("4G", 4 << 30), ("800M", 800 << 20), ("1.5 GiB", 3 << 29),
                                          (2 << 20, 2 << 20), ("3_000_000", 3_000_000)])
def test_memory_sizes(text, expect):
    """issue 10 item 15c: sizes in powers of 1024 (common practice for memory)."""
    assert parse_memory_size(text) == expect


@pytest.mark.parametrize("text", ["lots", "-4G", "0", "4X", "", True, 12.5, "10k"])
def test_bad_memory_sizes(text):
    with pytest.raises(ValueError):
        parse_memory_size(text)


PROBLEM = """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 1]]
[integrand]
expr = "1 / ((1e-4 + (x - 0.3)**2) * (1e-4 + (y - 0.6)**2))"
[goal]
rel_tol = 1e-15
{extra}
"""


def _main(capsys, *argv):
    from cubage.cli.commands import main
    capsys.readouterr()
    code = main([str(a) for a in argv])
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def test_memory_ceiling_from_the_command_line_and_the_problem_file(tmp_path, capsys):
    """issue 10 item 15c: --memory-ceiling and [goal] memory_ceiling; exit 3 with the status and estimate."""
    p = tmp_path / "p.toml"
    p.write_text(PROBLEM.format(extra=""))
    code, out, err = _main(capsys, "run", p, "--json", "--memory-ceiling", "24M")
    assert code == 3, err
    rec = json.loads(out)
    assert rec["status"] == "memory-ceiling" and rec["status_meaning"] == STATUSES["memory-ceiling"]
    assert abs(rec["value"] - PEAKS_EXACT) <= 1e-6 * PEAKS_EXACT    # a = 0.01: the same closed form
    p.write_text(PROBLEM.format(extra='memory_ceiling = "24M"'))
    code, out, err = _main(capsys, "run", p, "--json")
    assert code == 3 and json.loads(out)["status"] == "memory-ceiling"
    p.write_text(PROBLEM.format(extra='memory_ceiling = "lots"'))
    code, out, err = _main(capsys, "run", p)
    assert code == 2 and "memory_ceiling" in err and err.count("\n") <= 3
    code, out, err = _main(capsys, "run", tmp_path / "p.toml", "--memory-ceiling", "lots")
    assert code == 2 and "--memory-ceiling" in err
