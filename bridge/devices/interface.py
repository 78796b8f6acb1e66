"""The device interface the DC solver calls (ngspice's device table, as a Protocol).

A nonlinear device gives its terminals' state at a solution (``settle``), linearises itself
into the Newton system (``load``), and says whether its linearised currents, carried to new
voltages, match its currents there (``settled``). The solver never looks inside an entry.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Protocol


class DcDevice(Protocol):
    """What the DC solver asks of a nonlinear device."""

    name: str

    def convergence_pairs(self, entry: tuple, x: Sequence[float], gmin: float) -> tuple[tuple[float, float], ...]:
        """(predicted, actual) currents: the linearisation `entry` that ``load`` recorded, carried
        to the solution `x`, beside the device's own currents at `x` (MOS1convTest, DIOconvTest)."""
        ...
