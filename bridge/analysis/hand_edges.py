"""The hand closed forms of a transfer curve: the region edges and the small-signal gain of the
resistor-loaded common source (one MOSFET, its source on a rail, one drain resistor to a rail).

Numbers first, words from them: ``common_source_edges`` and ``common_source_gain`` compute;
``common_source_working`` and ``common_source_gain_formula`` write the derivation from those
numbers, once per sweep.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from ..devices.mos1 import beta, threshold
from ..devices.mos1.instance import InstanceError, mosfet_instance
from ..devices.mos1.load import resistor_loaded_edge_overdrive
from ..netlist.circuit import GROUND, Circuit, Element
from ..netlist.numbers import engineering
from ..records import record
from ..vocabulary import Step
from .hand import HandDevice, hand_model


@record(frozen=True)
class ClosedFormEdges:
    """The hand edges of a resistor-loaded common source in closed form, with the working.

    ``gate_ratio`` and ``gate_offset`` give VG = gate_offset + gate_ratio·Vin.
    """

    device: str
    cutoff_saturation: float
    saturation_triode: float
    gate_ratio: float
    gate_offset: float
    drain_resistor: str
    drain_resistance: float
    steps: tuple[Step, ...]


@record(frozen=True)
class HandGainFormula:
    """The hand small-signal gain at the bias point: −gm·(RD ∥ ro)·dVG/dVin."""

    value: float
    gm: float
    ro: float  # math.inf in saturation, λ = 0
    drain_resistance: float
    gate_ratio: float
    region: str
    formula: str
    steps: tuple[Step, ...]


def held_voltages(circuit: Circuit) -> dict[str, float]:
    """The DC voltage of every node held by chains of voltage sources from ground."""
    known = {GROUND: 0.0}
    pending = list(circuit.elements_of("vsource"))
    progress = True
    while progress:
        progress = False
        for element in list(pending):
            plus, minus = element.nodes[0], element.nodes[1]
            value = float(element.value or 0.0)
            if minus in known and plus not in known:
                known[plus] = known[minus] + value
            elif plus in known and minus not in known:
                known[minus] = known[plus] - value
            elif plus not in known:
                continue
            pending.remove(element)
            progress = True
    return known


def fixed_nodes(circuit: Circuit) -> set[str]:
    """Nodes held by chains of voltage sources from ground."""
    return set(held_voltages(circuit))


def _hand_constants(circuit: Circuit, mosfet: Element) -> tuple[float, float, int] | None:
    """K = KP·W·M/Leff and Vt = VTO (device polarity) of the hand model, and the polarity."""
    try:
        # The card at the device temperature (ngspice's level-1 rules), as the hand column takes it.
        device = mosfet_instance(circuit, mosfet)
    except InstanceError:
        return None
    model = hand_model(device.model)
    return beta(model, device.geometry), threshold(model, 0.0), model.polarity


def _temperature_note(circuit: Circuit, mosfet: Element) -> list[Step]:
    """One line of working when K and Vt are not the card's 27 °C values: they are at the device
    temperature (or from a TNOM other than 27 °C) by ngspice's level-1 rules."""
    card = circuit.model(mosfet.model or "")
    celsius, nominal = circuit.device_temperature(mosfet), circuit.nominal_temperature()
    tnom = float(card.params.get("tnom", nominal)) if card is not None else nominal
    if celsius == 27.0 and tnom == 27.0:
        return []
    return [Step(f"{mosfet.name} at {celsius:g} °C: K and Vt from KP and VTO at that temperature "
                 f"(ngspice level-1 temperature rules, TNOM = {tnom:g} °C)")]


@record(frozen=True)
class CommonSource:
    """One MOSFET, its source on a rail, one drain resistor to a rail; K and Vt of its hand model."""

    mosfet: Element
    drain_resistor: Element
    rail: str
    k: float
    vt: float
    polarity: int


def resistor_loaded_common_source(circuit: Circuit) -> CommonSource | None:
    """One MOSFET, its source on a rail, its drain reaching only one resistor to a rail."""
    mosfets = circuit.elements_of("mosfet")
    if len(mosfets) != 1 or circuit.elements_of("inductor"):
        return None
    mosfet = mosfets[0]
    drain, gate, source = mosfet.nodes[:3]
    fixed = fixed_nodes(circuit)
    if drain in fixed or gate in (drain, source) or drain == source or source not in fixed:
        return None
    touching = [e for e in circuit.elements if e is not mosfet and e.kind != "capacitor" and drain in e.nodes]
    if len(touching) != 1 or touching[0].kind != "resistor" or mosfet.nodes[1:].count(drain):
        return None
    resistor = touching[0]
    rail = resistor.nodes[1] if resistor.nodes[0] == drain else resistor.nodes[0]
    if rail not in fixed or "m" in resistor.params or not isinstance(resistor.value, float) or resistor.value <= 0.0:
        return None
    constants = _hand_constants(circuit, mosfet)
    if constants is None:
        return None
    k, vt, polarity = constants
    return CommonSource(mosfet, resistor, rail, k, vt, polarity)


