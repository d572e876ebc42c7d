"""Benchmark: how long ``cubage`` commands take to start, and which heavy modules they load.

Run ``python benchmarks/startup.py`` (``--repeat N``, default 5).  It prints
figures; it asserts nothing.  Each command runs in a fresh interpreter of this
Python (the median wall time of N runs is printed), and a second run with
``-X importtime`` tells whether scipy.special was imported on the way.

Commands: ``cubage --help``, ``cubage run --help``, ``cubage list``, ``cubage
check`` on the bundled default problem (an expression without special
functions), and the import of the text UI's app module.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time

_CLI = "import sys; from cubage.cli import main; sys.argv = {argv!r}; main()"

CASES = [
    ("cubage --help", ["-c", _CLI.format(argv=["cubage", "--help"])]),
    ("cubage run --help", ["-c", _CLI.format(argv=["cubage", "run", "--help"])]),
    ("cubage list", ["-c", _CLI.format(argv=["cubage", "list"])]),
    ("cubage check gaussian-overlap", ["-c", _CLI.format(argv=["cubage", "check", "gaussian-overlap"])]),
    ("import cubage.tui.app", ["-c", "import cubage.tui.app"]),
    ("python -c pass (interpreter alone)", ["-c", "pass"]),
]


def _wall(args: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run([sys.executable, *args], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)
    return time.perf_counter() - t0


def _loads_special(args: list[str]) -> bool:
    r = subprocess.run([sys.executable, "-X", "importtime", *args], stdout=subprocess.DEVNULL,
                       stderr=subprocess.PIPE, text=True, check=False)
    return any(line.rsplit("|", 1)[-1].strip() == "scipy.special" for line in r.stderr.splitlines())


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5, help="runs per command (median printed)")
    a = ap.parse_args()
    print(f"{'command':36s} {'median s':>9s} {'min s':>7s}  scipy.special imported")
    for name, args in CASES:
        times = [_wall(args) for _ in range(a.repeat)]
        print(f"{name:36s} {statistics.median(times):9.3f} {min(times):7.3f}  "
              f"{'yes' if _loads_special(args) else 'no'}", flush=True)


if __name__ == "__main__":
    main()
