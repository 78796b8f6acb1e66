"""A circuit compiled once for given MOSFET instances and solved again with others: the hand
analysis's numerical path, the circuit compiled for the hand device and solved by
the DC solver's Newton (``bridge.analysis.dcsolve``: limiting, gmin then source stepping, the same
convergence tests), for a hand model no closed form covers and for the attribution's re-solves
of such circuits with one effect switched on. The hand analysis (``hand.py``) asks it; it asks dcsolve.
"""

from __future__ import annotations

from collections.abc import Mapping

from bridge.analysis.dcsolve import (
    METHODS,
    OperatingPoint,
    _build_network,
    _operating_point,
    _solve,
    _start,
    level1_model,
)
from bridge.devices.mos1.instance import Mos1Instance
from bridge.devices.mos1.load import Level1Point
from bridge.netlist.circuit import GROUND, Circuit


class HandNetwork:
    """The circuit compiled once for the hand device, solved by this module's Newton (limiting,
    gmin then source stepping, the same convergence tests): the hand analysis's numerical path.

    `devices` gives each MOSFET's instance, the hand device (``Mos1Instance.without_junctions``:
    the hand model, no bulk junctions and so no GMIN); `merged` maps every node to the node its
    shorts (inductors, 0 Ω resistors) merge it into, as the hand analysis merges them. The answer
    has no gmin: a stepped gmin is only a way there. ``solve`` takes other instances of the same
    elements (another model: an effect switched on) on the same compiled linear part.
    Construction raises InvalidElement, UnsupportedElement or SingularCircuit.
    """

    def __init__(self, circuit: Circuit, devices: Mapping[str, Mos1Instance], merged: Mapping[str, str]) -> None:
        self._net = _build_network(circuit, level1_model, (devices, merged))

    @property
    def nodes(self) -> tuple[str, ...]:
        """The nodes solved for (merged nodes by the name of their class), ground left out."""
        return self._net.nodes

    def solve(
        self, devices: Mapping[str, Mos1Instance] | None = None, start: Mapping[str, float] | None = None
    ) -> OperatingPoint:
        """The operating point with `devices` in place of the instances given at construction
        (by element name), Newton started from `start`'s node voltages (of ``nodes``) where
        given, else from ngspice's junction guess. Raises NoConvergence."""
        net = self._net if devices is None else self._net.with_devices(devices)
        state, fresh = _start(net, start)
        return _operating_point(net, _solve(net, net.source_defaults, state, fresh, METHODS), ())

    def solve_points(
        self, devices: Mapping[str, Mos1Instance] | None = None, start: Mapping[str, float] | None = None
    ) -> tuple[dict[str, float], dict[str, Level1Point], int]:
        """What the hand analysis reads of ``solve``'s answer, the same numbers: the voltages of
        ``nodes`` (ground included), each MOSFET's point there (the one Newton's last test
        evaluated) and the Newton iterations; no branch currents, junctions or caveats made."""
        net = self._net if devices is None else self._net.with_devices(devices)
        state, fresh = _start(net, start)
        solved = _solve(net, net.source_defaults, state, fresh, METHODS)
        x = solved.state.x.tolist()
        voltages = {GROUND: 0.0}
        voltages.update(zip(net.nodes, x[1:]))
        points = {mos.name: mos.point(x[mos.drain], x[mos.gate], x[mos.source], x[mos.bulk]) for mos in net.mosfets}
        return voltages, points, solved.iterations
