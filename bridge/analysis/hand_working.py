"""The hand analysis's working: the steps a designer would write, built from the numbers
``hand.py`` found (no number here is solved for: the text reads them), and the assumptions.

Written lazily: ``written(Working(...))`` gives the steps and the assumptions as ``Written``
sequences that build their text the first time they are read (``check --steps``, a test), so a
``check --json``, the attribution's re-solves and a sweep's points format nothing. A ``Written``
compares, hashes and pickles as the tuple it stands for.

Nothing here imports ``hand.py`` or ``hand_circuit.py`` (they import this): the working reads
the hand's circuit, stage and numbers through their attributes.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from ..devices.mos1 import Level1Model, Level1Point, Region, beta, leff, threshold
from ..devices.mos1.load import saturation_overdrive_quadratic, square_law
from ..devices.mos1.params import CELSIUS_TO_KELVIN, CIRCUIT_TEMPERATURE_C
from ..netlist.circuit import GROUND
from ..netlist.numbers import engineering
from ..vocabulary import Step

if TYPE_CHECKING:
    from .hand import _AffineNumbers, _HeldNumbers
    from .hand_circuit import _DcCircuit, _Stage, _Terminal, _Transistor

__all__ = ["Working", "Written", "written"]


# --- formatting ------------------------------------------------------------------------------


def _q(value: float, unit: str = "") -> str:
    """A quantity as a designer writes it: 1.333 V, 0.6325 V, 240.7 µA, 88 kΩ."""
    if unit == "V" and 1e-2 <= abs(value) < 1e3:
        return f"{value:.4g} V"
    return engineering(value, unit)


def _minus(value: float, unit: str) -> str:
    """`− 1.5 kΩ`-style continuation of a sum: the sign pulled out of the number."""
    return f"− {_q(-value, unit)}" if value < 0 else f"+ {_q(value, unit)}"


def _signed(value: float) -> str:
    """`− 0.5`-style continuation of a sum for a plain number."""
    return f"− {-value:.4g}" if value < 0 else f"+ {value:.4g}"


def _gate_formula(offset: float, drain_gain: float, source_gain: float) -> str:
    """VG = a + α·VD + β·VS, zero terms left out."""
    text = f"VG = {_q(offset, 'V')}"
    for gain, symbol in ((drain_gain, "VD"), (source_gain, "VS")):
        if abs(gain) > 1e-12:
            text += f" {_signed(gain)}·{symbol}"
    return text


def _temperature_moved(model: Level1Model) -> bool:
    """True when the model is not simply the card at 27 °C: another temperature or TNOM."""
    return model.temperature_celsius is not None and (
        model.temperature_celsius != CIRCUIT_TEMPERATURE_C or not model.at_nominal_temperature
    )


def _temperature_step(transistor: _Transistor) -> Step:
    """The working's line for KP and VTO at the device temperature (mos1temp.c's rules)."""
    model = transistor.model
    card = model.nominal or model
    celsius = model.temperature_celsius
    kelvin, tnom_kelvin = model.kelvin, card.tnom_celsius + CELSIUS_TO_KELVIN
    return Step(
        f"{transistor.name} at {celsius:g} °C: KP and VTO at that temperature (ngspice level-1 temperature "
        f"rules, TNOM = {card.tnom_celsius:g} °C: KP·(T/TNOM)^−1.5, VTO through PHI and the band gap)",
        f"KP = {_q(card.kp, 'A/V²')}·({kelvin:.2f} K/{tnom_kelvin:.2f} K)^−1.5 = {_q(model.kp, 'A/V²')}, "
        f"VTO = {_q(card.vto, 'V')} → {_q(model.vto, 'V')}, PHI = {_q(card.phi, 'V')} → {_q(model.phi, 'V')}",
        model.kp,
        "A/V²",
    )


# --- the working ------------------------------------------------------------------------------


@dataclass(eq=False)
class _Names:
    """How the working writes device-polarity quantities: VGS/VDS for NMOS, VSG/VSD for PMOS."""

    vgs: str
    vds: str
    vgd: str


def _names(polarity: int) -> _Names:
    return _Names("VGS", "VDS", "VGD") if polarity > 0 else _Names("VSG", "VSD", "VDG")


def _model_steps(transistor: _Transistor, effects: frozenset[str]) -> list[Step]:
    model, geometry = transistor.model, transistor.geometry
    k = beta(model, geometry)
    length = leff(model, geometry)
    m_text = "·M" if geometry.m != 1.0 else ""
    m_value = f"·{geometry.m:g}" if geometry.m != 1.0 else ""
    l_text = "Leff" if model.ld != 0.0 else "L"
    moved = _temperature_moved(model)
    at_text = f" at {model.temperature_celsius:g} °C" if moved else ""
    steps = [_temperature_step(transistor)] if moved else []
    steps += [
        Step(
            f"{transistor.name}: gain factor K = KP·W{m_text}/{l_text}{at_text}"
            + (f" (Leff = L − 2·LD = {_q(length, 'm')})" if model.ld != 0.0 else ""),
            f"K = {_q(model.kp, 'A/V²')}·{_q(geometry.w, 'm')}{m_value}/{_q(length, 'm')} = {_q(k, 'A/V²')}",
            k,
            "A/V²",
        )
    ]
    vt = threshold(model, 0.0)
    if "gamma" in effects:
        steps.append(
            Step(
                f"{transistor.name}: zero-bias threshold{at_text} (body effect on: GAMMA = {model.gamma:.4g} √V, "
                f"PHI = {_q(model.phi, 'V')})",
                f"Vt0 = {'−VTO' if model.polarity < 0 else 'VTO'} = {_q(vt, 'V')}",
                vt,
                "V",
            )
        )
    else:
        steps.append(
            Step(
                f"{transistor.name}: threshold from the card{at_text}, no body effect"
                + (" (PMOS: in device polarity)" if model.polarity < 0 else ""),
                f"Vt = {'−VTO' if model.polarity < 0 else 'VTO'} = {_q(vt, 'V')}",
                vt,
                "V",
            )
        )
    return steps


def _gate_steps(dc: _DcCircuit, stage: _Stage) -> list[Step]:
    gate, t = stage.gate, stage.transistor
    if gate.kind == "diode":
        return [Step(f"Gate tied to the drain (diode-connected): {_names(t.polarity).vgs} = {_names(t.polarity).vds}")]
    if gate.kind == "tied":
        return [Step(f"Gate tied to the source: {_names(t.polarity).vgs} = 0")]
    if gate.kind == "rail":
        if gate.voltage_label == "0":
            return [Step("Gate grounded", "VG = 0 V", 0.0, "V")]
        return [
            Step(
                f"Gate driven directly by {gate.voltage_label} (a Thevenin source with R = 0)",
                f"VG = {_q(gate.voltage, 'V')}",
                gate.voltage,
                "V",
            )
        ]
    if gate.kind == "divider":
        first, second = gate.detail
        rail_1, rail_2 = dc.fixed[first.far_end(t.gate)], dc.fixed[second.far_end(t.gate)]
        if rail_1 == 0.0 and rail_2 != 0.0:
            first, second = second, first
            rail_1, rail_2 = rail_2, rail_1
        label_1 = dc.rail_label[first.far_end(t.gate)]
        label_2 = dc.rail_label[second.far_end(t.gate)]
        total = first.resistance + second.resistance
        if rail_2 == 0.0:
            formula = f"VG = {label_1}·{second.name}/({first.name}+{second.name})"
            numbers = f"{_q(rail_1, 'V')}·{_q(second.resistance, 'Ω')}/{_q(total, 'Ω')}"
        else:
            formula = f"VG = ({label_1}·{second.name} + {label_2}·{first.name})/({first.name}+{second.name})"
            numbers = (
                f"({_q(rail_1, 'V')}·{_q(second.resistance, 'Ω')} + {_q(rail_2, 'V')}·"
                f"{_q(first.resistance, 'Ω')})/{_q(total, 'Ω')}"
            )
        return [
            Step(
                f"Gate voltage from the divider (no gate current, so RTH = {first.name}∥{second.name} = "
                f"{_q(gate.resistance, 'Ω')} drops nothing)",
                f"{formula} = {numbers} = {_q(gate.offset, 'V')}",
                gate.offset,
                "V",
            )
        ]
    if gate.kind == "resistor":
        (only,) = gate.detail
        rail = only.far_end(t.gate)
        return [
            Step(
                f"Gate returned to {dc.rail_label[rail] if rail != GROUND else 'ground'} through {only.name} "
                "(no gate current, so no drop across it)",
                f"VG = {_q(gate.offset, 'V')}",
                gate.offset,
                "V",
            )
        ]
    if gate.kind == "network":
        return [
            Step(
                f"Gate Thevenin equivalent of {', '.join(gate.elements)} (no gate current, so VG is the "
                f"Thevenin voltage; RTH = {_q(gate.resistance, 'Ω')} drops nothing)",
                f"VG = {_q(gate.offset, 'V')}",
                gate.offset,
                "V",
            )
        ]
    if gate.kind == "feedback":
        if gate.detail:
            feedback = gate.detail[0]
            if len(gate.detail) == 2:
                shunt = gate.detail[1]
                rail = shunt.far_end(t.gate)
                ratio = f"{shunt.name}/({feedback.name}+{shunt.name})"
                if rail == GROUND:
                    formula = f"VG = VD·{ratio} = {gate.drain_gain:.4g}·VD"
                else:
                    formula = (
                        f"VG = {dc.rail_label[rail]} + (VD − {dc.rail_label[rail]})·{ratio} = "
                        f"{_q(gate.offset, 'V')} + {gate.drain_gain:.4g}·VD"
                    )
                text = f"Gate from the drain through the divider {feedback.name}–{shunt.name} (no gate current)"
            else:
                text = f"Gate from the drain through {feedback.name}: no gate current, so it drops nothing"
                formula = "VG = VD"
        else:
            text = f"Gate from the drain through {', '.join(gate.elements)} (no gate current)"
            formula = _gate_formula(gate.offset, gate.drain_gain, gate.source_gain)
        return [Step(text, formula)]
    return [
        Step(
            f"Gate relation from {', '.join(gate.elements)} (no gate current)",
            _gate_formula(gate.offset, gate.drain_gain, gate.source_gain),
        )
    ]


def _channel_relation(terminal: _Terminal, role: str, polarity: int) -> str | None:
    """`VD = VDD − ID·RD`-style relation of a drain or source resistor; None when there is none."""
    if terminal.kind != "resistor":
        return None
    symbol = "VD" if role == "drain" else "VS"
    # A conducting NMOS pulls current out of its drain node and pushes it into its source node.
    sign = -polarity if role == "drain" else polarity
    rail = "" if terminal.voltage_label == "0" else terminal.voltage_label
    term = f"ID·{terminal.resistance_label}"
    if not rail:
        return f"{symbol} = {'−' if sign < 0 else ''}{term}"
    return f"{symbol} = {rail} {'−' if sign < 0 else '+'} {term}"


def _channel_steps(dc: _DcCircuit, stage: _Stage) -> list[Step]:
    steps: list[Step] = []
    p = stage.transistor.polarity
    for role, terminal in (("source", stage.source), ("drain", stage.drain)):
        symbol = "VS" if role == "source" else "VD"
        if terminal.kind == "rail":
            where = "grounded" if terminal.voltage_label == "0" else f"on {terminal.voltage_label}"
            if role == "drain" and stage.gate.kind == "diode":
                continue
            steps.append(
                Step(
                    f"{role.capitalize()} {where}",
                    f"{symbol} = {_q(terminal.voltage, 'V')}",
                    terminal.voltage,
                    "V",
                )
            )
        elif terminal.kind == "resistor":
            relation = _channel_relation(terminal, role, p)
            if terminal.resistance_label.startswith("RTH"):
                tag = terminal.resistance_label[-1]
                steps.append(
                    Step(
                        f"{role.capitalize()} Thevenin equivalent of {', '.join(terminal.elements)}"
                        + (" (the feedback string loads the drain)" if stage.gate.kind == "feedback" else ""),
                        f"VTH,{tag} = {_q(terminal.voltage, 'V')}, RTH,{tag} = {_q(terminal.resistance, 'Ω')}",
                    )
                )
                steps.append(Step(f"{role.capitalize()} side", relation))
            else:
                rail = terminal.voltage_label
                where = "ground" if rail == "0" else rail
                steps.append(Step(f"{role.capitalize()} resistor {terminal.resistance_label} to {where}", relation))
        elif terminal.kind == "coupled" and role == "source":
            steps.append(
                Step(
                    f"Drain and source both hang on the network {', '.join(terminal.elements)}: "
                    "it is reduced as a whole below"
                )
            )
    return steps


def _terminal_value_step(terminal: _Terminal, role: str, polarity: int, current: float, value: float) -> Step | None:
    if terminal.kind == "rail":
        return None
    symbol = "VD" if role == "drain" else "VS"
    relation = _channel_relation(terminal, role, polarity)
    if relation is None:
        return Step(f"{role.capitalize()} voltage", f"{symbol} = {_q(value, 'V')}", value, "V")
    sign = -polarity if role == "drain" else polarity
    rail = "" if terminal.voltage_label == "0" else f"{_q(terminal.voltage, 'V')} "
    numbers = f"{rail}{'−' if sign < 0 else '+'} {_q(current, 'A')}·{_q(terminal.resistance, 'Ω')}"
    if not rail:
        numbers = ("−" if sign < 0 else "") + numbers[2:]
    return Step(f"{role.capitalize()} voltage", f"{relation} = {numbers} = {_q(value, 'V')}", value, "V")


# --- closed forms -----------------------------------------------------------------------------


def _overdrive_symbol(stage: _Stage, value: float) -> str:
    """Name of the resistance that turns ID into lost overdrive; its value when there is no name."""
    gate, drain, source = stage.gate, stage.drain, stage.source
    source_r = source.resistance_label if source.kind == "resistor" else ""
    plus_source = f" + {source_r}" if source_r else ""
    if gate.kind in ("rail", "divider", "resistor", "network") and source_r:
        return source_r
    if gate.kind == "diode" and drain.kind == "resistor":
        return f"({drain.resistance_label}{plus_source})" if source_r else drain.resistance_label
    if gate.kind == "feedback" and drain.kind == "resistor" and abs(gate.source_gain) <= 1e-12:
        factor = "" if math.isclose(gate.drain_gain, 1.0) else f"{gate.drain_gain:.4g}·"
        named = f"{factor}{drain.resistance_label}{plus_source}"
        return f"({named})" if source_r or factor else named
    return _q(value, "Ω")


def _affine_working(dc: _DcCircuit, stage: _Stage, numbers: _AffineNumbers) -> list[Step]:
    """The steps of the affine closed form, written from its numbers."""
    t = stage.transistor
    names = _names(t.polarity)
    k, vt, vgs0, vds0, u = numbers.k, numbers.vt, numbers.vgs0, numbers.vds0, numbers.u
    rg, rd = numbers.rg, numbers.rd
    symbol = _overdrive_symbol(stage, rg)
    steps = [
        Step(
            f"Overdrive in terms of ID (substituting the gate and source relations; VOV = {names.vgs} − Vt)",
            f"VOV = {_q(u, 'V')}" + (f" − ID·{_q(rg, 'Ω')}" if rg > 0.0 else ""),
        ),
        Step(
            f"{names.vds} in terms of ID",
            f"{names.vds} = {_q(vds0, 'V')}" + (f" − ID·{_q(rd, 'Ω')}" if rd else ""),
        ),
    ]
    if numbers.region == "cutoff":
        steps.append(
            Step(
                f"With ID = 0, {names.vgs} = {_q(vgs0, 'V')} is not above Vt = {_q(vt, 'V')}: VOV ≤ 0, cutoff",
                "ID = 0",
                0.0,
                "A",
            )
        )
        return steps

    steps.append(Step("Assume saturation", "ID = (K/2)·VOV²"))
    vov, other = numbers.trial_vov, numbers.trial_other
    if rg == 0.0:
        steps.append(
            Step(
                "Nothing between the source and a rail drops voltage: VOV is set directly",
                f"VOV = {_q(vov, 'V')}",
                vov,
                "V",
            )
        )
    else:
        a = saturation_overdrive_quadratic(t.model, t.geometry, u, rg)[0]
        steps.append(
            Step(
                f"Quadratic in VOV from ID = (K/2)·VOV² and VOV = {_q(u, 'V')} − ID·{symbol}",
                f"(K·{symbol}/2)·VOV² + VOV − {_q(u, 'V')} = {a:.4g} /V·VOV² + VOV − {_q(u, 'V')} = 0 → "
                f"VOV = (−1 ± √(1 + 2·K·{symbol}·{_q(u, 'V')}))/(K·{symbol}) = {_q(vov, 'V')} or "
                f"{_q(other, 'V')}",
            )
        )
        steps.append(
            Step(
                f"Keep the root VOV = {_q(vov, 'V')}: the other, {_q(other, 'V')}, would mean {names.vgs} = "
                f"Vt + VOV = {_q(vt + other, 'V')} < Vt — the square law's mirror branch, where the device "
                "is really off",
                f"VOV = {_q(vov, 'V')}",
                vov,
                "V",
            )
        )
    current = numbers.trial_current
    steps.append(
        Step(
            "Drain current",
            f"ID = (K/2)·VOV² = {_q(k / 2, 'A/V²')}·({_q(vov, 'V')})² = {_q(current, 'A')}",
            current,
            "A",
        )
    )
    vds = numbers.trial_vds
    steps.extend(_node_steps(dc, stage, current, numbers.trial_voltages))
    steps.append(_saturation_check(names, vds, vov, numbers.region == "saturation"))
    if numbers.region == "saturation":
        steps.append(_gm_step(t, vov, current, "saturation"))
        return steps

    w = vds0
    qa, qb, qc = numbers.quadratic
    roots = numbers.roots
    steps.append(
        Step(
            f"Triode: ID = K·(VOV·{names.vds} − {names.vds}²/2) with "
            f"VOV = {_q(u, 'V')}" + (f" − ID·{_q(rg, 'Ω')}" if rg > 0.0 else "") + " and "
            f"{names.vds} = {_q(w, 'V')}" + (f" − ID·{_q(rd, 'Ω')}" if rd else "") + ": a quadratic in ID",
            f"{qa:.4g} /A·ID² {_signed(qb)}·ID {_minus(qc, 'A')} = 0 → ID = " + " or ".join(_q(r, "A") for r in roots),
        )
    )
    if numbers.failure is not None:
        return steps
    current, vov, vds = numbers.current, numbers.vov, numbers.vds
    rejected = [r for r in roots if r != current]
    why = ""
    if rejected:
        r = rejected[0]
        why = f"; the other root gives VOV = {_q(u - rg * r, 'V')}, {names.vds} = {_q(w - rd * r, 'V')}, outside triode"
    steps.append(
        Step(
            f"Keep ID = {_q(current, 'A')}: with it 0 ≤ {names.vds} = {_q(vds, 'V')} ≤ VOV = {_q(vov, 'V')}{why}",
            f"ID = {_q(current, 'A')}",
            current,
            "A",
        )
    )
    steps.extend(_node_steps(dc, stage, current, numbers.voltages))
    steps.append(Step("Check", f"{names.vds} = {_q(vds, 'V')} < VOV = {_q(vov, 'V')} → triode holds"))
    steps.append(_gm_step(t, vds, current, "triode", vov))
    return steps


def _held_working(dc: _DcCircuit, stage: _Stage, numbers: _HeldNumbers) -> list[Step]:
    """The steps of the held closed form (a current source is the only DC path of the source, or
    of a diode-connected drain: ID = I), written from its numbers."""
    t = stage.transistor
    p, names = t.polarity, _names(t.polarity)
    k, vt = beta(t.model, t.geometry), threshold(t.model, 0.0)
    current, vov_sat = numbers.current, numbers.vov_sat
    where = "source" if stage.held_node == t.source else "drain–gate node"
    steps = [
        Step(
            f"Current source {', '.join(stage.held_by)} is the {where}'s only DC path (no gate current), so "
            "it sets the drain current",
            f"ID = {_q(current, 'A')}",
            current,
            "A",
        )
    ]
    if stage.held_node == t.source:
        vg, vd, vs, vds = numbers.vg, numbers.vd, numbers.vs, numbers.vds
        steps.append(
            Step(
                "Assume saturation",
                f"VOV = √(2·ID/K) = √(2·{_q(current, 'A')}/{_q(k, 'A/V²')}) = {_q(vov_sat, 'V')}",
                vov_sat,
                "V",
            )
        )
        if stage.gate.kind != "rail":
            steps.append(Step("Gate voltage", f"VG = {_q(vg, 'V')}", vg, "V"))
        relation = "VS = VG − Vt − VOV" if p > 0 else "VS = VG + Vt + VOV"
        steps.append(Step("Source voltage", f"{relation} = {_q(vs, 'V')}", vs, "V"))
        step = _terminal_value_step(stage.drain, "drain", p, current, vd)
        if step is not None:
            steps.append(step)
        steps.append(_saturation_check(names, vds, vov_sat, numbers.region == "saturation"))
        if numbers.region == "saturation":
            steps.append(_gm_step(t, vov_sat, current, "saturation"))
            return steps
        # Triode with ID fixed: VOV = VDS + δ, δ = VGD − Vt, so ID = K·(VDS²/2 + δ·VDS).
        delta, vds = numbers.delta, numbers.triode_vds
        vs = numbers.voltages[t.source]
        steps.append(
            Step(
                f"Triode with ID fixed: VOV = {names.vds} + δ, δ = {names.vgd} − Vt = {_q(delta, 'V')}, so "
                f"ID = K·({names.vds}²/2 + δ·{names.vds}); keep the positive root (the other puts the drain "
                "beyond the source)",
                f"{names.vds} = √(δ² + 2·ID/K) − δ = {_q(vds, 'V')}",
                vds,
                "V",
            )
        )
        steps.append(Step("Source voltage", f"VS = {_q(vs, 'V')}", vs, "V"))
        steps.append(Step("Check", f"{names.vds} = {_q(vds, 'V')} < VOV = {_q(vds + delta, 'V')} → triode holds"))
        steps.append(_gm_step(t, vds, current, "triode", vds + delta))
        return steps

    # Diode-connected node fed only by a current source.
    step = _terminal_value_step(stage.source, "source", p, current, numbers.vs)
    if step is not None:
        steps.append(step)
    vgs = numbers.vgs
    if numbers.region == "saturation":
        steps.append(
            Step(
                f"Saturation ({names.vds} = {names.vgs} = Vt + VOV ≥ VOV, as Vt > 0)",
                f"{names.vgs} = Vt + √(2·ID/K) = {_q(vt, 'V')} + √(2·{_q(current, 'A')}/{_q(k, 'A/V²')}) "
                f"= {_q(vgs, 'V')}",
                vgs,
                "V",
            )
        )
        vov = vov_sat
    else:
        # Depletion device: VDS = VGS < VOV, so triode: ID = K·(VGS²/2 − Vt·VGS).
        steps.append(
            Step(
                f"Vt ≤ 0, so {names.vds} = {names.vgs} < VOV: triode, ID = K·({names.vgs}²/2 − "
                f"Vt·{names.vgs}); keep the positive root",
                f"{names.vgs} = Vt + √(Vt² + 2·ID/K) = {_q(vgs, 'V')}",
                vgs,
                "V",
            )
        )
        vov = vgs - vt
    vd = numbers.voltages[t.drain]
    steps.append(
        Step(
            "Drain (and gate) voltage",
            f"VD = VS {'+' if p > 0 else '−'} {names.vgs} = {_q(vd, 'V')}",
            vd,
            "V",
        )
    )
    steps.append(_gm_step(t, vov if numbers.region == "saturation" else vgs, current, numbers.region, vov))
    return steps


def _node_steps(dc: _DcCircuit, stage: _Stage, current: float, voltages: dict[str, float]) -> list[Step]:
    t = stage.transistor
    steps = []
    for role, terminal, node in (("source", stage.source, t.source), ("drain", stage.drain, t.drain)):
        step = _terminal_value_step(terminal, role, t.polarity, current, dc.voltage(voltages, node))
        if step is not None:
            steps.append(step)
    if stage.gate.kind in ("feedback", "coupled"):
        vg = dc.voltage(voltages, t.gate)
        steps.append(Step("Gate voltage", f"VG = {_q(vg, 'V')}", vg, "V"))
    return steps


def _saturation_check(names: _Names, vds: float, vov: float, holds: bool) -> Step:
    """The check of the saturation assumption a closed form made: VDS against VOV."""
    comparison = f"{names.vds} = {_q(vds, 'V')} {'≥' if holds else '<'} VOV = {_q(vov, 'V')}"
    outcome = "saturation holds" if holds else "saturation fails: re-solve in triode"
    return Step("Check the saturation assumption", f"{comparison} → {outcome}")


def _gm_step(t: _Transistor, drive: float, current: float, region: Region, vov: float | None = None) -> Step:
    """gm (and gds in triode) of the hand model, asked of the device at the closed form's point:
    `drive` is VOV in saturation, VDS in triode."""
    if region == "saturation":
        gm = square_law(t.model, t.geometry, drive, drive, region)[1]
        return Step("Transconductance (λ = 0: gds = 0)", f"gm = K·VOV = 2·ID/VOV = {_q(gm, 'S')}", gm, "S")
    assert vov is not None
    _, gm, gds = square_law(t.model, t.geometry, vov, drive, region)
    return Step(
        "Small-signal values in triode",
        f"gm = K·VDS = {_q(gm, 'S')}, gds = K·(VOV − VDS) = {_q(gds, 'S')}",
        gm,
        "S",
    )


# --- what the answer assumes ------------------------------------------------------------------


# Forward bias at which a real bulk junction conducts enough to matter: the answer then
# leans on the missing junction diodes, and the working says so.
_JUNCTION_ON = 0.3  # V: about a nanoamp through a default (IS = 1e-14 A) junction


def _junction_warnings(dc: _DcCircuit, voltages: dict[str, float]) -> list[Step]:
    """Bulk junctions the hand solution forward-biases: its answer then ignores a real diode."""
    warnings = []
    for t in dc.transistors:
        for terminal, node in (("source", t.source), ("drain", t.drain)):
            forward = t.polarity * (voltages[t.bulk] - voltages[node])
            if forward > _JUNCTION_ON:
                warnings.append(
                    Step(
                        f"Warning: {t.name}'s bulk–{terminal} junction is forward biased by "
                        f"{_q(forward, 'V')}; the hand model has no junction diodes, a real device "
                        "(and ngspice) would conduct through it",
                        value=forward,
                        unit="V",
                    )
                )
    return warnings


def _assumptions(dc: _DcCircuit, effects: frozenset[str]) -> tuple[str, ...]:
    items = [
        "Square law: ID = (K/2)·VOV² in saturation, K·(VOV·VDS − VDS²/2) in triode, K = KP·W·M/Leff",
        "LAMBDA switched on: ID scaled by (1 + λ·VDS)"
        if "lambda" in effects
        else "LAMBDA = 0: no channel-length modulation (gds = 0 in saturation)",
        "GAMMA switched on: threshold rises with source–bulk reverse bias"
        if "gamma" in effects
        else "GAMMA = 0: no body effect, Vt = VTO",
        "No gate current",
        "Capacitors open, inductors shorted (DC)",
        "Bulk junction diodes left out, and with them the minimum conductance ngspice puts across each",
        "Device quantities in device polarity: a conducting PMOS has positive ID, VGS = V(s) − V(g), "
        "VDS = V(s) − V(d), Vt",
    ]
    items.extend(dc.notes)
    for t in dc.transistors:
        if _temperature_moved(t.model):
            items.append(
                f"{t.name} at {t.model.temperature_celsius:g} °C: the card's KP, VTO and PHI taken to that "
                f"temperature by ngspice's level-1 rules (TNOM = {t.model.tnom_celsius:g} °C)"
            )
    for t in dc.transistors:
        items.extend(f"{t.name}: {caveat}" for caveat in t.card.caveats)
    return tuple(dict.fromkeys(items))


def _effect_text(dc: _DcCircuit, effects: frozenset[str]) -> str:
    parts = []
    for t in dc.transistors:
        if "lambda" in effects:
            parts.append(f"{t.name} LAMBDA = {t.model.lambda_:.4g} /V")
        if "gamma" in effects:
            parts.append(f"{t.name} GAMMA = {t.model.gamma:.4g} √V")
    return ", ".join(parts)


# --- the numerical path ---------------------------------------------------------------------


def _numerical_steps(dc: _DcCircuit, effects: frozenset[str], reason: str, iterations: int,
                     points: Mapping[str, Level1Point]) -> list[Step]:
    """Why no closed form was used, how the model was solved, and each device's point."""
    steps = [Step(f"No closed form used: {reason}")]
    model_words = "the hand model" + (f" with {_effect_text(dc, effects)} switched on" if effects else "")
    steps.append(
        Step(f"Solved {model_words} numerically: Newton's method on the node equations ({iterations} iterations)")
    )
    for t in dc.transistors:
        point = points[t.name]
        names = _names(t.polarity)
        steps.append(
            Step(
                f"{t.name}: {point.region}",
                f"ID = {_q(point.id, 'A')}, {names.vgs} = {_q(point.vgs, 'V')}, {names.vds} = "
                f"{_q(point.vds, 'V')}, VOV = {_q(point.vov, 'V')}",
                point.id,
                "A",
            )
        )
    return steps


