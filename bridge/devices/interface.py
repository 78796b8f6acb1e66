"""The device interface the DC solver calls (ngspice's device table, as a Protocol).

A nonlinear device placed in the MNA system (its terminals' unknowns known to it) gives the
state Newton keeps for it at the start (``start``) and at a solution (``settle``), loads its
linearised currents and conductances into the Newton system at the present node voltages
(``load``, ngspice's DEVload), and says whether its linearised currents, carried to new
voltages, match its currents there (``convergence_pairs``, DEVconvTest). The solver loops over
its devices calling these; it never looks inside a device or the entries its ``load`` records.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Protocol


class DcDevice(Protocol):
    """What the DC solver asks of a nonlinear device."""

    name: str

    def places(self, position: Sequence[int]) -> tuple[int, ...]:
        """Its terminals' places in the reduced system, given each full unknown's place
        (−1 for ground or an eliminated unknown): computed once per reduction."""
        ...

    def start(self) -> list[float]:
        """Its state before any solution (ngspice's MODEINITJCT guess)."""
        ...

    def settle(self, x: Sequence[float]) -> list[float]:
        """Its state at the solution `x`, for Newton to continue from."""
        ...

    def load(
        self, state: list[float], places: tuple[int, ...], x: Sequence[float], first: bool, gmin: float,
        matrix: list, rhs: list[float],
    ) -> tuple[tuple, bool]:
        """Linearise at `x` (the voltages in `state` as they are on the `first` iteration, else
        the new ones limited against them; `state` updated in place) and add the conductances and
        the currents' constant parts to `matrix` and `rhs` at `places`. Returns the linearisation
        (an entry for ``convergence_pairs``) and whether a junction step was clipped (ngspice's
        icheck, which forbids convergence in this iteration)."""
        ...

    def convergence_pairs(self, entry: tuple, x: Sequence[float], gmin: float) -> tuple[tuple[float, float], ...]:
        """(predicted, actual) currents: the linearisation `entry` that ``load`` recorded, carried
        to the solution `x`, beside the device's own currents at `x` (MOS1convTest, DIOconvTest)."""
        ...


def stamp_pair(matrix: list, rhs: list[float], a: int, c: int, g: float, offset: float) -> None:
    """A linearised two-terminal current leaving `a` for `c`: g·(va − vc) + offset.

    `a` and `c` are places in the reduced system; −1 is ground (nothing to stamp).
    """
    if a >= 0:
        matrix[a][a] += g
        rhs[a] -= offset
        if c >= 0:
            matrix[a][c] -= g
            matrix[c][a] -= g
    if c >= 0:
        matrix[c][c] += g
        rhs[c] += offset
