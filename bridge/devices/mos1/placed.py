"""The level-1 MOSFET placed in an MNA system: its load into the Newton system and its
convergence test (mos1load.c's matrix and right-hand-side loading, MOS1convTest).

``PlacedMosfet`` implements ``bridge.devices.interface.DcDevice`` for one instance
(``Mos1Instance``) at four unknowns of the solver's vector. The instance decides whether it
has bulk junctions (``Mos1Instance.junctions``): the hand device has none, so it loads only
its channel, limits only vgs and vds, and its convergence test sees the channel alone.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import field

from ...records import record, with_fields
from ..interface import stamp_pair
from .instance import Mos1Instance
from .load import Level1Geometry, Level1Point, evaluate_with, junction_current
from .model import Level1Model


@record(frozen=True, eq=False)
class PlacedMosfet:
    """A MOSFET instance (``Mos1Instance``) placed in the network: its terminals' unknowns."""

    name: str
    drain: int
    gate: int
    source: int
    bulk: int
    device: Mos1Instance
    # The last (voltages, Level1Point) evaluated: a converged point is asked for again by the
    # convergence test, the settling, the report and the next sweep point's first iteration.
    last_point: list = field(default_factory=list, compare=False, repr=False)

    # The instance's values, as the solver's array paths read them.
    @property
    def model(self) -> Level1Model:
        return self.device.model

    @property
    def geometry(self) -> Level1Geometry:
        return self.device.geometry

    @property
    def drain_saturation_current(self) -> float:
        return self.device.drain_saturation_current

    @property
    def source_saturation_current(self) -> float:
        return self.device.source_saturation_current

    @property
    def drain_vcrit(self) -> float:
        return self.device.drain_vcrit

    @property
    def source_vcrit(self) -> float:
        return self.device.source_vcrit

    @property
    def thermal_voltage(self) -> float:
        return self.device.thermal_voltage

    def with_device(self, device: Mos1Instance) -> PlacedMosfet:
        """The same place with another instance (another model of the same element), its own
        (empty) record of the last point."""
        return with_fields(self, device=device, last_point=[])

    def point(self, vd: float, vg: float, vs: float, vb: float) -> Level1Point:
        """``evaluate`` at absolute terminal voltages, the last answer reused for the same ones."""
        last = self.last_point
        if last and last[0] == (vd, vg, vs, vb):
            return last[1]
        point = evaluate_with(self.device.constants, vd, vg, vs, vb)  # device.evaluate, one call less
        last[:] = ((vd, vg, vs, vb), point)
        return point

    def places(self, position: Sequence[int]) -> tuple[int, ...]:
        """Drain, gate, source and bulk in the reduced system."""
        return position[self.drain], position[self.gate], position[self.source], position[self.bulk]

    def start(self) -> list[float]:
        """ngspice's MODEINITJCT guess: vgs = type·VTO, vds = 0, vbs = −1 (and von = vgs)."""
        return self.device.junction_start()

    def settle(self, x: Sequence[float]) -> list[float]:
        """vgs, vds, vbs, vbd (device polarity) and von at the solution `x`."""
        polarity = self.device.model.polarity
        vd, vg, vs, vb = x[self.drain], x[self.gate], x[self.source], x[self.bulk]
        vgs, vds, vbs = polarity * (vg - vs), polarity * (vd - vs), polarity * (vb - vs)
        return [vgs, vds, vbs, vbs - vds, self.point(vd, vg, vs, vb).vth]

    def load(
        self, state: list[float], places: tuple[int, ...], x: Sequence[float], first: bool, gmin: float,
        matrix: list, rhs: list[float],
    ) -> tuple[tuple, bool]:
        """mos1load.c: limit, evaluate, and load the channel (and the bulk junctions, where the
        instance has them) linearised at the limited voltages."""
        device = self.device
        polarity = device.model.polarity
        d, gt, s, b = places
        vs = x[self.source]
        if first:
            vgs, vds, vbs, vbd = state[:4]
            clipped = False
        else:
            vgs, vds, vbs, vbd, clipped = device.limit(
                state, polarity * (x[self.gate] - vs), polarity * (x[self.drain] - vs), polarity * (x[self.bulk] - vs)
            )
        vd, vg, vb = vs + polarity * vds, vs + polarity * vgs, vs + polarity * vbs
        point = self.point(vd, vg, vs, vb)
        state[:] = [vgs, vds, vbs, vbd, point.vth]
        g = point.conductances
        # The linearised drain current is point.drain_current + Σ g·(v − v_here): its constant part.
        offset = point.drain_current - (g.wrt_drain * vd + g.wrt_gate * vg + g.wrt_source * vs + g.wrt_bulk * vb)
        gd, gg, gs, gb = g
        for row, sign in ((d, 1.0), (s, -1.0)):
            if row >= 0:  # the drain current enters the drain row and leaves the source row
                line = matrix[row]
                if d >= 0:
                    line[d] += sign * gd
                if gt >= 0:
                    line[gt] += sign * gg
                if s >= 0:
                    line[s] += sign * gs
                if b >= 0:
                    line[b] += sign * gb
                rhs[row] -= sign * offset
        if not device.junctions:
            return (point, vd, vg, vs, vb), clipped
        # Bulk junctions, in device polarity; the real current bulk → diffusion is polarity·c.
        # (``junction_current`` called directly, not through ``device.junction``: once per
        # iteration per device, the extra call shows in a sweep.)
        thermal = device.thermal_voltage
        cbd, gbd = junction_current(vbd, device.drain_saturation_current, gmin, thermal)
        stamp_pair(matrix, rhs, b, d, gbd, polarity * (cbd - gbd * vbd))
        cbs, gbs = junction_current(vbs, device.source_saturation_current, gmin, thermal)
        stamp_pair(matrix, rhs, b, s, gbs, polarity * (cbs - gbs * vbs))
        return (point, vd, vg, vs, vb, cbd, gbd, vbd, cbs, gbs, vbs), clipped

    def junction_currents(self, x: Sequence[float], gmin: float) -> tuple[float, float]:
        """Bulk–drain and bulk–source junction currents at the solution `x` (device polarity,
        GMIN included, as ngspice's cbd and cbs); 0 for a device without junctions."""
        device = self.device
        if not device.junctions:
            return 0.0, 0.0
        polarity = device.model.polarity
        vb = x[self.bulk]
        return (
            device.junction(polarity * (vb - x[self.drain]), True, gmin)[0],
            device.junction(polarity * (vb - x[self.source]), False, gmin)[0],
        )

    def convergence_pairs(self, entry: tuple, x: Sequence[float], gmin: float) -> tuple[tuple[float, float], ...]:
        """MOS1convTest: the channel current and both bulk junction currents (where the instance
        has them), linearised (`entry`, recorded by ``load``) and carried to `x`, beside their
        values at `x`."""
        point, vd, vg, vs, vb = entry[:5]
        xd, xg, xs, xb = x[self.drain], x[self.gate], x[self.source], x[self.bulk]
        gd, gg, gs, gb = point.conductances
        channel = (
            point.drain_current + gd * (xd - vd) + gg * (xg - vg) + gs * (xs - vs) + gb * (xb - vb),
            self.point(xd, xg, xs, xb).drain_current,
        )
        device = self.device
        if not device.junctions:
            return (channel,)
        cbd, gbd, vbd, cbs, gbs, vbs = entry[5:]
        polarity = device.model.polarity
        new_vbd, new_vbs = polarity * (xb - xd), polarity * (xb - xs)
        return (
            channel,
            # device.junction, one call less (as in load)
            (cbd + gbd * (new_vbd - vbd),
             junction_current(new_vbd, device.drain_saturation_current, gmin, device.thermal_voltage)[0]),
            (cbs + gbs * (new_vbs - vbs),
             junction_current(new_vbs, device.source_saturation_current, gmin, device.thermal_voltage)[0]),
        )
