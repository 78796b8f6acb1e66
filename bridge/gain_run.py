"""One netlist's small-signal cross-check (`biasbridge gain`): the hand and level-1 columns
(bridge.analysis.smallsignal), ngspice's `.ac` through the worker (bridge.sim.ac.measure_ac),
compared (bridge.gain_compare) and assembled into a GainResult.

A column that cannot give a value leaves it None and a finding says why; without ngspice the
hand and level-1 columns still report and ``simulator`` says why the third is empty.
"""

from __future__ import annotations

import contextlib
import math
from dataclasses import field

from .analysis.band_edges import hand_band_evidence, level1_band_edges
from .analysis.dcsolve import DcSolveError, OperatingPoint, solve_operating_point
from .analysis.hand import HandAnalysisError, HandModel, HandSolution
from .analysis.smallsignal import (
    HandColumn,
    Level1Column,
    SignalSetup,
    SmallSignalError,
    hand_column,
    hand_gain_with,
    level1_column,
    signed,
)
from .commands.gain_defaults import (
    Choice,
    GainInputError,
    NoMidband,
    default_input,
    default_load,
    default_output,
    given_input,
    given_output,
    held_output,
    midband,
    sweep_range,
)
from .devices.mos1.smallsignal import card_gives_junction_capacitances
from .gain_compare import BAND_TOLERANCE, attribution, band_findings, compare_columns, phase_findings
from .netlist.circuit import Circuit
from .records import record
from .vocabulary import COLUMN_NAMES, EFFECTS, Finding, simulator_failure

COLUMN_KEYS = ("hand", "level1", "sim")
# A reference gain below this (V/V) means the input does not reach the output (common practice, no source).
NO_SIGNAL = 1e-9


@record(frozen=True)
class GainResult:
    """Everything `gain` reports for one netlist; None where a column has no value."""

    file: str
    title: str
    input: Choice
    output: Choice
    load: Choice
    frequency: float | None
    frequency_why: str
    sweep: tuple[float, float] | None
    simulator: dict | None
    gain: dict[str, float | None]
    rin: dict[str, float | None]
    rout: dict[str, float | None]
    band: dict[str, dict[str, float | None]]
    attribution: dict[str, float]
    findings: tuple[Finding, ...]
    hand: HandColumn | None = None
    measurement: object | None = None  # bridge.sim.ac.AcMeasurement, for the plot
    topology: str | None = None
    extra: dict = field(default_factory=dict)

    @property
    def agree(self) -> bool:
        return not any(f.severity in ("error", "warning") for f in self.findings)

    @property
    def compared(self) -> bool:
        """Whether any quantity (gain, Rin, Rout) has a value in two columns: without one (no
        signal source, say) nothing was compared, and nothing can have disagreed."""
        return any(sum(value is not None and math.isfinite(value) for value in values.values()) >= 2
                   for values in (self.gain, self.rin, self.rout))


def _empty() -> dict[str, float | None]:
    return dict.fromkeys(COLUMN_KEYS)


def _effects_that_act(circuit: Circuit) -> list[str]:
    """The effects the card can show: LAMBDA when it gives one; GAMMA when it gives one and the
    bulk is not on the source."""
    acting = []
    for effect in EFFECTS:
        for element in circuit.elements_of("mosfet"):
            card = circuit.model(element.model or "")
            value = card.params.get("lambda" if effect == "lambda" else "gamma", 0.0) if card else 0.0
            if not isinstance(value, (int, float)) or value == 0.0:
                continue
            if effect == "gamma" and element.nodes[3] == element.nodes[2]:
                continue
            acting.append(effect)
            break
    return acting


