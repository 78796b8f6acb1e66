"""The speed goals of `biasbridge gain` (issue 17), measured (not asserted in the test suite).

* the level-1 column of one stage (the level-1 operating point linearised, the complex network
  solved at midband for gain and Rin, and again for Rout) in under 1 ms;
* one cold `biasbridge gain` of the bundled stage (a fresh process: imports, the worker's start-up,
  reading, the three columns with ngspice's `.ac` runs, the table printed to a pipe) in under 0.5 s.

Run as `.venv/bin/python tests/bench/gain_bench.py` (exit status 1 when a goal is missed).
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from run import EXAMPLES, child_environment, median_seconds  # the shared helpers of tests/bench/run.py
from run import report as report_goal

from bridge.analysis.dcsolve import solve_operating_point
from bridge.analysis.smallsignal import SignalSetup, level1_column
from bridge.netlist import read_netlist

STAGE = EXAMPLES / "greenhouse_cs_gain.cir"


def gain_goals() -> list[bool]:
    circuit = read_netlist(STAGE)
    level1 = solve_operating_point(circuit)
    setup = SignalSetup("VPROBE", "out", "RL", 1e5)
    seconds = median_seconds(lambda: level1_column(circuit, level1, setup), 1000)
    results = [report_goal("gain: level-1 column of one stage (median of 1000)", seconds * 1e3, 1.0)]
    with tempfile.TemporaryDirectory() as folder:
        env = child_environment(Path(folder) / "bytecode")
        command = [sys.executable, "-m", "bridge", "gain", str(STAGE)]
        subprocess.run(command, env=env, capture_output=True, check=False)  # compiles the bytecode once
        samples = []
        for _ in range(5):
            start = time.perf_counter()
            subprocess.run(command, env=env, capture_output=True, check=False)
            samples.append(time.perf_counter() - start)
        results.append(report_goal("gain: one cold `biasbridge gain` (median of 5)", statistics.median(samples),
                                   0.5, "s"))  # fmt: skip
    return results


if __name__ == "__main__":
    sys.exit(0 if all(gain_goals()) else 1)
