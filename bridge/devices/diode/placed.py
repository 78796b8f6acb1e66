"""The diode placed in an MNA system: its load into the Newton system (with pnjlim) and its
convergence test (DIOconvTest); ``bridge.devices.interface.DcDevice``."""

from __future__ import annotations

import math
from collections.abc import Sequence

from ...records import record
from ..interface import stamp_pair
from ..mos1.convergence import pnjlim
from .load import diode_current


@record(frozen=True)
class PlacedDiode:
    """A diode between the unknowns `anode` and `cathode`, IS (area and M included) and N·kT/q at
    its temperature, and its pnjlim critical voltage."""

    name: str
    anode: int
    cathode: int
    saturation_current: float
    emission_voltage: float  # N·Vt
    vcrit: float

    def current(self, voltage: float, gmin: float) -> tuple[float, float]:
        """Current (anode → cathode) and conductance at `voltage`, GMIN included."""
        return diode_current(voltage, self.saturation_current, self.emission_voltage, gmin)

    def places(self, position: Sequence[int]) -> tuple[int, ...]:
        return position[self.anode], position[self.cathode]

    def start(self) -> list[float]:
        """ngspice's MODEINITJCT guess: the junction at its critical voltage (0.6 V without one)."""
        return [self.vcrit if math.isfinite(self.vcrit) else 0.6]

    def settle(self, x: Sequence[float]) -> list[float]:
        return [x[self.anode] - x[self.cathode]]

    def load(
        self, state: list[float], places: tuple[int, ...], x: Sequence[float], first: bool, gmin: float,
        matrix: list, rhs: list[float],
    ) -> tuple[tuple, bool]:
        """dioload.c: pnjlim on the junction voltage after the first iteration, then the linearised
        current between anode and cathode."""
        vd = state[0]
        clipped = False
        if not first:
            vd, clipped = pnjlim(x[self.anode] - x[self.cathode], vd, self.emission_voltage, self.vcrit)
        state[0] = vd
        current, conductance = self.current(vd, gmin)
        stamp_pair(matrix, rhs, places[0], places[1], conductance, current - conductance * vd)
        return (current, conductance, vd), clipped

    def convergence_pairs(self, entry: tuple, x: Sequence[float], gmin: float) -> tuple[tuple[float, float], ...]:
        """DIOconvTest: the linearised current (`entry`) carried to `x`, beside the current there."""
        current, conductance, vd = entry
        new_vd = x[self.anode] - x[self.cathode]
        return ((current + conductance * (new_vd - vd), self.current(new_vd, gmin)[0]),)