def run_gain(
    circuit: Circuit,
    session,
    *,
    input_name: str | None = None,
    output_name: str | None = None,
    frequency: float | None = None,
    tolerance: float = 0.05,
    band_tolerance: float = BAND_TOLERANCE,
    sim_timeout: float = 30.0,
    unavailable_hint: str | None = None,
) -> GainResult:
    """The gain check of `circuit`. Raises GainInputError (a bad --input/--output) and
    SweepInputError (no MOSFET, an output that cannot be chosen) for the CLI to refuse with."""
    findings: list[Finding] = []
    source = given_input(circuit, input_name) if input_name else default_input(circuit)
    output = given_output(circuit, output_name) if output_name else default_output(circuit)
    holder = held_output(circuit, output.value, source.value) if output_name else None  # type: ignore[arg-type]
    if holder is not None:
        raise GainInputError(f"--output: `{output.value}` is held by {holder} (a voltage source other than the "
                             "input): it is AC ground and carries no signal")  # fmt: skip
    load = default_load(circuit, output.value)  # type: ignore[arg-type]
    mosfet = circuit.elements_of("mosfet")[0]
    subject, line = mosfet.name, mosfet.origin.line
    simulator = _simulator(session, unavailable_hint)

    def result(**values) -> GainResult:
        base = dict(file=circuit.source_file, title=circuit.title, input=source, output=output, load=load,
                    frequency=None, frequency_why="", sweep=None, simulator=simulator, gain=_empty(),
                    rin=_empty(), rout=_empty(),
                    band={"low_hz": dict.fromkeys(COLUMN_KEYS), "high_hz": dict.fromkeys(COLUMN_KEYS)},
                    attribution={}, findings=tuple(findings))  # fmt: skip
        base.update(values)
        return GainResult(**base)

    if source.value is None:
        findings.append(Finding("error", "no-signal-source", f"no signal source: {source.why}; name it with "
                                "--input", None, None))  # fmt: skip
        return result()

    hand: HandSolution | None = None
    level1: OperatingPoint | None = None
    try:
        hand = HandModel(circuit).solve()
        if not hand.devices:
            hand = None
    except HandAnalysisError as exc:
        findings.append(Finding("warning", "hand-unavailable", f"hand analysis: {exc}", None, None))
    try:
        level1 = solve_operating_point(circuit)
    except DcSolveError as exc:
        findings.append(Finding("error", "solver-failed", f"level-1 solver: {exc}", line, subject))

    # Not an amplifier: a device out of saturation in the bias point the columns rest on.
    regions = {}
    if level1 is not None:
        regions = {name: point.region for name, point in level1.devices.items()}
        judged = "level-1 solution"
    elif hand is not None:
        regions = {name: device.region for name, device in hand.devices.items()}
        judged = "hand analysis"
    off = {name: region for name, region in regions.items() if region != "saturation"}
    if off:
        words = ", ".join(f"{name} in {region}" for name, region in off.items())
        findings.append(Finding("warning", "not-amplifying", f"not an amplifier at this bias point: {words} in the "
                                f"{judged}; no small-signal gain is reported", line, subject))  # fmt: skip
        return result()
    if hand is not None and any(d.region != "saturation" for d in hand.devices.values()):
        words = ", ".join(f"{n} in {d.region}" for n, d in hand.devices.items() if d.region != "saturation")
        findings.append(Finding("warning", "hand-region", f"the hand analysis puts {words}: its small-signal "
                                "column is left empty", line, subject))  # fmt: skip
        hand = None

    # The hand column first at a provisional frequency: its band edges choose the midband.
    provisional = SignalSetup(source.value, output.value, load.value, frequency or 1e3)  # type: ignore[arg-type]
    column: HandColumn | None = None
    if hand is not None:
        try:
            column = hand_column(circuit, hand, provisional)
        except SmallSignalError as exc:
            findings.append(Finding("warning", "hand-unavailable", f"hand small-signal model: {exc}", None, None))
    low = column.low_hz if column else None
    high = column.high_hz if column else None
    if frequency is not None:
        chosen, why = frequency, "given with --freq"
        try:
            midband(low, high)
        except NoMidband as exc:
            findings.append(Finding("warning", "no-midband", str(exc), None, None))
    else:
        try:
            chosen, why = midband(low, high)
        except NoMidband as exc:
            findings.append(Finding("warning", "no-midband", f"{exc}; no midband gain is reported", None, None))
            return result(hand=column)
    setup = SignalSetup(source.value, output.value, load.value, chosen)  # type: ignore[arg-type]
    if column is not None and circuit.elements_of("inductor"):
        column = hand_column(circuit, hand, setup)  # an inductor's admittance depends on the frequency
    start, stop = sweep_range(low, high, chosen)

    gain, rin, rout = _empty(), _empty(), _empty()
    if column is not None:
        gain["hand"], rin["hand"], rout["hand"] = column.gain, column.rin, column.rout
        for note in column.notes:
            findings.append(Finding("info", "hand-note", note, None, None))
        if column.closed_form is None:
            findings.append(Finding("info", "hand-numeric", "hand small-signal model: no closed form covers this "
                                    "stage; its network was solved numerically", None, None))  # fmt: skip
        elif column.gain is None:
            findings.append(Finding("warning", "hand-infinite", f"{column.closed_form}: with ro infinite the hand "
                                    "model gives no finite gain or Rout (nothing resistive holds the output)",
                                    line, subject))  # fmt: skip
    level1_values: Level1Column | None = None
    if level1 is not None:
        try:
            level1_values = level1_column(circuit, level1, setup)
            gain["level1"], rin["level1"], rout["level1"] = level1_values.gain, level1_values.rin, level1_values.rout
        except SmallSignalError as exc:
            findings.append(Finding("error", "level1-unavailable", f"level-1 small-signal model: {exc}", None, None))

    band = {"low_hz": {"hand": low, "level1": None, "sim": None},
            "high_hz": {"hand": high, "level1": None, "sim": None}}  # fmt: skip
    if level1_values is not None:
        with contextlib.suppress(SmallSignalError):
            band["low_hz"]["level1"], band["high_hz"]["level1"] = level1_band_edges(circuit, level1, setup, start, stop)
    evidence = None
    if column is not None and hand is not None:
        with contextlib.suppress(SmallSignalError):
            evidence = hand_band_evidence(circuit, hand, column, setup, start, stop)
    measurement = None
    if session is not None:
        measurement = _measure(session, circuit, setup, start, stop, sim_timeout, findings)
        if measurement is not None:
            gain["sim"] = signed(measurement.gain)
            rin["sim"] = signed(measurement.rin)
            rout["sim"] = signed(measurement.rout)
            band["low_hz"]["sim"] = measurement.low_hz
            band["high_hz"]["sim"] = measurement.high_hz
    else:
        findings.append(Finding("info", "no-simulator", unavailable_hint or "ngspice not available", None, None))

    columns = {"gain": gain, "rin": rin, "rout": rout}
    if measurement is not None:
        complex_values = {"gain": measurement.gain, "rin": measurement.rin, "rout": measurement.rout}
        phased, skip = phase_findings(complex_values, "sim", chosen, line, subject)
    elif level1_values is not None:
        complex_values = {"gain": level1_values.gain_complex, "rin": level1_values.rin_complex,
                          "rout": level1_values.rout_complex}  # fmt: skip
        phased, skip = phase_findings(complex_values, "level1", chosen, line, subject)
    else:
        phased, skip = [], set()
    findings.extend(phased)
    for key in skip:
        columns[key] = {**columns[key], "hand": None}
    findings.extend(compare_columns(columns, tolerance, subject, line))
    places = _band_places(circuit, column, line, subject)
    swept = "sim" if measurement is not None else "level1" if level1_values is not None else None
    reference_gain = gain["sim"] if gain["sim"] is not None else gain["level1"]
    if swept is not None and reference_gain is not None and abs(reference_gain) < NO_SIGNAL:
        findings.append(Finding("warning", "no-output-signal", f"the input {source.value} does not reach "
                                f"{output.value}: |gain| is below {NO_SIGNAL:g} in the {COLUMN_NAMES[swept]} column, "
                                "so it has no band edges either; name another node with --output",
                                None, None))  # fmt: skip
        band = {key: {**values, "hand": None} for key, values in band.items()}
    findings.extend(band_findings(band, evidence, tolerance, band_tolerance, places,
                                  junction_capacitances=_junction_capacitances(circuit), swept=swept,
                                  sweep=(start, stop)))  # fmt: skip
    changes: dict[str, float] = {}
    if hand is not None and column is not None and column.gain is not None:
        with_effect = {}
        for effect in _effects_that_act(circuit):
            try:
                with_effect[effect] = hand_gain_with(circuit, hand, setup, effect)
            except SmallSignalError:
                continue
        changes = attribution(column.gain, with_effect)
    if frequency is not None and ((low and frequency < 100.0 * low) or (high and frequency > high / 100.0)):
        findings.append(Finding("info", "near-band-edge", f"--freq {frequency:g} Hz is within 100× of a hand band "
                                "edge: the hand column's shorted and open capacitors are not exact there",
                                None, None))  # fmt: skip
    return result(frequency=chosen, frequency_why=why, sweep=(start, stop), gain=gain, rin=rin, rout=rout,
                  band=band, attribution=changes, findings=tuple(findings), hand=column, measurement=measurement,
                  topology=column.closed_form if column else None)  # fmt: skip


