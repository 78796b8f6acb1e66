"""The speed goals of `biasbridge spread`, measured (not asserted in the test suite), side by side.

Each goal line prints the measurement (a median), the goal and whether it is met; lines without
a goal are context. Exit status 1 when a goal is missed.

* 10,000 Monte-Carlo samples of the bundled dynamo lamp driver (its tolerance file: resistors,
  the supply, VTO, KP and temperature) solved by one ``solve_dc_batch`` call, after start-up
  (modules imported, netlist read, one warm-up batch), in under 50 ms;
* the same samples as ngspice operating points through the shared library (each sample's
  circuit emitted and run `.op` through the worker, as `spread`'s corner check runs its corners):
  200 of them timed, the time for 10,000 extrapolated; goal: the batch at least 100× faster;
* a whole cold `biasbridge spread` of 10,000 samples with its ngspice corner check (a fresh
  process: imports, the worker's start-up, reading, corners, samples, the corners in ngspice, the
  summary printed to a pipe) in under 1 s; beside it, for context, `--json` and a bare interpreter.
"""

from __future__ import annotations

import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from run import EXAMPLES, child_environment, median_seconds, note  # the shared helpers of tests/bench/run.py
from run import report as report_goal

from bridge.analysis.spread import monte_carlo, solve_points
from bridge.commands.spread_defaults import bands, read_tolerance_file
from bridge.netlist import read_netlist
from bridge.sim.client import NgspiceSession, ngspice_available
from bridge.sim.corners import corner_circuit
from bridge.sim.operating_point import simulate_operating_point

NETLIST = EXAMPLES / "spread" / "dynamo_lamp.cir"
TOLERANCES = EXAMPLES / "spread" / "dynamo_lamp.toml"
SAMPLES = 10_000
SIM_SAMPLES = 200
REPEAT = 7
COLD_RUNS = 5


def report(name: str, value: float, goal: float | None, unit: str = "ms", *, at_least: bool = False) -> bool:
    """A goal line as in run.py (`at_least`: the value must reach the goal), or a context line."""
    if goal is None:
        note(name, value, unit)
        return True
    if at_least:
        ok = value >= goal
        print(f"{name:<52} {value:9.1f} {unit}   goal ≥ {goal:g} {unit}   {'ok' if ok else 'MISSED'}")
        return ok
    return report_goal(name, value, goal, unit)


def batch_goals() -> list[bool]:
    circuit = read_netlist(NETLIST)
    varied = bands(circuit, read_tolerance_file(TOLERANCES))
    points = monte_carlo(varied, SAMPLES, 0, "uniform")
    solve_points(circuit, varied, points)  # warm-up: first-call costs are start-up
    batch = median_seconds(lambda: solve_points(circuit, varied, points), REPEAT)
    cpu = []
    for _ in range(REPEAT):
        start = time.process_time()
        solve_points(circuit, varied, points)
        cpu.append(time.process_time() - start)
    solved = solve_points(circuit, varied, points)
    results = [report(f"{SAMPLES:,} samples solved at once (median of {REPEAT})", batch * 1e3, 50.0)]
    note(f"  context: the same, CPU time of this process (median of {REPEAT})", statistics.median(cpu) * 1e3, "ms")
    note("  context: load average of the machine (1 min)", os.getloadavg()[0], "")
    note("  context: rows solved (of 10,000)", float(solved.solved.sum()), "rows")
    if not ngspice_available()[0]:
        print("ngspice absent: the comparison with its operating points is skipped")
        return results
    with NgspiceSession() as session:
        variants = [corner_circuit(circuit, varied, points.values[k]) for k in range(SIM_SAMPLES)]
        simulate_operating_point(session, variants[0])  # the worker started and warm
        start = time.perf_counter()
        for variant in variants:
            simulate_operating_point(session, variant)
        per_sample = (time.perf_counter() - start) / SIM_SAMPLES
    extrapolated = per_sample * SAMPLES
    note(f"  ngspice .op, {SIM_SAMPLES} samples through the worker, per sample", per_sample * 1e3, "ms")
    note(f"  ngspice .op for {SAMPLES:,} samples (extrapolated)", extrapolated, "s")
    results.append(report("  batch faster than ngspice by", extrapolated / batch, 100.0, "×", at_least=True))
    return results


def cold_command_goal() -> bool:
    """`python -m bridge spread` in a fresh process, bytecode cached as after an install; the
    table and --json runs alternate, so that load on the machine hits both alike."""
    with tempfile.TemporaryDirectory() as folder:
        env = child_environment(Path(folder) / "bytecode")

        cpu: list[float] = []

        def seconds(*arguments: str) -> float:
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            start = time.perf_counter()
            completed = subprocess.run([sys.executable, *arguments], stdin=subprocess.DEVNULL, capture_output=True,
                                       env=env, check=False)  # fmt: skip
            elapsed = time.perf_counter() - start
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            if arguments[:3] == ("-m", "bridge", "spread") and "--json" not in arguments:
                cpu.append(after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime)
            if completed.returncode not in (0, 1):
                raise RuntimeError(f"spread failed ({completed.returncode}): {completed.stderr.decode()[-500:]}")
            return elapsed

        command = ("-m", "bridge", "spread", str(NETLIST), "--tolerances", str(TOLERANCES), "--samples", str(SAMPLES))
        seconds(*command)  # the first run compiles the bytecode
        runs = [(seconds(*command), seconds(*command, "--json"), seconds("-c", "pass")) for _ in range(COLD_RUNS)]
    table, as_json, bare = (statistics.median(run[k] for run in runs) for k in range(3))
    simulator = "" if ngspice_available()[0] else " (ngspice absent: no corner check)"
    report(f"  context: the interpreter alone, python -c pass (median of {COLD_RUNS})", bare, None, "s")
    report(f"  context: cold `spread --json` (median of {COLD_RUNS})", as_json, None, "s")
    report("  context: cold `spread`, CPU time (its ngspice worker included; median)", statistics.median(cpu[1:]),
           None, "s")  # fmt: skip
    return report(f"cold `spread` of {SAMPLES:,} samples with corners{simulator}", table, 1.0, "s")


def main() -> int:
    results = [*batch_goals(), cold_command_goal()]
    return 0 if all(results) else 1


if __name__ == "__main__":
    sys.exit(main())
