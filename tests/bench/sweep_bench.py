"""The speed goals of `biasbridge sweep`, measured (not asserted in the test suite).

Each goal line prints the measurement, the goal and whether it is met; lines without a goal
are context. Exit status 1 when a goal is missed.

* a 1001-point level-1 sweep solved at once (solve_dc_sweep_arrays as the sweep command's level-1
  column calls it: a vectorised Newton over all points, each started from the hand column's point,
  which the command has computed by then) in under 5 ms; beside it, for context, the same without
  starts (the first point by the scalar solver, every 16th from it, the rest from neighbours) and
  point by point (solve_dc_sweep, each point started from the last);
* 10,000 parameter sets of the bench stage (its three resistors, VTO, KP and the temperature
  varied: a Monte-Carlo batch) solved at once by solve_dc_batch in under 50 ms, and at least 100×
  faster than the same samples as ngspice operating points through the shared library (200 of them
  run in the worker, timed, and extrapolated to 10,000);
* the hand column's solves of a 201-point sweep (HandSweep.solve_all: the circuit reduced once,
  the network's solves in one batched call, the closed form per point, no working) in under 5 ms;
  beside it, for context, the same points by hand_analysis with its working on a copy of the
  circuit per point (what the column did before);
* the ngspice column costs no more than the same `.dc` runs in the worker plus 20 %: "the same
  runs" are the decks the sweep emits (the grid's `.dc` and the finer ones around each edge and
  the bias point, same `.save` vectors) run through the same worker with nothing done to their
  answers; "ours" is sim_curve, the runs plus everything the sweep extracts (regions, edges, gains);
* a whole cold `biasbridge sweep` of a bundled stage (a fresh process, as a user runs it: imports,
  the worker's start-up, reading, the three columns, the table printed to a pipe) in under 0.5 s;
  beside it, for context, the same with --json and a bare interpreter's start.
"""

from __future__ import annotations

import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
from run import EXAMPLES, child_environment, median_seconds, note  # the shared helpers of tests/bench/run.py
from run import report as report_goal

from bridge.analysis.dcbatch import BatchValues, solve_dc_batch, solve_dc_sweep_arrays
from bridge.analysis.dcsolve import solve_dc_sweep
from bridge.analysis.hand import HandSweep, hand_analysis
from bridge.analysis.sweep import HandColumn, hand_starts, sweep_values, with_source_value
from bridge.netlist import parse_netlist
from bridge.netlist.variant import at_temperature, with_model_parameters, with_values
from bridge.sim.client import NgspiceSession, ngspice_available
from bridge.sim.operating_point import simulate_operating_point
from bridge.sim.transfer import sim_curve, sim_sweep_deck

# A divider-biased common source with LAMBDA and GAMMA, swept at the gate through all three regions.
STAGE = """\
Bench: common source, VIN through a divider, all three regions
VDD vdd 0 5
VIN in 0 2.4
R1 in g 100k
R2 g 0 100k
RD vdd d 10k
M1 d g 0 0 nch w=20u l=2u
.model nch nmos (vto=0.7 kp=120u lambda=0.02 gamma=0.4 phi=0.65)
"""
POINTS = 1001


def report(name: str, value: float, goal: float | None, unit: str = "ms") -> bool:
    """A goal line as in run.py, or a context line when there is no goal."""
    if goal is None:
        note(name, value, unit)
        return True
    return report_goal(name, value, goal, unit)


def level1_goal() -> bool:
    circuit = parse_netlist(STAGE, "bench.cir")
    values = sweep_values(0.0, 5.0, points=POINTS)
    solve_dc_sweep(circuit, "VIN", values)  # warm-up: imports, first-call costs
    seconds = median_seconds(lambda: solve_dc_sweep(circuit, "VIN", values), 7)
    # Context since the sweep command solves its level-1 column at once (below); the point-by-point
    # continuation remains the fallback for stragglers and circuits with diodes.
    report(f"  context: level-1 sweep point by point, {POINTS} points (median of 7)", seconds * 1e3, None)
    solve_dc_sweep_arrays(circuit, "VIN", values)
    seconds = median_seconds(lambda: solve_dc_sweep_arrays(circuit, "VIN", values), 21)
    report(f"  context: level-1 sweep at once without starts, {POINTS} points (median of 21)", seconds * 1e3, None)
    hand = HandColumn(circuit, "VIN")
    hand.points = hand.solve_all([float(v) for v in values])
    starts = hand_starts(circuit, hand, values)
    solve_dc_sweep_arrays(circuit, "VIN", values, start=starts)
    seconds = median_seconds(lambda: solve_dc_sweep_arrays(circuit, "VIN", values, start=starts), 21)
    return report(f"level-1 sweep at once from the hand points, {POINTS} points (median of 21)", seconds * 1e3, 5.0)


SAMPLES = 10_000
SIMULATED_SAMPLES = 200


