"""`make bench`: the speed goals of the issues, measured (not asserted in the test suite).

Each line prints the measurement, the goal and whether it is met. Exit status 1 when a
goal is missed, so a regression is visible.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

from bridge.netlist import parse_netlist, read_netlist
from bridge.netlist.parser import _parser


def fifty_card_netlist() -> str:
    """A 50-card stage-sized netlist with the usual mix: models, params, sources, MOSFETs."""
    lines = ["Bench: fifty cards", ".param vdd=5 rload={10k}", ".model nch nmos (vto=0.7 kp=120u lambda=0.02)",
             ".model pch pmos (vto=-0.8 kp=45u)", "VDD vdd 0 {vdd}", "VIN in 0 DC 1.2 AC 1"]
    for i in range(20):
        lines.append(f"R{i} n{i} n{i + 1} {{rload*{i + 1}}}")
        lines.append(f"M{i} n{i + 1} in 0 0 nch W=20u L=2u M=1")
    lines += ["C1 in n0 1u", "RB vdd n0 4.7k", "* a comment", "+ ", ".op", ".dc VIN 0 5 0.1",
              ".options reltol=1e-4", ".end"]
    return "\n".join(line for line in lines if line.strip() not in {"+"}) + "\n"


def median_seconds(action: Callable[[], object], repeat: int) -> float:
    samples = []
    for _ in range(repeat):
        start = time.perf_counter()
        action()
        samples.append(time.perf_counter() - start)
    return statistics.median(samples)


def report(name: str, value: float, goal: float, unit: str = "ms") -> bool:
    ok = value <= goal
    print(f"{name:<52} {value:9.3f} {unit}   goal ≤ {goal:g} {unit}   {'ok' if ok else 'MISSED'}")
    return ok


def main() -> int:
    results = []
    start = time.perf_counter()
    _parser()
    print(f"{'grammar load (once per process)':<52} {(time.perf_counter() - start) * 1e3:9.3f} ms")
    text = fifty_card_netlist()
    cards = sum(1 for line in text.splitlines()[1:] if line.strip() and not line.startswith("*"))
    assert cards >= 50, cards
    seconds = median_seconds(lambda: parse_netlist(text, "bench.cir"), 200)
    results.append(report(f"parse a {cards}-card netlist (median of 200)", seconds * 1e3, 10.0))
    with tempfile.TemporaryDirectory() as folder:
        huge = Path(folder) / "huge.cir"
        huge.write_text("huge\n" + "".join(f"R{i} n{i} n{i + 1} 1k\n" for i in range(300_000)))
        start = time.perf_counter()
        try:
            read_netlist(huge)
        except Exception as exc:  # the refusal is the expected outcome
            refused = type(exc).__name__
        else:
            refused = "not refused"
        results.append(report(f"refuse a 300,000-card netlist ({refused})", time.perf_counter() - start, 1.0, "s"))
    return 0 if all(results) else 1


if __name__ == "__main__":
    sys.exit(main())