def _difference(a: str, b: str) -> str:
    """`a − b` as a designer writes it: no `− 0`, `−b` for `0 − b`."""
    if b == "0":
        return a
    if a == "0":
        return f"−{b}"
    return f"{a} − {b}"


def _offset_text(base: str, polarity: int, amount: str) -> str:
    """The gate voltage at an edge: the source node's voltage plus (NMOS) or minus (PMOS) `amount`."""
    if base == "0":
        return amount if polarity > 0 else f"−{amount}"
    return f"{base} {'+' if polarity > 0 else '−'} {amount}"


def _rail_label(circuit: Circuit, node: str) -> str:
    if node == GROUND:
        return "0"
    named = [e.name for e in circuit.elements_of("vsource") if node in e.nodes[:2] and GROUND in e.nodes[:2]]
    return named[0] if named else f"V({node})"


def _gate_ratio_words(circuit: Circuit, stage: CommonSource, source: Element, ratio: float) -> str:
    """How the gate follows the swept source, with the divider named when there is one."""
    gate = stage.mosfet.nodes[1]
    if gate in source.nodes[:2]:
        return f"the gate is {source.name}'s own node: VG = {source.name}"
    resistors = [e for e in circuit.elements_of("resistor") if gate in e.nodes[:2]]
    others = [e for e in circuit.elements if gate in e.nodes and e.kind not in ("resistor", "capacitor")
              and e is not stage.mosfet]  # fmt: skip
    if len(resistors) == 2 and not others:
        top = next((r for r in resistors if set(r.nodes[:2]) & set(source.nodes[:2]) - {GROUND}), None)
        if top is not None:
            bottom = resistors[1] if resistors[0] is top else resistors[0]
            return (
                f"divider {top.name}–{bottom.name}: dVG/d{source.name} = {bottom.name}/({top.name}+{bottom.name}) "
                f"= {ratio:.6g}"
            )
    return f"the gate network is linear and draws no current: dVG/d{source.name} = {ratio:.6g}"


@record(frozen=True)
class CommonSourceEdges:
    """The numbers of the closed-form edges: VG = gate_offset + gate_ratio·Vin, VSUP = `span`
    across drain resistor and channel, VOV at the saturation → triode edge, and both edges in
    the swept source's units."""

    stage: CommonSource
    source: Element
    gate_ratio: float
    gate_offset: float
    source_voltage: float  # of the MOSFET's source node
    span: float
    overdrive: float
    gate_at_edge: float  # VG at the saturation → triode edge
    gate_at_cutoff: float  # VG at the cutoff → saturation edge
    saturation_triode: float
    cutoff_saturation: float


def common_source_edges(
    stage: CommonSource, element: Element, low: tuple[float, Mapping[str, float]],
    high: tuple[float, Mapping[str, float]],
) -> CommonSourceEdges | None:
    """The hand edges of the resistor-loaded common source `stage` swept by `element`, numbers
    only, from the hand bias points at two values of the swept source (`low`, `high`: the value
    and the node voltages); None where that form does not apply."""
    (low_value, first), (high_value, second) = low, high
    gate, source_node = stage.mosfet.nodes[1], stage.mosfet.nodes[2]
    for node in (stage.rail, source_node):
        if not math.isclose(first[node], second[node], rel_tol=1e-12, abs_tol=1e-12):
            return None  # the swept source moves a rail: no closed form in it
    ratio = (second[gate] - first[gate]) / (high_value - low_value)
    offset = first[gate] - ratio * low_value
    if abs(ratio) < 1e-12:
        return None
    p, k, vt = stage.polarity, stage.k, stage.vt
    vs, rail_v = first[source_node], first[stage.rail]
    span = p * (rail_v - vs)
    if span <= 0.0:
        return None
    rd = float(stage.drain_resistor.value or 0.0)
    vov = resistor_loaded_edge_overdrive(k, rd, span)
    vg_edge = vs + p * (vt + vov)
    vg_cut = vs + p * vt
    edge = (vg_edge - offset) / ratio
    cut = (vg_cut - offset) / ratio
    return CommonSourceEdges(stage, element, ratio, offset, vs, span, vov, vg_edge, vg_cut, edge, cut)