# --- written on demand ------------------------------------------------------------------------


# Made per solve and never changed once made: not frozen (see hand_circuit's records).
@dataclass(eq=False)
class Working:
    """What one hand solution's working is written from, numbers only.

    The model steps of every transistor; with a `stage`, its gate and channel relations; with
    `closed` (the closed form's numbers, ``hand._AffineNumbers`` or ``hand._HeldNumbers``), the
    closed form's working; with `iterations`, the numerical path's (`reason`: why no closed form
    was used; `points`: each device's point); then the warnings of the bulk junctions that
    `voltages` (every merged node) forward-biases.
    """

    dc: _DcCircuit
    effects: frozenset[str]
    voltages: Mapping[str, float]
    stage: _Stage | None = None
    closed: _AffineNumbers | _HeldNumbers | None = None
    reason: str = ""
    iterations: int | None = None
    points: Mapping[str, Level1Point] | None = None

    def write(self) -> tuple[tuple[Step, ...], tuple[str, ...]]:
        """The steps and the assumptions."""
        dc, stage, effects = self.dc, self.stage, self.effects
        steps: list[Step] = []
        for t in dc.transistors:
            steps.extend(_model_steps(t, effects))
        if stage is not None:
            steps.extend(_gate_steps(dc, stage))
            steps.extend(_channel_steps(dc, stage))
            if self.closed is not None:
                if stage.held_node is not None:
                    steps.extend(_held_working(dc, stage, self.closed))
                else:
                    steps.extend(_affine_working(dc, stage, self.closed))
        if self.iterations is not None:
            assert self.points is not None
            steps.extend(_numerical_steps(dc, effects, self.reason, self.iterations, self.points))
        warnings = _junction_warnings(dc, self.voltages)
        return tuple(steps + warnings), _assumptions(dc, effects) + tuple(w.text for w in warnings)


