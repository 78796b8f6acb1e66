"""The lint speed goal (issue 14): 200 stages linted in one `biasbridge lint` call in under 2 s,
operating-point solutions included (level-1 always, ngspice's `.op` when it is installed).

Run by `make bench` through run.py, or alone: `.venv/bin/python tests/bench/lint_bench.py`.
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

STAGES = 200
GOAL_SECONDS = 2.0

# A few correct single-transistor stages of our own; {a} and {b} take values varied per copy.
TEMPLATES = {
    "probe_cs": """\
Greenhouse sensor board: soil-probe amplifier, divider-biased common source
VDD vdd 0 5
R1 vdd g {a}k
R2 g 0 150k
RD vdd d {b}k
M1 d g 0 0 nch W=10u L=2u
.model nch nmos (vto=0.7 kp=100u lambda=0.02)
.op
.end
""",
    "dynamo_follower": """\
Bicycle dynamo light: source follower driving the LED stage
VDD rail 0 6
VG g 0 {c}
RS s 0 {b}k
M1 rail g s 0 nch W=20u L=2u
.model nch nmos (vto=0.8 kp=110u lambda=0.01)
.op
.end
""",
    "lamp_pmos": """\
Greenhouse lamp controller: PMOS common source with a source resistor
VDD vdd 0 5
R1 vdd g 150k
R2 g 0 {a}k
RS vdd s 1k
RD d 0 {b}k
M1 d g s vdd pch W=40u L=2u
.model pch pmos (vto=-0.7 kp=40u lambda=0.02)
.op
.end
""",
    "fan_current_source": """\
Greenhouse fan sensor: common source with a current source in the source, split supplies
VDD vdd 0 5
VSS vss 0 -5
RG g 0 100k
RD vdd d {b}k
I1 s vss {d}u
CS s 0 10u
M1 d g s vss nch W=20u L=2u
.model nch nmos (vto=0.7 kp=100u lambda=0.02)
.op
.end
""",
    "radio_ac": """\
Bicycle radio preamp: AC-coupled common source, divider bias
VDD vdd 0 9
VIN in 0 DC 0 AC 1
C1 in g 1u
R1 vdd g {a}k
R2 g 0 220k
RD vdd d {b}k
RS s 0 1k
CS s 0 100u
C2 d out 1u
RL out 0 100k
M1 d g s 0 nch W=20u L=2u
.model nch nmos (vto=0.8 kp=110u lambda=0.01)
.op
.end
""",
}


def lint_stages(folder: Path, count: int = STAGES) -> list[Path]:
    """`count` netlists from the templates in turn, each copy with its values moved a little."""
    names = sorted(TEMPLATES)
    paths = []
    for k in range(count):
        name = names[k % len(names)]
        step = 1 + k // len(names)
        values = {"a": f"{330 + step:g}", "b": f"{8 + 0.01 * step:.3g}", "c": f"{2.5 + 0.001 * step:.4g}",
                  "d": f"{200 + step:g}"}
        if name == "lamp_pmos":
            values["a"] = f"{330 + step:g}"
            values["b"] = f"{4 + 0.01 * step:.3g}"
        if name == "radio_ac":
            values["a"] = f"{560 + step:g}"
            values["b"] = f"{4.7 + 0.005 * step:.3g}"
        if name == "fan_current_source":
            values["b"] = f"{10 + 0.01 * step:.3g}"
        path = folder / f"{name}_{k:03d}.cir"
        path.write_text(TEMPLATES[name].format(**values))
        paths.append(path)
    return paths


def run_lint(files: list[Path]) -> tuple[float, subprocess.CompletedProcess]:
    start = time.perf_counter()
    completed = subprocess.run(
        [sys.executable, "-m", "bridge", "lint", "--format", "text", *map(str, files)],
        stdin=subprocess.DEVNULL, capture_output=True, text=True,
    )
    seconds = time.perf_counter() - start
    if completed.returncode not in (0, 1):
        raise RuntimeError(f"lint failed ({completed.returncode}): {completed.stderr[-500:]}")
    return seconds, completed


def lint_goal() -> bool:
    from bridge.lint import registry
    from bridge.sim.client import ngspice_available

    with tempfile.TemporaryDirectory() as folder:
        files = lint_stages(Path(folder))
        run_lint(files)  # the first run compiles the bytecode, as after an install
        runs = [run_lint(files) for _ in range(5)]
        median = statistics.median(seconds for seconds, _ in runs)
        loud = [line for line in runs[0][1].stdout.splitlines() if " error " in line or " warning " in line]
    sim = "ngspice .op included" if ngspice_available()[0] else "ngspice not installed: level-1 only"
    ok = median <= GOAL_SECONDS
    print(f"{f'`lint` of {len(files)} stages in one call (median of 5)':<52} {median:9.3f} s   "
          f"goal ≤ {GOAL_SECONDS:g} s   {'ok' if ok else 'MISSED'}")
    print(f"  {len(registry.RULES)} rules registered on this tree ({sim}); more rule families make it slower")
    if loud:
        print(f"  {len(loud)} warnings or errors on these correct stages, first: {loud[0]}")
    return ok


if __name__ == "__main__":
    sys.exit(0 if lint_goal() else 1)