def common_source_working(circuit: Circuit, edges: CommonSourceEdges, lo: float, hi: float) -> tuple[Step, ...]:
    """The derivation of `edges`, step by step, for a sweep from `lo` to `hi` (text from the numbers)."""
    stage, element = edges.stage, edges.source
    ratio, offset, span, vov = edges.gate_ratio, edges.gate_offset, edges.span, edges.overdrive
    vg_edge, vg_cut = edges.gate_at_edge, edges.gate_at_cutoff
    edge, cut = edges.saturation_triode, edges.cutoff_saturation
    p, k, vt = stage.polarity, stage.k, stage.vt
    source_node = stage.mosfet.nodes[2]
    rd = float(stage.drain_resistor.value or 0.0)
    name, rd_name = element.name, stage.drain_resistor.name
    direct = math.isclose(ratio, 1.0, rel_tol=1e-12) and abs(offset) < 1e-12
    rail, base = _rail_label(circuit, stage.rail), _rail_label(circuit, source_node)
    # The designer's symbols: VSUP the voltage across drain resistor and channel, the drive VGS
    # (VSG for a PMOS) written with the swept source when it is the gate.
    supply = _difference(rail, base) if p > 0 else _difference(base, rail)
    gate_symbol = name if direct else "VG"
    drive = _difference(gate_symbol, base) if p > 0 else _difference(base, gate_symbol)
    vds_name = "VDS" if p > 0 else "VSD"

    def solved_for_input(vg: float, what: str) -> str:
        if direct:
            return f"{name} = {what} = {vg:.6g} V"
        return f"VG = {what} = {vg:.6g} V → {name} = (VG − {offset:.6g} V)/{ratio:.6g} = {(vg - offset) / ratio:.6g} V"

    steps = [
        Step(
            f"{stage.mosfet.name}: hand model (λ = γ = 0) K = KP·W·M/Leff = {engineering(k, 'A/V²')}, "
            f"Vt = {vt:.6g} V" + (" (PMOS: device polarity)" if p < 0 else ""),
            None, k, "A/V²",
        ),
        Step(
            f"Gate: {_gate_ratio_words(circuit, stage, element, ratio)}",
            f"VG = {name}" if direct else f"VG = {offset:.6g} V + {ratio:.6g}·{name}",
        ),
        Step(
            f"Drain: {rd_name} = {engineering(rd, 'Ω')} to {rail}; in saturation {vds_name} = {supply} − "
            f"(K/2)·VOV²·{rd_name}, and saturation ends where {vds_name} = VOV",
            f"{supply} − (K/2)·({drive} − Vt)²·{rd_name} = {drive} − Vt",
        ),
        Step(
            f"Solve (K·{rd_name}/2)·VOV² + VOV − VSUP = 0 for the positive root, VSUP = {supply} = {span:.6g} V",
            f"VOV = 2·VSUP/(1 + √(1 + 2·K·{rd_name}·VSUP)) = {vov:.6g} V",
            vov, "V",
        ),
        Step("Saturation → triode edge", solved_for_input(vg_edge, _offset_text(base, p, "(Vt + VOV)")), edge, "V"),
        Step("Cutoff → saturation edge (VOV = 0)", solved_for_input(vg_cut, _offset_text(base, p, "Vt")), cut, "V"),
    ]  # fmt: skip
    steps[1:1] = _temperature_note(circuit, stage.mosfet)
    for label, value in (("saturation → triode", edge), ("cutoff → saturation", cut)):
        if not lo <= value <= hi:
            steps.append(Step(f"The {label} edge {value:.6g} V lies outside the sweep ({lo:g} … {hi:g})"))
    return tuple(steps)


@record(frozen=True)
class CommonSourceGain:
    """The numbers of the hand small-signal gain −gm·(RD ∥ ro)·dVG/dVin at one point."""

    value: float
    gm: float
    ro: float  # math.inf in saturation, λ = 0
    load: float  # RD ∥ ro
    drain_resistance: float
    gate_ratio: float
    region: str


def common_source_gain(stage: CommonSource, device: HandDevice, ratio: float) -> CommonSourceGain:
    """−gm·(RD ∥ ro)·dVG/dVin with the hand device's gm and gds; ro = ∞ where gds = 0."""
    rd = float(stage.drain_resistor.value or 0.0)
    ro = math.inf if device.gds == 0.0 else 1.0 / device.gds
    load = rd if math.isinf(ro) else rd * ro / (rd + ro)
    value = -device.gm * load * ratio
    return CommonSourceGain(value, device.gm, ro, load, rd, ratio, device.region)


def common_source_gain_formula(
    stage: CommonSource, gain: CommonSourceGain, bias: float, source: str
) -> HandGainFormula:
    """The gain with its working: why ro is what it is in this region, then the numbers."""
    rd_name = stage.drain_resistor.name
    if gain.region == "saturation":
        why = f"saturation, λ = 0: ro = ∞, so RD ∥ ro = {rd_name}"
    elif gain.region == "triode":
        why = f"triode: ro = 1/gds = 1/(K·(VOV − VDS)) = {engineering(gain.ro, 'Ω')}"
    else:
        why = "cutoff: gm = 0"
    formula = f"A = −gm·({rd_name} ∥ ro)·dVG/d{source}"
    steps = (
        Step(f"Hand small-signal gain at the bias point {source} = {bias:g}: {why}", formula),
        Step(
            "With the numbers",
            f"A = −{engineering(gain.gm, 'S')}·{engineering(gain.load, 'Ω')}·{gain.gate_ratio:.6g} = {gain.value:.6g}",
            gain.value, "V/V",
        ),
    )  # fmt: skip
    return HandGainFormula(
        gain.value, gain.gm, gain.ro, gain.drain_resistance, gain.gate_ratio, gain.region, formula, steps
    )