def batch_samples(circuit, count: int, seed: int = 18) -> BatchValues:
    """A Monte-Carlo batch of the bench stage: resistors ±5 %, VTO ±0.1 V, KP ±20 %, −40…125 °C."""
    rng = np.random.default_rng(seed)
    return BatchValues(
        count,
        resistors={name: circuit.element(name).value * rng.uniform(0.95, 1.05, count)
                   for name in ("R1", "R2", "RD")},  # fmt: skip
        parameters={"M1": {"vto": 0.7 + rng.uniform(-0.1, 0.1, count), "kp": 120e-6 * rng.uniform(0.8, 1.2, count)}},
        temperature=rng.uniform(-40.0, 125.0, count),
    )


def sample_circuit(circuit, values: BatchValues, k: int):
    """Sample `k` as a Circuit of its own (the variant functions; the stage has one MOSFET per card)."""
    row = with_values(circuit, {name: float(column[k]) for name, column in values.resistors.items()})
    card = {key: float(column[k]) for key, column in values.parameters["M1"].items()}
    row = with_model_parameters(row, {"nch": card})
    return at_temperature(row, float(values.temperature[k]))


def batch_goal() -> bool:
    circuit = parse_netlist(STAGE, "bench.cir")
    values = batch_samples(circuit, SAMPLES)
    solved = solve_dc_batch(circuit, values)  # warm-up
    if not solved.solved.all():
        raise AssertionError("a sample without a solution")
    seconds = median_seconds(lambda: solve_dc_batch(circuit, values), 11)
    vectorised = int(solved.vectorised.sum())
    ok = report(f"{SAMPLES:,} parameter sets (resistors, VTO, KP, temperature) solved (median of 11)",
                seconds * 1e3, 50.0)  # fmt: skip
    print(f"  context: {vectorised:,} of them solved by the vectorised Newton, the rest by the scalar solver")
    available, hint = ngspice_available()
    if not available:
        print(f"{'ngspice operating points of the same samples':<60} skipped: {hint}")
        return ok
    circuits = [sample_circuit(circuit, values, k) for k in range(SIMULATED_SAMPLES)]
    with NgspiceSession() as session:
        simulate_operating_point(session, circuits[0])  # start the worker
        start = time.perf_counter()
        points = [simulate_operating_point(session, row) for row in circuits]
        simulated = time.perf_counter() - start
    # The same samples: ngspice's drain voltage within its own tolerance of ours.
    drain = solved.voltage("d")[:SIMULATED_SAMPLES]
    worst = max(abs(point.node_voltages["d"] - ours) / abs(ours) for point, ours in zip(points, drain))
    extrapolated = simulated / SIMULATED_SAMPLES * SAMPLES
    report(f"  ngspice .op through the shared library, {SIMULATED_SAMPLES} of them, x{SAMPLES // SIMULATED_SAMPLES}",
           extrapolated * 1e3, None)  # fmt: skip
    print(f"  context: largest |V(d) ngspice − ours| / V(d) over those samples: {worst:.2g}")
    report("  context: times faster than ngspice", extrapolated / seconds, None, "x")
    return report("batch time as a share of ngspice's (100x faster: 1 %)", seconds / extrapolated * 100.0, 1.0,
                  "%") and ok  # fmt: skip


HAND_POINTS = 201


def hand_goal() -> bool:
    circuit = parse_netlist(STAGE, "bench.cir")
    values = [float(v) for v in sweep_values(0.0, 5.0, points=HAND_POINTS)]

    def column() -> None:
        model = HandSweep(circuit, "VIN")
        if any(solution is None for solution in model.solve_all(values)):
            raise AssertionError("a point off the closed-form path")

    def with_working() -> None:
        for value in values:
            hand_analysis(with_source_value(circuit, "VIN", value))

    column()  # warm-up
    before = median_seconds(with_working, 3)
    report(f"  context: hand_analysis with its working, {HAND_POINTS} copies of the circuit", before * 1e3, None)
    seconds = median_seconds(column, 11)
    return report(f"hand column, {HAND_POINTS} points, numbers only (median of 11)", seconds * 1e3, 5.0)


def ngspice_batch_seconds(folder: Path, deck_text: str, repeat: int) -> float:
    """`ngspice -b` on the emitted deck with a `.print dc` card (without one, batch mode runs
    nothing), minus the same process on a 1-point `.dc`: its compute and print time."""
    lines = [line for line in deck_text.splitlines() if line.strip().lower() != ".end"]
    output = next(line.split()[1] for line in lines if line.startswith(".save"))
    full = folder / "full.cir"
    single = folder / "single.cir"
    full.write_text("\n".join(lines + [f".print dc {output}", ".end"]) + "\n")
    single_lines = [".dc VIN 0 0 1" if line.startswith(".dc") else line for line in lines]
    single.write_text("\n".join(single_lines + [f".print dc {output}", ".end"]) + "\n")

    def batch(path: Path) -> Callable[[], object]:
        return lambda: subprocess.run(["ngspice", "-b", str(path)], capture_output=True, check=False)

    return median_seconds(batch(full), repeat) - median_seconds(batch(single), repeat)