def _band_places(circuit: Circuit, column: HandColumn | None, line: int | None,
                 subject: str | None) -> dict[str, tuple[int | None, str | None]]:  # fmt: skip
    """Where a band-edge finding points: the low edge at the capacitor whose short-circuit term is
    the largest (the MOSFET without one), the upper edge at the MOSFET (its gate capacitances)."""
    places = {"low_hz": (line, subject), "high_hz": (line, subject)}
    terms = [t for t in (column.low_terms if column else ()) if 0.0 < t.pole_hz < math.inf]
    if terms:
        dominant = circuit.element(max(terms, key=lambda t: t.pole_hz).capacitor)
        if dominant is not None:
            places["low_hz"] = (dominant.origin.line, dominant.name)
    return places


def _junction_capacitances(circuit: Circuit) -> bool:
    """Whether a MOSFET's card gives bulk junction capacitances, which the level-1 column leaves out."""
    for element in circuit.elements_of("mosfet"):
        card = circuit.model(element.model or "")
        if card is not None and card_gives_junction_capacitances(card.params):
            return True
    return False


def _simulator(session, hint: str | None) -> dict:
    if session is None:
        return {"name": "ngspice", "version": None, "unavailable": hint or "ngspice not available"}
    try:
        return {"name": "ngspice", "version": session.version}
    except Exception as exc:  # noqa: BLE001 - the worker's failure is reported, never raised
        return {"name": "ngspice", "version": None, "unavailable": str(exc)}


def _measure(session, circuit, setup: SignalSetup, start: float, stop: float, timeout: float,
             findings: list[Finding]):  # fmt: skip
    """ngspice's `.ac` column through ``bridge.sim.ac.measure_ac`` (branch gainsim), or None with a
    finding saying why."""
    try:
        from .sim.ac import AcSetup, measure_ac
    except ImportError:
        findings.append(Finding("info", "no-simulator", "ngspice's .ac column is not built into this version "
                                "(bridge.sim.ac is missing)", None, None))  # fmt: skip
        return None
    from .sim.client import SimulatorError

    try:
        return measure_ac(session, circuit, AcSetup(setup.input_source, setup.output_node, setup.load,
                                                    setup.midband_hz, start, stop), timeout=timeout)  # fmt: skip
    except SimulatorError as exc:
        findings.append(simulator_failure(exc))
    except ValueError as exc:
        findings.append(Finding("error", "sim-failed", f"ngspice .ac: {exc}", None, None))
    return None


def finite(value: float | None) -> float | None:
    """A value for JSON: None for None or an infinite value."""
    return value if value is not None and math.isfinite(value) else None
