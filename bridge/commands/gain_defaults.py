"""What `gain` takes when the command line does not say: the input source, the output node, the
load element, the midband frequency and the sweep range for the band edges.

Choices only: each reads the Circuit (and, for the frequencies, the hand column's band-edge
estimates) and names something in it, with the reason in words; the run is bridge.gain_run.
"""

from __future__ import annotations

import math

from ..analysis.hand_edges import fixed_nodes
from ..curves import SweepInputError
from ..netlist.circuit import GROUND, Circuit, Element
from ..netlist.numbers import engineering
from ..records import record
from .sweep_defaults import _supplies, default_source

# Coupling and bypass capacitors count as shorts a hundred times above their highest pole, and
# device capacitances as open a hundred times below the Miller pole (common practice, no source).
MIDBAND_MARGIN = 100.0
# Without any capacitor to set a band, the midband is taken at 1 kHz (common practice, no source).
PLAIN_MIDBAND_HZ = 1e3


class GainInputError(ValueError):
    """A choice the command line made that names nothing usable (a bad --input or --output)."""


@record(frozen=True)
class Choice:
    """One default (or given) choice and why it was made."""

    value: str | None
    why: str


def _mosfet(circuit: Circuit) -> Element:
    mosfets = circuit.elements_of("mosfet")
    if not mosfets:
        raise SweepInputError("the netlist has no MOSFET: `gain` follows a MOSFET stage")
    return mosfets[0]


def default_input(circuit: Circuit) -> Choice:
    """The independent source with an AC spec; else the voltage source that drives the gate at DC
    when it is not also a supply of the drain or source side; else none (value None)."""
    for element in circuit.elements:
        if element.kind in ("vsource", "isource") and element.params.get("ac_mag"):
            return Choice(element.name, f"{element.name} has an AC spec")
    mosfet = _mosfet(circuit)
    try:
        name = default_source(circuit)
    except SweepInputError:
        return Choice(None, "no source has an AC spec and no voltage source drives the gate")
    if name in _supplies(circuit, mosfet):
        return Choice(None, f"no source has an AC spec, and {name}, which reaches the gate at DC, is the supply "
                            "of the drain or source side")
    return Choice(name, f"no source has an AC spec; {name} drives the gate of {mosfet.name}")


def given_input(circuit: Circuit, name: str) -> Choice:
    element = circuit.element(name)
    sources = ", ".join(e.name for e in circuit.elements if e.kind in ("vsource", "isource")) or "none"
    if element is None:
        raise GainInputError(f"--input: no source named `{name}` (independent sources: {sources})")
    if element.kind not in ("vsource", "isource"):
        raise GainInputError(f"--input: `{element.name}` is a {element.kind}, not an independent source "
                             f"(independent sources: {sources})")
    return Choice(element.name, "given with --input")


def output_terminal(circuit: Circuit) -> str:
    """The MOSFET's drain, or its source when a voltage source holds the drain (a follower)."""
    mosfet = _mosfet(circuit)
    drain, source = mosfet.nodes[0], mosfet.nodes[2]
    held = fixed_nodes(circuit)
    return source if drain in held and source not in held else drain


def default_output(circuit: Circuit) -> Choice:
    """The far side of the output coupling capacitor on the drain (a follower: the source), else
    that terminal itself."""
    mosfet = _mosfet(circuit)
    terminal = output_terminal(circuit)
    role = "source (a follower: the drain is on a supply)" if terminal == mosfet.nodes[2] else "drain"
    if terminal == GROUND:
        raise SweepInputError(f"the {role.split(' ')[0]} of {mosfet.name} is ground: name the output with --output")
    held = fixed_nodes(circuit)
    suffix = ""
    if terminal == mosfet.nodes[0]:
        cascode = _cascode_above(circuit, terminal, held)
        if cascode is not None:
            terminal = cascode.nodes[0]
            suffix = f", the common-gate device on {mosfet.name}'s drain (a cascode)"
            mosfet = cascode
    far = []
    for element in circuit.elements_of("capacitor"):
        if terminal in element.nodes[:2] and element.nodes[0] != element.nodes[1]:
            other = element.nodes[1] if element.nodes[0] == terminal else element.nodes[0]
            if other not in held and other not in mosfet.nodes:
                far.append((element, other))
    if len(far) == 1:
        cap, node = far[0]
        return Choice(node, f"the far side of {cap.name}, the coupling capacitor on the {role}"
                      + (f" of {mosfet.name}{suffix}" if suffix else ""))
    return Choice(terminal, f"the {role} of {mosfet.name}{suffix}")


def _cascode_above(circuit: Circuit, drain: str, held: set[str]) -> Element | None:
    """The MOSFET stacked on `drain` as a common-gate device — its source at `drain`, its gate held
    by voltage sources (AC ground), its drain free — followed up the stack; None without one."""
    found = None
    seen = {drain}
    while True:
        above = [m for m in circuit.elements_of("mosfet") if m.nodes[2] == drain and m.nodes[1] in held
                 and m.nodes[0] not in held and m.nodes[0] not in seen]  # fmt: skip
        if len(above) != 1:
            return found
        found = above[0]
        drain = found.nodes[0]
        seen.add(drain)