class RecordingSession:
    """An NgspiceSession that notes every deck sim_curve sends, so the same runs can be timed bare."""

    def __init__(self, session: NgspiceSession) -> None:
        self.session = session
        self.runs: list[tuple[object, object]] = []

    @property
    def version(self) -> str:
        return self.session.version

    def run(self, deck, vectors=None, timeout: float = 30.0):
        self.runs.append((deck, vectors))
        return self.session.run(deck, vectors=vectors, timeout=timeout)


def sim_goal() -> bool:
    available, hint = ngspice_available()
    if not available:
        print(f"{'ngspice column':<60} skipped: {hint}")
        return True
    circuit = parse_netlist(STAGE, "bench.cir")
    values = sweep_values(0.0, 5.0, points=POINTS)
    deck = sim_sweep_deck(circuit, "VIN", "d", values)
    bare = sim_sweep_deck(circuit, "VIN", "d", values, with_devices=False)
    runs = {"ours": [], "same": [], "bare": []}
    with NgspiceSession() as session:
        session.run(deck)  # start the worker
        recorder = RecordingSession(session)
        sim_curve(circuit, recorder, "VIN", "d", values, 2.4, ("M1",), 30.0)  # type: ignore[arg-type]
        sent = list(recorder.runs)

        def same_runs() -> None:
            for sent_deck, sent_vectors in sent:
                session.run(sent_deck, vectors=sent_vectors, timeout=30.0)

        for _ in range(31):  # interleaved, so that load on the machine hits all three alike
            for name, action in (
                ("ours", lambda: sim_curve(circuit, session, "VIN", "d", values, 2.4, ("M1",), 30.0)),
                ("same", same_runs),
                ("bare", lambda: session.run(bare, vectors=["v(d)"], timeout=30.0)),
            ):
                start = time.perf_counter()
                action()
                runs[name].append(time.perf_counter() - start)
    ours, same, bare_seconds = (statistics.median(runs[name]) for name in ("ours", "same", "bare"))
    report(f"ngspice .dc, {POINTS} points, in the worker (V(out) only)", bare_seconds * 1e3, None)
    report(f"  the same runs: that .dc with vgs, vds, von of M1 saved and {len(sent) - 1} finer ones", same * 1e3, None)
    report("  the ngspice column (those runs and our extraction)", ours * 1e3, None)
    if shutil.which("ngspice"):
        with tempfile.TemporaryDirectory() as folder:
            batch = ngspice_batch_seconds(Path(folder), deck.text, 11)
        report("  context: ngspice -b, that .dc printed, minus its start-up", batch * 1e3, None)
    overhead = (ours / same - 1.0) * 100.0
    return report("ngspice column over the same runs in the worker", overhead, 20.0, "%")


COLD_RUNS = 9


def cold_command_goal() -> bool:
    """`python -m bridge sweep netlists/cs_divider.cir` in a fresh process, bytecode cached as after
    an install (see run.child_environment); the table and --json runs alternate, so that load on
    the machine hits both alike."""
    netlist = str(EXAMPLES / "cs_divider.cir")
    with tempfile.TemporaryDirectory() as folder:
        env = child_environment(Path(folder) / "bytecode")

        def seconds(*arguments: str) -> float:
            start = time.perf_counter()
            completed = subprocess.run([sys.executable, *arguments], stdin=subprocess.DEVNULL, capture_output=True,
                                       env=env, check=False)  # fmt: skip
            elapsed = time.perf_counter() - start
            if completed.returncode not in (0, 1):
                raise RuntimeError(f"sweep failed ({completed.returncode}): {completed.stderr.decode()[-500:]}")
            return elapsed

        table_command = ("-m", "bridge", "sweep", netlist)
        seconds(*table_command)  # the first run compiles the bytecode
        runs = [(seconds(*table_command), seconds(*table_command, "--json"), seconds("-c", "pass"))
                for _ in range(COLD_RUNS)]  # fmt: skip
    table, as_json, bare = (statistics.median(run[k] for run in runs) for k in range(3))
    simulator = "" if ngspice_available()[0] else " (ngspice absent: no worker)"
    report(f"  context: the interpreter alone, python -c pass (median of {COLD_RUNS})", bare, None, "s")
    report(f"  context: cold `sweep --json` of cs_divider.cir (median of {COLD_RUNS})", as_json, None, "s")
    return report(f"cold `sweep` of cs_divider.cir, table to a pipe{simulator}", table, 0.5, "s")


def main() -> int:
    results = [level1_goal(), batch_goal(), hand_goal(), sim_goal(), cold_command_goal()]
    return 0 if all(results) else 1


if __name__ == "__main__":
    sys.exit(main())
