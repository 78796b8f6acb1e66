"""ngspice's operating point of a Circuit: emit it, run `.op`, read nodes and device quantities.

Device quantities come from ngspice's own MOSFET vectors (`@m1[id]`, `gm`, `gds`,
`gmbs`, `vdsat`, `vgs`, `vds`, `vbs` and the threshold, `von` or `vth` by model family),
polarity-normalised as ngspice reports id, vgs and vds (positive for a conducting PMOS);
mos1/2/3/6/9 give `von` and `vdsat` the type's sign, normalised here, BSIM3/4 give `vth`
and `vdsat` as they are for the device. A vector the device's model lacks leaves its
quantity (and what is derived from it) None.
"""

from __future__ import annotations

from ..devices.mos1 import Region, classify_region, overdrive
from ..netlist.circuit import GROUND, Analysis, Circuit, Element, Origin
from ..netlist.emit import emit
from ..records import record
from .client import NgspiceSession, PendingRun, SimResult

# The quantities every ngspice MOSFET family verified here reports under these names, normalised
# to the device's polarity.
COMMON_VECTORS = ("id", "gm", "gds", "gmbs", "vgs", "vds", "vbs")

# Per model LEVEL: the vector holding ngspice's threshold, and whether it and `vdsat` carry the
# type's sign (negative for a PMOS). Source: ngspice 39, `show m1 : all` and `.save @m1[von]
# @m1[vth] ...` with `print` on an NMOS and a PMOS of each level (mos1/2/3/6/9: `von`, signed;
# BSIM3 at 8 and 49, BSIM4 at 14 and 54: `vth` and `vdsat` positive for a conducting PMOS;
# `@m1[von]` of a BSIM card and `@m1[vth]` of a mos1 card come back 0 long). For a level not
# listed the threshold and vdsat are not read: their names or signs are not known here.
THRESHOLD_BY_LEVEL: dict[int, tuple[str, bool]] = {
    1: ("von", True), 2: ("von", True), 3: ("von", True), 6: ("von", True), 9: ("von", True),
    8: ("vth", False), 49: ("vth", False), 14: ("vth", False), 54: ("vth", False),
}


@record(frozen=True, eq=False)
class SimDevice:
    """One MOSFET as ngspice solved it, polarity-normalised."""

    id: float | None
    vgs: float | None
    vds: float | None
    vbs: float | None
    vth: float | None
    vov: float | None
    vdsat: float | None
    gm: float | None
    gds: float | None
    gmbs: float | None
    region: Region | None


@record(frozen=True, eq=False)
class SimOperatingPoint:
    """ngspice's operating point: node voltages, branch currents, each MOSFET, its messages."""

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
    saves = ["all"] + [device_vector(m.name, q) for m in mosfets for q in device_vectors(circuit, m)]
    deck = emit(circuit, analyses=[Analysis("op", Origin(circuit.source_file, 0))], saves=saves)
    return PendingOperatingPoint(circuit, session.submit(deck, timeout=timeout))


def threshold_vector(circuit: Circuit, mosfet: Element) -> tuple[str, float] | None:
    """The ngspice vector holding this MOSFET's threshold and the factor that makes it positive
    for a conducting device (−1 for a PMOS of a family that gives it the type's sign), or None
    when its model family is not known here."""
    model = circuit.model(mosfet.model or "")
    found = THRESHOLD_BY_LEVEL.get(model.level) if model is not None else None
    if found is None:
        return None
    name, signed = found
    return name, -1.0 if signed and model is not None and model.type == "pmos" else 1.0


def device_vectors(circuit: Circuit, mosfet: Element) -> tuple[str, ...]:
    """The quantities asked of ngspice for one MOSFET: those its model family is known to have."""
    return _quantities(threshold_vector(circuit, mosfet))


def _quantities(threshold: tuple[str, float] | None) -> tuple[str, ...]:
    """``device_vectors`` for the model family's threshold vector (``threshold_vector``)."""
    return COMMON_VECTORS + (("vdsat", threshold[0]) if threshold is not None else ())


_BRANCH_KINDS = frozenset({"vsource", "inductor", "vcvs", "ccvs"})  # the elements with a branch current


def _read_operating_point(circuit: Circuit, result: SimResult) -> SimOperatingPoint:
    mosfets = [e for e in circuit.elements if e.kind == "mosfet"]
    nodes = {GROUND: 0.0}
    scalar = result.scalar_if_any
    for node in circuit.nodes():
        if (value := scalar(node)) is not None:
            nodes[node] = value
    branches = {}
    for e in circuit.elements:
        if e.kind in _BRANCH_KINDS and (value := scalar(f"{e.name.lower()}#branch")) is not None:
            branches[e.name] = value
    devices: dict[str, SimDevice] = {}
    for mosfet in mosfets:
        devices[mosfet.name] = _read_device(circuit, mosfet, result)
    return SimOperatingPoint(nodes, branches, devices, result.messages)


def _read_device(circuit: Circuit, mosfet: Element, result: SimResult) -> SimDevice:
    """One MOSFET's quantities; each is None where its vector is missing (the model lacks it)."""
    threshold = threshold_vector(circuit, mosfet)
    scalar = result.scalar_if_any
    values: dict[str, float | None] = {q: scalar(device_vector(mosfet.name, q)) for q in _quantities(threshold)}
    sign = threshold[1] if threshold is not None else 1.0
    raw_vth = values.get(threshold[0]) if threshold is not None else None
    vth = sign * raw_vth if raw_vth is not None else None
    raw_vdsat = values.get("vdsat")
    vdsat = sign * raw_vdsat if raw_vdsat is not None else None
    vgs, vds = values["vgs"], values["vds"]
    vov = None
    if vth is not None and vgs is not None and vds is not None:
        # ngspice reports the terminal vds; with vds < 0 the device runs with drain and source swapped.
        vov = overdrive(vgs, vds, vth)
    return SimDevice(
        id=values["id"],
        vgs=vgs,
        vds=vds,
        vbs=values["vbs"],
        vth=vth,
        vov=vov,
        vdsat=vdsat,
        gm=values["gm"],
        gds=values["gds"],
        gmbs=values["gmbs"],
        region=classify_region(vov, abs(vds)) if vov is not None and vds is not None else None,
    )
