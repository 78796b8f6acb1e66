"""`make bench`, large networks: `check` of stages with thousands of resistors, up to the card
limit, ends in seconds; `sweep` up to its element limit too; what is past a limit is refused
at once with a located message.

Each line: wall time and the peak memory (max RSS) of one `biasbridge` process, the goal and
whether it is met. Exit status 1 when a goal is missed. The machine is shared: wall times move
with its load, so the CPU time (user + system) is shown beside them.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO / "tests"))

from test_large_networks import ladder_netlist, mesh_netlist  # noqa: E402

from bridge.analysis.sweep import MAX_SWEEP_ELEMENTS  # noqa: E402
from bridge.netlist.build import MAX_DEVICES  # noqa: E402
from bridge.netlist.source import MAX_CARDS  # noqa: E402

GOAL_SECONDS = 5.0
REFUSAL_SECONDS = 1.0


def star_netlist(path: Path, strings: int) -> Path:
    """The gate at the hub of `strings` two-resistor strings to vdd or ground: one node joined
    to thousands (2·strings + 1 resistors)."""
    lines = ["Greenhouse sensor board: gate at the hub of a star of sensor strings", "VDD vdd 0 DC 5",
             "RD vdd drain 10k", "M1 drain gate 0 0 NS W=20u L=2u",
             ".model NS nmos (level=1 vto=0.7 kp=120u lambda=0.02 gamma=0.4 phi=0.65)"]
    for k in range(strings):
        lines += [f"RA{k} gate h{k} 10k", f"RB{k} h{k} {'vdd' if k % 3 else '0'} 22k"]
    path.write_text("\n".join(lines + [".op", ".end"]) + "\n")
    return path


def bank_netlist(path: Path, stages: int) -> Path:
    """`stages` divider-biased common-source stages on one supply: 4 cards and a MOSFET each."""
    lines = ["Dynamo light bank: divider-biased dimmer stages", "VDD vdd 0 DC 6",
             ".model NLED nmos (level=1 vto=0.8 kp=110u lambda=0.03 gamma=0.35 phi=0.7)"]
    for k in range(stages):
        lines += [f"RD{k} vdd d{k} 22k", f"RA{k} vdd s{k} {100 + k}k", f"RB{k} s{k} 0 100k",
                  f"M{k} d{k} s{k} 0 0 NLED W=40u L=2u"]
    path.write_text("\n".join(lines + [".op", ".end"]) + "\n")
    return path


def cell_string_netlist(path: Path, instances: int) -> Path:
    """A 100-resistor cell instantiated `instances` times in a string: few cards, many elements."""
    lines = ["Dynamo light: a string of tap cells", "VDD vdd 0 DC 6", ".subckt cell a b"]
    lines += [f"R{k} {'a' if k == 0 else f'i{k}'} {'b' if k == 99 else f'i{k + 1}'} 10" for k in range(100)]
    lines += [".ends", "RD vdd drain 560", "M1 drain gate 0 0 NLED W=40u L=2u",
              ".model NLED nmos (level=1 vto=0.8 kp=110u lambda=0.03 gamma=0.35 phi=0.7)"]
    taps = ["vdd"] + [f"t{k}" for k in range(1, instances)] + ["0"]
    taps[instances // 2] = "gate"
    lines += [f"X{k} {taps[k]} {taps[k + 1]} cell" for k in range(instances)]
    path.write_text("\n".join(lines + [".op", ".end"]) + "\n")
    return path


def measure(arguments: list[str]) -> tuple[int, float, float, float]:
    """Exit status, wall seconds, CPU seconds and max RSS (MB) of one `python -m bridge` run."""
    env = dict(os.environ, NO_COLOR="1")
    env.pop("FORCE_COLOR", None)
    start = time.perf_counter()
    process = subprocess.Popen([sys.executable, "-m", "bridge", *arguments], stdin=subprocess.DEVNULL,
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, cwd=REPO)
    _, status, usage = os.wait4(process.pid, 0)
    wall = time.perf_counter() - start
    process.returncode = os.waitstatus_to_exitcode(status)
    # ru_maxrss of the child alone (kB on Linux); the ngspice worker is a child of it and not counted.
    return process.returncode, wall, usage.ru_utime + usage.ru_stime, usage.ru_maxrss / 1024


def report(name: str, arguments: list[str], goal: float, statuses: tuple[int, ...]) -> bool:
    status, wall, cpu, rss = measure(arguments)
    ok = wall <= goal and status in statuses
    print(f"{name:<58} {wall:7.2f} s (cpu {cpu:5.2f} s, {rss:5.0f} MB, exit {status})   goal ≤ {goal:g} s   "
          f"{'ok' if ok else 'MISSED'}")
    return ok


def main() -> int:
    results = []
    with tempfile.TemporaryDirectory() as folder:
        here = Path(folder)
        for resistors in (2_000, 5_000, MAX_CARDS - 4):
            path = ladder_netlist(here / f"ladder{resistors}.cir", resistors)
            cards = resistors + 4
            results.append(report(f"check: ladder of {resistors:,} resistors ({cards:,} cards)",
                                  ["check", str(path)], GOAL_SECONDS, (0, 1)))
        side = 70
        path = mesh_netlist(here / "mesh.cir", side)
        results.append(report(f"check: {side}×{side} mesh, {2 * side * (side - 1):,} resistors",
                              ["check", str(path)], GOAL_SECONDS, (0, 1)))
        strings = (MAX_CARDS - 5) // 2
        path = star_netlist(here / "star.cir", strings)
        results.append(report(f"check: star, one node joined to {strings:,} strings ({2 * strings + 1:,} R)",
                              ["check", str(path)], GOAL_SECONDS, (0, 1)))
        path = bank_netlist(here / "bank.cir", MAX_DEVICES)
        results.append(report(f"check: {MAX_DEVICES:,} MOSFET stages on one supply ({4 * MAX_DEVICES + 4:,} cards)",
                              ["check", str(path)], GOAL_SECONDS, (0, 1)))
        stages = (MAX_CARDS - 4) // 4
        path = bank_netlist(here / "big_bank.cir", stages)
        results.append(report(f"check refuses {stages:,} MOSFET stages (located, exit 2)",
                              ["check", str(path)], REFUSAL_SECONDS * 2, (2,)))
        path = cell_string_netlist(here / "cells.cir", 2_000)
        results.append(report("check refuses 2,000 × a 100-resistor cell (located, exit 2)",
                              ["check", str(path)], REFUSAL_SECONDS, (2,)))
        path = ladder_netlist(here / "too_long.cir", MAX_CARDS + 1_000)
        results.append(report(f"check refuses {MAX_CARDS + 1_004:,} cards (located, exit 2)",
                              ["check", str(path)], REFUSAL_SECONDS, (2,)))
        # VDD, M1 and the resistors: MAX_SWEEP_ELEMENTS elements exactly.
        path = ladder_netlist(here / "sweep_ladder.cir", MAX_SWEEP_ELEMENTS - 2)
        results.append(report(f"sweep: ladder of {MAX_SWEEP_ELEMENTS:,} elements, 201 points",
                              ["sweep", str(path)], GOAL_SECONDS, (0, 1)))
        path = ladder_netlist(here / "sweep_long.cir", 5_000)
        results.append(report("sweep refuses a ladder of 5,000 resistors (located, exit 2)",
                              ["sweep", str(path)], REFUSAL_SECONDS * 2, (2,)))
    return 0 if all(results) else 1


if __name__ == "__main__":
    sys.exit(main())
