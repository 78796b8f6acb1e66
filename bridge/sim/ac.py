"""The ngspice column of the small-signal check: `.ac` runs through the worker, read as complex numbers.

    measure_ac(session, circuit, AcSetup(...)) -> AcMeasurement

Every deck is a variant of the Circuit, emitted (the user's own text never reaches ngspice):

- the gain run: the input source gets AC magnitude 1, phase 0, every other independent source AC 0
  (no AC spec); one `.ac dec` over the sweep (the response, the band edges, the plot) and one
  `.ac lin 1 f f` at the midband frequency (the midband gain and Rin), each a worker call;
- the output-resistance run: every source AC 0 (DC values kept, so the bias stays), a test current
  source (DC 0, AC 1 A) into the output node from the load's other terminal (from ground without a
  load; the same wherever that terminal is at AC ground, as a supply or ground is), Rout the
  voltage between the two over the current, `.ac lin 1 f f` at midband. The load stays in for the
  operating point, with a 0 V source in series that measures its AC current; the current into the
  rest of the circuit is then 1 A minus the load's, so Rout is the impedance the load sees as if
  it were taken out, with the bias it has in the circuit (taking it out of the deck instead would
  leave a capacitor-coupled output node without a DC path, which ngspice's `.op` reports as a
  singular matrix, and would move the bias of a DC-coupled load).

Sign conventions (ngspice 39 manual, 4.1 "Independent Sources for Voltage or Current", and checked
with `ngspice -b`: `vin in 0 dc 1 ac 1` across 1 kΩ prints i(vin) = −1e-3): a voltage source's
branch current i(V) flows into its + node, through the source, out of its − node, so the current
it delivers into the circuit is −i(V); a current source's positive value flows into the source at
its + node and out of it at its − node, so `I 0 out ac 1` drives 1 A into `out`.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..netlist.circuit import GROUND, AcSweep, Analysis, Circuit, Element, Origin
from ..netlist.emit import SpiceDeck, emit
from ..records import record
from .client import NgspiceSession

# Two-terminal elements that can be the load whose view of the output Rout is.
LOAD_KINDS = frozenset({"resistor", "capacitor", "inductor", "vsource", "isource", "diode"})
HALF_POWER = 1.0 / math.sqrt(2.0)  # the −3 dB ratio of magnitudes


@record(frozen=True)
class AcSetup:
    input_source: str  # the independent V (or I) source that carries the signal: the deck gives it
    #                    AC magnitude 1, phase 0, and every other source AC 0
    output_node: str
    load: str | None  # the element taken out for the output resistance (None: nothing)
    midband_hz: float
    start_hz: float  # the sweep for the band edges and the plot (log spaced)
    stop_hz: float
    points_per_decade: int = 40


@record(frozen=True)
class AcMeasurement:
    midband_hz: float
    gain: complex  # v(output) / v(input source's + node − its − node), at midband
    rin: complex  # the impedance the input source sees at midband: its AC voltage over the AC
    #               current it delivers into the circuit (inf: it delivers none)
    rout: complex  # the impedance the load sees at midband, the input source zeroed (AC 0, DC kept)
    frequency: np.ndarray  # Hz, the sweep
    response: np.ndarray  # complex gain over the sweep (same definition as `gain`)
    low_hz: float | None  # where |response| first falls to |gain|/√2 below midband (log-log
    #                       interpolation between sweep points); None when it never does in the sweep
    high_hz: float | None  # the same above midband


def measure_ac(session: NgspiceSession, circuit: Circuit, setup: AcSetup, *, timeout: float = 30.0) -> AcMeasurement:
    """The midband gain, Rin, Rout and the sweep of `circuit` as ngspice computes them.

    Raises ValueError for a setup that names nothing in the circuit (or an impossible sweep), and
    bridge.sim.client.SimulatorError subclasses when ngspice gives no answer."""
    source, output, load = _checked(circuit, setup)
    signal = with_ac_drive(circuit, source.name)
    terminals = _terminal_vectors(source)
    wanted = ["frequency", f"v({output})", *terminals]
    if source.kind == "vsource":
        wanted.append(f"i({source.name.lower()})")

    sweep = session.run(gain_deck(signal, setup.start_hz, setup.stop_hz, setup.points_per_decade),
                        vectors=wanted, timeout=timeout)
    frequency = np.real(np.asarray(sweep["frequency"]))
    response = _gain(sweep, output, source)

    point = session.run(midband_deck(signal, setup.midband_hz), vectors=wanted, timeout=timeout)
    gain = complex(_gain(point, output, source)[0])
    rin = _input_impedance(point, source)

    rout = _output_impedance(session, circuit, output, load, setup.midband_hz, timeout)
    low, high = band_edges(frequency, response, setup.midband_hz, abs(gain))
    frequency.setflags(write=False)
    response.setflags(write=False)
    return AcMeasurement(setup.midband_hz, gain, rin, rout, frequency, response, low, high)


# --- the decks -------------------------------------------------------------------------------


def with_ac_drive(circuit: Circuit, drive: str | None) -> Circuit:
    """The circuit with AC magnitude 1, phase 0 on the independent source `drive` and no AC spec
    (AC 0) on every other one; None zeroes them all. DC values and waveforms are kept."""
    wanted = drive.lower() if drive is not None else None
    elements = []
    for element in circuit.elements:
        if element.kind in ("vsource", "isource"):
            params = {k: v for k, v in element.params.items() if k not in ("ac_mag", "ac_phase")}
            if element.name.lower() == wanted:
                params.update(ac_mag=1.0, ac_phase=0.0)
            if params != element.params:
                element = replace(element, params=params)
        elements.append(element)
    return replace(circuit, elements=tuple(elements))


def gain_deck(signal: Circuit, start_hz: float, stop_hz: float, points_per_decade: int) -> SpiceDeck:
    """The sweep: `.ac dec N fstart fstop` on the circuit as `with_ac_drive` left it."""
    return emit(signal, analyses=[_ac(signal, AcSweep("dec", points_per_decade, start_hz, stop_hz))])


def midband_deck(circuit: Circuit, midband_hz: float) -> SpiceDeck:
    """One frequency: `.ac lin 1 f f`."""
    return emit(circuit, analyses=[_ac(circuit, AcSweep("lin", 1, midband_hz, midband_hz))])


def _ac(circuit: Circuit, sweep: AcSweep) -> Analysis:
    return Analysis("ac", Origin(circuit.source_file, 0), ac=sweep)


# --- reading the runs ------------------------------------------------------------------------


def _terminal_vectors(source: Element) -> list[str]:
    return [f"v({node})" for node in source.nodes[:2] if node != GROUND]


def _node_voltage(result, node: str) -> np.ndarray:
    if node == GROUND:
        return np.zeros(len(result["frequency"]), dtype=complex)
    return np.asarray(result[f"v({node})"], dtype=complex)


def _terminal_voltage(result, source: Element) -> np.ndarray:
    """V(+) − V(−) of the input source over the run."""
    plus, minus = source.nodes[:2]
    return _node_voltage(result, plus) - _node_voltage(result, minus)


def _gain(result, output: str, source: Element) -> np.ndarray:
    across = _terminal_voltage(result, source)
    if not np.all(np.abs(across) > 0.0):
        raise ValueError(f"the AC voltage across `{source.name}` is zero: the gain against it is not defined")
    return _node_voltage(result, output) / across


def _input_impedance(result, source: Element) -> complex:
    """What the input source sees: for a V source V(+) − V(−) over the current out of its + node
    (−i(V), see the module's sign conventions); for an I source, which drives its 1 A out of its −
    node, V(−) − V(+) over 1 A."""
    across = complex(_terminal_voltage(result, source)[0])
    if source.kind == "isource":
        return -across
    delivered = -complex(np.asarray(result[f"i({source.name.lower()})"])[0])
    if delivered == 0:
        return complex(math.inf, 0.0)
    return across / delivered


def _output_impedance(
    session: NgspiceSession, circuit: Circuit, output: str, load: Element | None, midband_hz: float, timeout: float
) -> complex:
    """The impedance the load sees at the output (see the module docstring for the deck)."""
    quiet = with_ac_drive(circuit, None)
    origin = Origin(circuit.source_file, 0)
    taken = {e.name.lower() for e in circuit.elements}
    nodes = set(circuit.nodes())
    test = _fresh("ibb_rout_test", taken)
    if load is None:
        other = GROUND
        added = [Element(test, "isource", (GROUND, output), 0.0, origin, params={"ac_mag": 1.0, "ac_phase": 0.0})]
        elements = quiet.elements
        sense = None
    else:
        at = load.nodes.index(output)
        other = load.nodes[1 - at]
        sense = _fresh("vbb_rout_sense", taken)
        middle = _fresh(f"{output}_bb_sense", nodes)
        moved = list(load.nodes)
        moved[at] = middle
        elements = tuple(replace(e, nodes=tuple(moved)) if e.name == load.name else e for e in quiet.elements)
        added = [
            Element(sense, "vsource", (output, middle), 0.0, origin),
            Element(test, "isource", (other, output), 0.0, origin, params={"ac_mag": 1.0, "ac_phase": 0.0}),
        ]
    probe = replace(quiet, elements=elements + tuple(added))
    wanted = ["frequency", f"v({output})"] + ([f"v({other})"] if other != GROUND else [])
    if sense is not None:
        wanted.append(f"i({sense})")
    result = session.run(midband_deck(probe, midband_hz), vectors=wanted, timeout=timeout)
    across = complex((_node_voltage(result, output) - _node_voltage(result, other))[0])
    # The test source drives 1 A into the output; i(sense) is what of it flows on into the load.
    into_rest = 1.0 - (complex(np.asarray(result[f"i({sense})"])[0]) if sense is not None else 0.0)
    if into_rest == 0:
        return complex(math.inf, 0.0)
    return across / into_rest


def _fresh(stem: str, taken: set[str]) -> str:
    name, number = stem, 1
    while name.lower() in taken:
        number += 1
        name = f"{stem}{number}"
    taken.add(name.lower())
    return name


# --- the band edges --------------------------------------------------------------------------


def band_edges(
    frequency: np.ndarray, response: np.ndarray, midband_hz: float, midband_gain: float
) -> tuple[float | None, float | None]:
    """The −3 dB frequencies below and above midband: going outwards from the midband point, the
    first sweep point whose |response| is at most midband_gain/√2, the edge interpolated linearly in
    log|response| against log f between it and the point before (the midband point itself for the
    first); None on a side where the sweep never falls that far (or without gain)."""
    if not midband_gain > 0.0 or not math.isfinite(midband_gain):
        return None, None
    magnitude = np.abs(np.asarray(response))
    f = np.asarray(frequency, dtype=float)
    target = midband_gain * HALF_POWER
    below = np.nonzero(f < midband_hz)[0][::-1]
    above = np.nonzero(f > midband_hz)[0]
    return (
        _first_fall(f, magnitude, below, midband_hz, midband_gain, target),
        _first_fall(f, magnitude, above, midband_hz, midband_gain, target),
    )


def _first_fall(
    f: np.ndarray, magnitude: np.ndarray, order: np.ndarray, f0: float, m0: float, target: float
) -> float | None:
    previous_f, previous_m = f0, m0
    for k in order.tolist():
        fk, mk = float(f[k]), float(magnitude[k])
        if mk <= target:
            if mk <= 0.0:
                return fk
            if mk == previous_m:
                return fk
            share = (math.log(target) - math.log(previous_m)) / (math.log(mk) - math.log(previous_m))
            return math.exp(math.log(previous_f) + share * (math.log(fk) - math.log(previous_f)))
        previous_f, previous_m = fk, mk
    return None


# --- the setup against the circuit ------------------------------------------------------------


def _checked(circuit: Circuit, setup: AcSetup) -> tuple[Element, str, Element | None]:
    """The input source, the output node (as the circuit names it) and the load; ValueError for
    anything the circuit does not have or a sweep ngspice cannot run."""
    source = circuit.element(setup.input_source)
    if source is None or source.kind not in ("vsource", "isource"):
        sources = ", ".join(e.name for e in circuit.elements if e.kind in ("vsource", "isource")) or "none"
        what = "no element" if source is None else f"a {source.kind}, not an independent source,"
        raise ValueError(f"the input `{setup.input_source}` is {what} in this circuit (independent sources: {sources})")
    output = setup.output_node.strip().lower()
    output = GROUND if output == "gnd" else output
    if output == GROUND:
        raise ValueError("the output node cannot be ground (node 0)")
    if output not in circuit.nodes():
        raise ValueError(f"the circuit has no node `{setup.output_node}`")
    load = None
    if setup.load is not None:
        load = circuit.element(setup.load)
        if load is None:
            raise ValueError(f"the circuit has no element `{setup.load}` to take out as the load")
        if load.kind not in LOAD_KINDS or len(load.nodes) != 2:
            raise ValueError(f"the load `{load.name}` is a {load.kind}: a two-terminal element is needed")
        if output not in load.nodes or load.nodes[0] == load.nodes[1]:
            raise ValueError(f"the load `{load.name}` does not connect the output node `{output}` to another node")
        if load.name.lower() == source.name.lower():
            raise ValueError(f"`{load.name}` cannot be both the input source and the load")
    for name, value in (("midband", setup.midband_hz), ("sweep start", setup.start_hz),
                        ("sweep stop", setup.stop_hz)):
        if not (math.isfinite(value) and value > 0.0):
            raise ValueError(f"the {name} frequency must be positive and finite, not {value!r} Hz")
    if not setup.start_hz < setup.stop_hz:
        raise ValueError(f"the sweep must rise: {setup.start_hz!r} Hz to {setup.stop_hz!r} Hz")
    if setup.points_per_decade < 1:
        raise ValueError(f"points per decade must be at least 1, not {setup.points_per_decade}")
    return source, output, load