def held_output(circuit: Circuit, output: str, input_source: str | None) -> str | None:
    """The voltage source (other than the input) that holds `output` at AC ground, or None: a node
    on a supply carries no signal."""
    sources = [e for e in circuit.elements_of("vsource") if input_source is None
               or e.name.lower() != input_source.lower()]  # fmt: skip
    without_input = circuit if len(sources) == len(circuit.elements_of("vsource")) else None
    held = fixed_nodes(without_input) if without_input is not None else _held_by(circuit, sources)
    if output not in held or output == GROUND:
        return None
    touching = [e.name for e in sources if output in e.nodes[:2]]
    return touching[0] if touching else sources[0].name if sources else None


def _held_by(circuit: Circuit, sources: list[Element]) -> set[str]:
    """Nodes held from ground by chains of the voltage sources `sources`."""
    known = {GROUND}
    progress = True
    while progress:
        progress = False
        for element in sources:
            plus, minus = element.nodes[0], element.nodes[1]
            if (plus in known) != (minus in known):
                known |= {plus, minus}
                progress = True
    return known


def given_output(circuit: Circuit, node: str) -> Choice:
    key = node.lower()
    key = GROUND if key == "gnd" else key
    if key == GROUND:
        raise GainInputError("--output: ground is not an output node")
    if key not in circuit.nodes():
        known = ", ".join(circuit.nodes())
        raise GainInputError(f"--output: no node `{node}` in the netlist (nodes: {known})")
    return Choice(key, "given with --output")


def default_load(circuit: Circuit, output: str) -> Choice:
    """The resistor from the output node to a rail or ground, when the output lies beyond a
    coupling capacitor (off the MOSFET's terminals); none otherwise."""
    mosfet = _mosfet(circuit)
    if output in mosfet.nodes[:3]:
        return Choice(None, "the output is a terminal of the MOSFET: no load element taken out for Rout")
    for other in circuit.elements_of("mosfet"):
        if output in other.nodes[:3]:
            return Choice(None, f"the output is a terminal of {other.name}: no load element taken out for Rout")
    held = fixed_nodes(circuit)
    for element in circuit.elements_of("resistor"):
        if output in element.nodes[:2]:
            other = element.nodes[1] if element.nodes[0] == output else element.nodes[0]
            if other in held:
                return Choice(element.name, f"{element.name}, from {output} to "
                                            f"{'ground' if other == GROUND else other}")
    return Choice(None, f"no resistor from {output} to a rail or ground")


class NoMidband(ValueError):
    """The coupling capacitors' band and the device capacitances' band overlap."""


def nice_above(value: float) -> float:
    """The first of 1, 2, 5 × 10ⁿ at or above `value`."""
    decade = 10.0 ** math.floor(math.log10(value))
    for step in (1.0, 2.0, 5.0, 10.0):
        if step * decade >= value * (1.0 - 1e-12):
            return step * decade
    return 10.0 * decade


def midband(low_hz: float | None, high_hz: float | None) -> tuple[float, str]:
    """The midband frequency from the hand band-edge estimates: 100× above the low edge (rounded
    up to 1, 2, 5 × 10ⁿ), below 100× under the high edge (the geometric mean of the two limits
    when both are there). Raises NoMidband when the limits cross."""
    low_limit = MIDBAND_MARGIN * low_hz if low_hz else None
    high_limit = high_hz / MIDBAND_MARGIN if high_hz else None
    if low_limit is not None and high_limit is not None:
        if low_limit > high_limit:
            raise NoMidband(
                f"no midband: 100× the low band edge ({engineering(low_hz, 'Hz')} → {engineering(low_limit, 'Hz')}) "
                f"lies above 1/100 of the Miller upper band edge ({engineering(high_hz, 'Hz')} → "
                f"{engineering(high_limit, 'Hz')}): the coupling capacitors are never short while the device "
                "capacitances are still open"
            )
        chosen = math.sqrt(low_limit * high_limit)
        nice = nice_above(chosen)
        chosen = nice if nice <= high_limit else chosen
        return chosen, (f"between {engineering(low_limit, 'Hz')}, 100× the low band edge, and "
                        f"{engineering(high_limit, 'Hz')}, 1/100 of the upper band edge")
    if low_limit is not None:
        return nice_above(low_limit), f"100× above the low band edge ({engineering(low_hz, 'Hz')}), rounded up"
    if high_limit is not None:
        chosen = min(PLAIN_MIDBAND_HZ, high_limit)
        return chosen, f"no coupling capacitor; at most 1/100 of the upper band edge ({engineering(high_hz, 'Hz')})"
    return PLAIN_MIDBAND_HZ, "no capacitor sets a band: 1 kHz"


def sweep_range(low_hz: float | None, high_hz: float | None, middle: float) -> tuple[float, float]:
    """Whole decades from 1/100 of the low band edge (else 1/1000 of the midband) to 100× the high
    band edge (else 1000× the midband)."""
    start = low_hz / 100.0 if low_hz else middle / 1000.0
    stop = high_hz * 100.0 if high_hz else middle * 1000.0
    return 10.0 ** math.floor(math.log10(start)), 10.0 ** math.ceil(math.log10(stop))
