"""The fit speed goals (issue 15): 1,200 bench points fitted in under 1 s, and the level-1
equivalent of a card (its grid simulated by ngspice + fitted) in under 1 s. Medians of 5, side by
side; the first call (ngspice's worker starting, scipy imported) is printed beside them.

Run by `make bench` through run.py, or alone: `.venv/bin/python tests/bench/fit_bench.py`.
"""

from __future__ import annotations

import statistics
import sys
import time

import numpy as np

GOAL_SECONDS = 1.0
RUNS = 5
# Cards of our own: a level-1 device to make bench data from, and a BSIM3 card with a handful of
# parameters (the rest ngspice's defaults) for the equivalent.
CARDS = """fit bench cards
.model bench_n nmos (level=1 vto=0.65 kp=110u lambda=0.03 gamma=0.45 phi=0.7)
.model bench_b3 nmos (level=8 version=3.3.0 tox=9n vth0=0.55 u0=420)
.end
"""


def _median(action) -> tuple[float, float]:
    """(first call, median of the next RUNS calls) in seconds."""
    start = time.perf_counter()
    action()
    first = time.perf_counter() - start
    times = []
    for _ in range(RUNS):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return first, statistics.median(times)


def _line(label: str, first: float, median: float) -> bool:
    ok = median <= GOAL_SECONDS
    print(f"{label:<52} {median:9.3f} s   goal ≤ {GOAL_SECONDS:g} s   {'ok' if ok else 'MISSED'}"
          f"   (first call {first:.3f} s)")
    return ok


def fit_goals() -> list[bool]:
    from bridge.devices.mos1.load import Level1Geometry
    from bridge.fit.data import BiasData
    from bridge.fit.equivalent import card_equivalent
    from bridge.fit.least_squares import fit_level1
    from bridge.netlist import parse_netlist
    from bridge.sim.client import NgspiceSession, ngspice_available

    available, hint = ngspice_available()
    if not available:
        print(f"fit goals not measured: {hint}")
        return []
    cards = parse_netlist(CARDS, "fit_bench.lib").models
    geometry = Level1Geometry(10e-6, 1e-6)
    from bridge.sim.device_iv import simulate_grid

    with NgspiceSession() as session:
        # 1,200 points: 20 VGS × 15 VDS × 4 VBS, from ngspice, with 1 % seeded noise.
        grid = simulate_grid(session, cards["bench_n"], geometry.w, geometry.l, np.linspace(0.0, 3.0, 20),
                             np.linspace(0.1, 3.0, 15), (0.0, -0.5, -1.0, -2.0))  # fmt: skip
        noisy = grid.id * (1.0 + 0.01 * np.random.default_rng(15).standard_normal(grid.id.size))
        data = BiasData("bench", "nmos", grid.vgs, grid.vds, grid.vbs, noisy, np.arange(grid.id.size))
        assert len(data) == 1200, len(data)
        results = [_line("fit 1,200 bench points, VBS varying (median of 5)",
                         *_median(lambda: fit_level1(data, geometry)))]  # fmt: skip
        results.append(_line("level-1 equivalent of a BSIM3 card (median of 5)",
                             *_median(lambda: card_equivalent(session, cards["bench_b3"], geometry, (0.0, 3.3)))))
    return results


if __name__ == "__main__":
    sys.exit(0 if all(fit_goals()) else 1)
