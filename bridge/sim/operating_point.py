"""ngspice's operating point of a Circuit: emit it, run `.op`, read nodes and device quantities.

Device quantities come from ngspice's own MOSFET vectors (`@m1[id]`, `gm`, `gds`,
`gmbs`, `vdsat`, `von`, `vgs`, `vds`, `vbs`), polarity-normalised as ngspice reports id,
vgs and vds (positive for a conducting PMOS); `von` and `vdsat` carry the type's sign
in ngspice and are normalised here.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..devices.level1 import Region, classify_region
from ..netlist.circuit import GROUND, Analysis, Circuit, Origin
from ..netlist.emit import emit
from .client import NgspiceSession, PendingRun, SimResult

DEVICE_VECTORS = ("id", "gm", "gds", "gmbs", "vdsat", "von", "vgs", "vds", "vbs")


@dataclass(frozen=True)
class SimDevice:
    """One MOSFET as ngspice solved it, polarity-normalised."""

    id: float
    vgs: float
    vds: float
    vbs: float
    vth: float
    vov: float
    vdsat: float
    gm: float
    gds: float
    gmbs: float
    region: Region


@dataclass(frozen=True)
class SimOperatingPoint:
    node_voltages: dict[str, float]
    branch_currents: dict[str, float]
    devices: dict[str, SimDevice]
    messages: tuple[str, ...]


def device_vector(element_name: str, quantity: str) -> str:
    return f"@{element_name.lower()}[{quantity}]"


def simulate_operating_point(session: NgspiceSession, circuit: Circuit, timeout: float = 10.0) -> SimOperatingPoint:
    """Run ngspice `.op` on the emitted circuit (never the user's text)."""
    return submit_operating_point(session, circuit, timeout).result()


class PendingOperatingPoint:
    """An `.op` sent to ngspice; ``result()`` waits for it and reads the operating point."""

    def __init__(self, circuit: Circuit, run: PendingRun) -> None:
        self.circuit = circuit
        self.run = run

    @property
    def answered(self) -> bool:
        """Whether ``result()`` would return without waiting for ngspice (see ``PendingRun.answered``)."""
        return self.run.answered

    def result(self) -> SimOperatingPoint:
        """The operating point; raises as ``NgspiceSession.run`` does."""
        return _read_operating_point(self.circuit, self.run.result())


def submit_operating_point(session: NgspiceSession, circuit: Circuit, timeout: float = 10.0) -> PendingOperatingPoint:
    """Send the emitted circuit's `.op` to ngspice and return at once (see ``PendingOperatingPoint``)."""
    mosfets = [e for e in circuit.elements if e.kind == "mosfet"]
    saves = ["all"] + [device_vector(m.name, q) for m in mosfets for q in DEVICE_VECTORS]
    deck = emit(circuit, analyses=[Analysis("op", Origin(circuit.source_file, 0))], saves=saves)
    return PendingOperatingPoint(circuit, session.submit(deck, timeout=timeout))


def _read_operating_point(circuit: Circuit, result: SimResult) -> SimOperatingPoint:
    mosfets = [e for e in circuit.elements if e.kind == "mosfet"]
    nodes = {GROUND: 0.0}
    for node in circuit.nodes():
        if node in result:
            nodes[node] = result.scalar(node)
    branches = {
        e.name: result.scalar(f"{e.name.lower()}#branch")
        for e in circuit.elements
        if e.kind in {"vsource", "inductor", "vcvs", "ccvs"} and f"{e.name.lower()}#branch" in result
    }
    devices: dict[str, SimDevice] = {}
    for mosfet in mosfets:
        values = {q: result.scalar(device_vector(mosfet.name, q)) for q in DEVICE_VECTORS}
        model = circuit.model(mosfet.model or "")
        polarity = -1.0 if model is not None and model.type == "pmos" else 1.0
        vth = polarity * values["von"]
        vds = values["vds"]
        vov = values["vgs"] - vth
        if vds < 0:
            # ngspice reports the terminal vds; the device itself runs with drain and source swapped.
            vov = values["vgs"] - vds - vth
        devices[mosfet.name] = SimDevice(
            id=values["id"],
            vgs=values["vgs"],
            vds=vds,
            vbs=values["vbs"],
            vth=vth,
            vov=vov,
            vdsat=polarity * values["vdsat"],
            gm=values["gm"],
            gds=values["gds"],
            gmbs=values["gmbs"],
            region=classify_region(vov, abs(vds)),
        )
    return SimOperatingPoint(nodes, branches, devices, result.messages)
