"""Hand time per stage: on each bundled netlist, the median of 200 calls (best of 5 rounds) of

* ``hand_analysis(circuit)`` — the numbers only (the working is written when read);
* the same with its ``steps`` read — what ``check --steps`` costs;
* the check's hand work: ``HandModel``, the plain solve and one re-solve per effect
  (``check.solve_own_columns``' hand part, as ``check --json`` runs it).

    python tests/bench/hand_bench.py [REPO]

REPO (default: this checkout) is where the netlists are read from; run it with PYTHONPATH set to
another checkout to time that one on the same machine, side by side.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

from bridge.analysis.hand import HandModel, hand_analysis
from bridge.netlist import read_netlist
from bridge.vocabulary import EFFECTS

CALLS, ROUNDS = 200, 5


def median_us(call) -> float:
    best = []
    for _ in range(ROUNDS):
        times = []
        for _ in range(CALLS):
            start = time.perf_counter()
            call()
            times.append(time.perf_counter() - start)
        best.append(statistics.median(times))
    return min(best) * 1e6


def check_hand(circuit) -> None:
    model = HandModel(circuit)
    hand = model.solve()
    for effect in EFFECTS:
        model.solve(effects=frozenset({effect}), working=False, start=hand.node_voltages)


def main() -> int:
    root = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parents[2]
    rows = []
    for path in sorted((root / "netlists").glob("*.cir")):
        circuit = read_netlist(path)
        row = (median_us(lambda c=circuit: hand_analysis(c)),
               median_us(lambda c=circuit: tuple(hand_analysis(c).steps)),
               median_us(lambda c=circuit: check_hand(c)))  # fmt: skip
        rows.append(row)
        print(f"{path.name:22s} hand_analysis {row[0]:7.1f} µs   steps read {row[1]:7.1f} µs   "
              f"check's hand work {row[2]:7.1f} µs")
    medians = [statistics.median(column) for column in zip(*rows)]
    print(f"{'median':22s} hand_analysis {medians[0]:7.1f} µs   steps read {medians[1]:7.1f} µs   "
          f"check's hand work {medians[2]:7.1f} µs")
    return 0


if __name__ == "__main__":
    sys.exit(main())