class _Writer:
    """One working, written once, for the two sequences that show it."""

    __slots__ = ("_working", "_text")

    def __init__(self, working: Working) -> None:
        self._working: Working | None = working
        self._text: tuple[tuple[Step, ...], tuple[str, ...]] | None = None

    def text(self) -> tuple[tuple[Step, ...], tuple[str, ...]]:
        if self._text is None:
            assert self._working is not None
            self._text = self._working.write()
            self._working = None  # the numbers are no longer needed
        return self._text


class Written(Sequence):
    """A tuple of the working (steps, or assumptions), written the first time it is read. It
    compares equal to the tuple it stands for, and pickles and copies as that tuple."""

    __slots__ = ("_writer", "_part", "_items")

    def __init__(self, writer: _Writer, part: int) -> None:
        self._writer: _Writer | None = writer
        self._part = part
        self._items: tuple | None = None

    def _tuple(self) -> tuple:
        if self._items is None:
            assert self._writer is not None
            self._items = self._writer.text()[self._part]
            self._writer = None
        return self._items

    def __len__(self) -> int:
        return len(self._tuple())

    def __getitem__(self, index: Any) -> Any:
        return self._tuple()[index]

    def __iter__(self) -> Iterator[Any]:
        return iter(self._tuple())

    def __eq__(self, other: object) -> bool:
        if isinstance(other, (tuple, Written)):
            return self._tuple() == tuple(other)
        return NotImplemented

    def __hash__(self) -> int:
        return hash(self._tuple())

    def __repr__(self) -> str:
        return repr(self._tuple())

    def __reduce__(self) -> tuple:
        return tuple, (self._tuple(),)


def written(working: Working) -> tuple[Written, Written]:
    """The steps and the assumptions of `working`, each written when first read."""
    writer = _Writer(working)
    return Written(writer, 0), Written(writer, 1)
