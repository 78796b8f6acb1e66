"""Lint rules: the bias family — the operating point judged device by device.

Each rule reads the reference solution: ngspice's `.op` (``ctx.sim``) when it ran, else the
project's level-1 solution (``ctx.level1``); with neither, the family says nothing. When both are
present a verdict is taken on ngspice's, and the level-1 solver's is named beside it only when it
would change the verdict. Regions come from the solutions (``devices/mos1/ask.py``), thresholds
and body effect from the level-1 device (``devices/mos1``), never re-derived here.

- ``bulk-forward``: a bulk–source or bulk–drain junction forward biased (NMOS bulk above its
  source or drain, PMOS below); an error when it conducts, a warning below that.
- ``bulk-body-effect`` (info): a bulk neither at a rail nor at its source; how far the body
  effect moves Vt at the operating point.
- ``orient-drain-source``: an NMOS drain below its source (PMOS: above) — probably swapped.
- ``op-triode``, ``op-cutoff``: a device of a stage built to amplify out of saturation.
- ``op-saturation-margin``: in saturation, but vds − vov under ``settings.saturation_margin``.
- ``op-weak-inversion``: an overdrive under ``settings.weak_overdrive`` (square law doubtful).
- ``op-node-at-rail``: a drain or source pinned at a rail: no current through its resistor, or no
  voltage across the device.
- ``op-resistor-power``: a resistor dissipating more than ``settings.resistor_rating``.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import replace

from ..bias_rules import rail_name, rail_voltages, solution_phrase, wrong_rail_bulks
from ..devices.mos1.instance import InstanceError, Mos1Instance, mosfet_instance
from ..devices.mos1.load import threshold
from ..netlist.circuit import GROUND, Circuit, Element
from ..netlist.numbers import engineering
from ..records import record
from ..vocabulary import Finding
from .rule import LintContext, Rule
from .suffixes import meant_as_mega, mega_written_as_milli

# A junction forward biased by less than this is not reported: its current is below IS·e² (a few
# times IS, femtoamperes for ngspice's default IS = 1e-14 A). Common practice, no source.
FORWARD_FLOOR = 0.05  # V
# A forward-biased bulk junction "conducts" when its current is at least this share of the
# channel current (it then moves the bias more than a 1 % resistor would) and above
# CONDUCTING_FLOOR (a device in cutoff carries picoamperes). Common practice, no source.
CONDUCTING_SHARE = 0.01
CONDUCTING_FLOOR = 1e-9  # A
# Without a level-1 card to ask for the junction current: a silicon junction conducts from about
# half a volt (textbook value, from memory).
CONDUCTING_VOLTAGE = 0.5  # V
# Drain below source by less than this is solver resolution around a device that carries nothing,
# not a wiring mistake. Common practice, no source.
ORIENTATION_FLOOR = 0.01  # V
# A node within this of a rail is pinned there. Common practice, no source.
RAIL_TOLERANCE = 0.01  # V
# A resistor's rating should be at least twice what it dissipates. Common practice, no source.
DERATING = 2.0

CODES: dict[str, str] = {
    "bulk-forward": "a bulk junction forward biased at the operating point (NMOS bulk above its source "
    "or drain, PMOS below): error when it conducts",
    "bulk-body-effect": "a bulk neither at a rail nor at its source: how far the body effect moves Vt",
    "orient-drain-source": "an NMOS drain below its source (PMOS above): drain and source probably swapped",
    "op-triode": "a device of a stage built to amplify sits in triode",
    "op-cutoff": "a device of a stage built to amplify sits in cutoff",
    "op-saturation-margin": "saturated, but vds − vov below the saturation margin (default 100 mV)",
    "op-weak-inversion": "an overdrive below the weak-overdrive threshold (default 50 mV): square law doubtful",
    "op-node-at-rail": "a drain or source pinned at a rail: no current through its resistor, or none across the device",
    "op-resistor-power": "a resistor dissipating more than the rating (default 1/4 W)",
}


@record(frozen=True)
class _Bias:
    """One MOSFET at one solution, in device polarity (a conducting PMOS has positive id, vgs, vds)."""

    column: str  # "sim" or "level1"
    id: float | None
    vgs: float | None
    vds: float | None
    vbs: float | None
    vth: float | None
    vov: float | None
    region: str | None


@record(frozen=True)
class _Point:
    """One solution as the rules read it: node voltages (ground included) and the devices."""

    column: str
    voltages: Mapping[str, float]
    devices: Mapping[str, _Bias]


def _points(ctx: LintContext) -> list[_Point]:
    """The solutions at hand, the reference first: ngspice's (when it has every node), then the
    level-1 solver's."""
    found = []
    nodes = ctx.circuit.nodes()
    if ctx.sim is not None and all(node in ctx.sim.node_voltages or node == GROUND for node in nodes):
        voltages = {GROUND: 0.0, **ctx.sim.node_voltages}
        devices = {
            name: _Bias("sim", d.id, d.vgs, d.vds, d.vbs, d.vth, d.vov, d.region) for name, d in ctx.sim.devices.items()
        }
        found.append(_Point("sim", voltages, devices))
    if ctx.level1 is not None:
        voltages = {GROUND: 0.0, **ctx.level1.node_voltages}
        devices = {
            name: _Bias("level1", d.id, d.vgs, d.vds, d.vbs, d.vth, d.vov, d.region)
            for name, d in ctx.level1.devices.items()
        }
        found.append(_Point("level1", voltages, devices))
    return found


def _device(point: _Point, name: str) -> _Bias | None:
    wanted = name.lower()
    for key, bias in point.devices.items():
        if key.lower() == wanted:
            return bias
    return None


def _mosfets(circuit: Circuit) -> list[tuple[Element, float]]:
    """Each MOSFET with a known card and its polarity (+1 NMOS, −1 PMOS)."""
    found = []
    for element in circuit.elements_of("mosfet"):
        card = circuit.model(element.model or "")
        if card is not None and card.type.lower() in ("nmos", "pmos") and len(element.nodes) == 4:
            found.append((element, 1.0 if card.type.lower() == "nmos" else -1.0))
    return found


def _instance(circuit: Circuit, element: Element) -> Mos1Instance | None:
    """The level-1 device of `element`, or None for a card of another level (or unusable)."""
    try:
        return mosfet_instance(circuit, element)
    except InstanceError:
        return None


def _at(
    element: Element, code: str, message: str, fix: str, severity: str = "warning", node: int | None = None,
) -> Finding:
    """A finding at `element`'s card (its first line), pointing at its `node`-th node field (1-based)
    when given and the front end keeps where that field was written."""
    return Finding(severity, code, message, element.origin.line, element.name, _node_column(element, node), fix)


def _node_column(element: Element, node: int | None) -> int | None:
    """The 1-based column of the element's `node`-th node field on the card's first line, from the
    fields as written (`Element.written`, `node1`…, where the front end records them); None (the
    card's start) where it does not, or when the field is on a continuation line."""
    if node is None:
        return None
    written = getattr(element, "written", None) or {}
    field = written.get(f"node{node}")
    line, column = getattr(field, "line", None), getattr(field, "column", None)
    return column if line == element.origin.line and isinstance(column, int) else None


def _v(value: float) -> str:
    """A voltage; within VNTOL (1 µV, ngspice's default) of zero it is 0 V."""
    return engineering(value, "V", resolution=1e-6)


def _amperes(value: float) -> str:
    """A current; within ABSTOL (1 pA, ngspice's default) of zero it is 0 A."""
    return engineering(value, "A", resolution=1e-12)


def _names(polarity: float) -> tuple[str, str]:
    """How device-polarity voltages are written: vgs, vds for an NMOS; vsg, vsd for a PMOS."""
    return ("vgs", "vds") if polarity > 0 else ("vsg", "vsd")


def _type(polarity: float) -> str:
    return "NMOS" if polarity > 0 else "PMOS"


def _a(polarity: float) -> str:
    return "an NMOS" if polarity > 0 else "a PMOS"


def _level1_differs(points: list[_Point], name: str, fires: Callable[[_Bias], bool]) -> str:
    """` (the level-1 solver: …)` when the reference is ngspice's and the level-1 solution of the
    same device would not give the same verdict; empty otherwise."""
    if len(points) < 2:
        return ""
    other = _device(points[1], name)
    if other is None or fires(other):
        return ""
    margin = (f", vds − vov = {_v(other.vds - other.vov)}" if other.vds is not None and other.vov is not None
              else "")
    vov = f"vov = {_v(other.vov)}" if other.vov is not None else "no overdrive"
    return f" (the level-1 solver differs: {other.region}, {vov}{margin})"


def _judged(ctx: LintContext, judge: Callable[[LintContext, _Point], list[Finding]]) -> list[Finding]:
    """`judge`'s findings at the reference solution; when ngspice's is the reference and the
    level-1 solution would not give a finding, the finding says so."""
    points = _points(ctx)
    if not points:
        return []
    found = judge(ctx, points[0])
    if len(points) < 2 or not found:
        return found
    also = {(f.code, f.subject) for f in judge(ctx, points[1])}
    return [
        f if (f.code, f.subject) in also else replace(f, message=f"{f.message} (the level-1 solution does not show it)")
        for f in found
    ]


# --- bulk ---------------------------------------------------------------------------------------


def _forward_junction(element: Element, polarity: float, voltages: Mapping[str, float]) -> tuple[str, float]:
    """The more forward-biased bulk junction: (`source` or `drain`, its forward bias in volts)."""
    drain, _, source, bulk = element.nodes
    forward = {
        terminal: polarity * (voltages[bulk] - voltages[node])
        for terminal, node in (("source", source), ("drain", drain))
    }
    terminal = max(forward, key=lambda key: forward[key])
    return terminal, forward[terminal]


def _bulk_forward_at(ctx: LintContext, reference: _Point) -> list[Finding]:
    """An NMOS bulk above its source or drain (PMOS below) at the operating point: a forward-biased
    body junction. An error when it conducts, a warning below that."""
    circuit = ctx.circuit
    rails = rail_voltages(circuit, reference.voltages)
    wrong_rail = wrong_rail_bulks(circuit, reference.voltages, reference.column, ctx.level1)
    found = []
    for element, polarity in _mosfets(circuit):
        drain, _, source, bulk = element.nodes
        terminal, forward = _forward_junction(element, polarity, reference.voltages)
        if forward <= FORWARD_FLOOR:
            continue
        node = source if terminal == "source" else drain
        where = solution_phrase(reference.column)
        message = (
            f"{element.name}'s bulk {bulk} is {_v(reference.voltages[bulk])}, "
            f"{'above' if polarity > 0 else 'below'} its {terminal} {node} at {_v(reference.voltages[node])} {where}: "
            f"the bulk–{terminal} junction is forward biased by {_v(forward)}"
        )
        instance = _instance(circuit, element)
        bias = _device(reference, element.name)
        if instance is not None:
            current, _ = instance.junction(forward, terminal == "drain", 0.0)
            channel = abs(bias.id) if bias is not None and bias.id is not None else 0.0
            conducts = current > max(CONDUCTING_SHARE * channel, CONDUCTING_FLOOR)
            message += f" and carries {engineering(current, 'A')} (the level-1 junction at that bias"
            message += f"; {engineering(channel, 'A')} in the channel)" if channel > CONDUCTING_FLOOR else ")"
        else:
            conducts = forward >= CONDUCTING_VOLTAGE
        if instance is not None:
            message += (
                ": it conducts, a current the bias design does not count on" if conducts
                else ": under 1 % of the channel current, it does not move the bias yet, but it grows tenfold "
                "with each ~60 mV more forward bias (kT/q·ln 10)"
            )
        else:
            message += ": it conducts (a silicon junction does from about 0.5 V)" if conducts else ""
        if element.name in wrong_rail:
            message += (f"; its bulk is on a rail {_a(polarity)} bulk does not belong to "
                        "(as check's `bulk-rail` says)")
        low_or_high = min(rails.values()) if polarity > 0 else max(rails.values())
        rail = next(n for n, v in rails.items() if v == low_or_high)
        fix = (
            f"tie {element.name}'s bulk to its source {source} or to the "
            f"{'most negative' if polarity > 0 else 'most positive'} rail, {rail_name(circuit, rail, low_or_high)}"
        )
        found.append(_at(element, "bulk-forward", message, fix, "error" if conducts else "warning", node=4))
    return found


def _bulk_body_effect_at(ctx: LintContext, reference: _Point) -> list[Finding]:
    """A bulk neither at a rail nor at its source (info): the threshold the level-1 device has at
    the operating point's body bias against the one it has with none."""
    circuit = ctx.circuit
    rails = rail_voltages(circuit, reference.voltages)
    found = []
    for element, polarity in _mosfets(circuit):
        drain, _, source, bulk = element.nodes
        if bulk == source or bulk in rails:
            continue
        instance = _instance(circuit, element)
        if instance is None or instance.model.gamma == 0.0:
            continue
        vbs = polarity * (reference.voltages[bulk] - reference.voltages[source])
        if vbs > FORWARD_FLOOR:
            continue  # bulk-forward says it
        with_bias = threshold(instance.model, vbs)
        without = threshold(instance.model, 0.0)
        shift = with_bias - without
        message = (
            f"{element.name}'s bulk {bulk} is neither at a rail nor at its source {source}: vbs = {_v(vbs)} "
            f"{solution_phrase(reference.column)}, and the body effect (GAMMA = {instance.model.gamma:g}) "
            f"{'raises' if shift >= 0 else 'lowers'} its threshold from {_v(without)} to {_v(with_bias)} "
            f"({'+' if shift >= 0 else '−'}{_v(abs(shift))}); it moves with V({bulk})"
        )
        fix = f"tie the bulk to the source {source} (no body effect) or to a rail (a fixed one), unless this is meant"
        found.append(_at(element, "bulk-body-effect", message, fix, "info", node=4))
    return found


# --- orientation --------------------------------------------------------------------------------


def _drain_source_orientation_at(ctx: LintContext, reference: _Point) -> list[Finding]:
    """An NMOS whose drain sits below its source (a PMOS above) at the operating point, conducting
    with the roles swapped."""
    found = []
    for element, polarity in _mosfets(ctx.circuit):
        drain, gate, source, bulk = element.nodes
        vds = polarity * (reference.voltages[drain] - reference.voltages[source])
        if vds >= -ORIENTATION_FLOOR:
            continue
        bias = _device(reference, element.name)
        if bias is None or bias.region in (None, "cutoff"):
            # Off either way round: the wiring of the channel is not what the solution shows (a
            # current source forcing the node, say: check's current-source-backwards).
            continue
        message = (
            f"{element.name}'s drain {drain} ({_v(reference.voltages[drain])}) is "
            f"{'below' if polarity > 0 else 'above'} its source {source} ({_v(reference.voltages[source])}) "
            f"{solution_phrase(reference.column)}: {_a(polarity)}'s drain is its "
            f"{'higher' if polarity > 0 else 'lower'} channel terminal, so node {drain} works as its source — "
            "drain and source are probably swapped on the card"
        )
        fix = f"exchange the drain and source nodes: `{element.name} {source} {gate} {drain} {bulk} …`"
        found.append(_at(element, "orient-drain-source", message, fix, node=1))
    return found


# --- operating point ----------------------------------------------------------------------------


def _on_node(circuit: Circuit, node: str, kinds: set[str], skip: Element) -> list[Element]:
    return [e for e in circuit.elements if e is not skip and e.kind in kinds and node in e.nodes[:2]]


def _amplifier_reasons(circuit: Circuit, element: Element, rails: Mapping[str, float]) -> list[str]:
    """What makes `element`'s stage one built to amplify: a resistor on its drain, a resistor on its
    source (not itself a rail), a signal source with an AC spec. Empty for a diode-connected device."""
    drain, gate, source, _ = element.nodes
    if drain == gate:
        return []
    reasons = []
    for resistor in _on_node(circuit, drain, {"resistor"}, element):
        if gate not in resistor.nodes[:2] and drain not in rails:
            reasons.append(f"{resistor.name} on its drain {drain}")
            break
    if source not in rails:
        for resistor in _on_node(circuit, source, {"resistor"}, element):
            reasons.append(f"{resistor.name} on its source {source}")
            break
    for signal in circuit.elements:
        if signal.kind in ("vsource", "isource") and signal.params.get("ac_mag"):
            reasons.append(f"{signal.name}'s AC spec")
            break
    return reasons


def _drain_resistor_limit(
    ctx: LintContext, element: Element, polarity: float, voltages: Mapping[str, float], rails: Mapping[str, float],
) -> tuple[Element, float] | None:
    """The classic resistor-loaded stage: one resistor from a rail to the drain, the source on a
    rail and the gate held by rails and resistors to rails only (so the drain does not move it).
    Then the largest drain resistor that leaves vds − vov = saturation margin at the same gate bias,
    from the level-1 device's current there; None for any other stage."""
    drain, gate, source, bulk = element.nodes
    circuit = ctx.circuit
    if source not in rails or drain in rails or bulk not in rails | {source: 0.0}:
        return None
    on_drain = [e for e in circuit.elements if e is not element and drain in e.nodes and e.kind != "capacitor"]
    if len(on_drain) != 1 or on_drain[0].kind != "resistor" or not on_drain[0].value:
        return None
    resistor = on_drain[0]
    far = resistor.nodes[1] if resistor.nodes[0] == drain else resistor.nodes[0]
    if far not in rails:
        return None
    if gate not in rails:
        on_gate = [e for e in circuit.elements if e is not element and gate in e.nodes and e.kind != "capacitor"]
        if not on_gate or any(
            e.kind != "resistor" or any(n not in rails and n != gate for n in e.nodes[:2]) for e in on_gate
        ):
            return None
    instance = _instance(circuit, element)
    if instance is None:
        return None
    vg, vs, vb = voltages[gate], voltages[source], voltages[bulk]
    vov = instance.evaluate(vs, vg, vs, vb).vov
    if vov <= 0.0:
        return None
    target = vs + polarity * (vov + ctx.settings.saturation_margin)
    current = abs(instance.evaluate(target, vg, vs, vb).id)
    room = polarity * (voltages[far] - target)
    if current <= 0.0 or room <= 0.0:
        return None
    return resistor, room / current


def op_region(ctx: LintContext) -> list[Finding]:
    """A device in triode or cutoff in a stage built to amplify (a drain or source resistor, a
    signal source with an AC spec: the message says which)."""
    points = _points(ctx)
    if not points:
        return []
    reference = points[0]
    rails = rail_voltages(ctx.circuit, reference.voltages)
    found = []
    for element, polarity in _mosfets(ctx.circuit):
        bias = _device(reference, element.name)
        if bias is None or bias.region not in ("triode", "cutoff") or bias.vds is None or bias.vds < 0:
            continue
        reasons = _amplifier_reasons(ctx.circuit, element, rails)
        if not reasons:
            continue
        built = ", ".join(reasons)
        vgs, vds = _names(polarity)
        where = solution_phrase(reference.column)
        other = _level1_differs(points, element.name, lambda other, region=bias.region: other.region == region)
        if bias.region == "cutoff":
            message = (
                f"{element.name} is in cutoff {where} ({vgs} = {_v(bias.vgs)}, vth = {_v(bias.vth)}): no channel "
                f"current, gm = 0, in a stage built to amplify ({built}){other}"
            )
            fix = f"raise {element.name}'s gate–source bias above its threshold {_v(bias.vth)} (the gate network)"
        else:
            margin = bias.vds - bias.vov
            message = (
                f"{element.name} is in triode {where}: {vds} = {_v(bias.vds)} is below vov = {_v(bias.vov)} "
                f"({vds} − vov = {_v(margin)}), in a stage built to amplify ({built}){other}"
            )
            fix = _margin_fix(ctx, element, polarity, reference.voltages, rails)
        found.append(_at(element, f"op-{bias.region}", message, fix))
    return found


def _margin_fix(
    ctx: LintContext, element: Element, polarity: float, voltages: Mapping[str, float], rails: Mapping[str, float],
) -> str:
    limit = _drain_resistor_limit(ctx, element, polarity, voltages, rails)
    margin = _v(ctx.settings.saturation_margin)
    if limit is not None:
        resistor, most = limit
        return (f"lower {resistor.name} to at most {engineering(most, 'Ω')} (vds − vov = {margin} at the same gate "
                "bias, level-1 device)")
    return f"give {element.name} more drain–source voltage (a smaller drain-side drop) or less overdrive, " \
           f"for vds − vov ≥ {margin}"


def op_saturation_margin(ctx: LintContext) -> list[Finding]:
    """In saturation, but with vds − vov below ``settings.saturation_margin``: a little signal swing
    or a spread of the parts puts it in triode. Diode-connected devices (vds = vgs) are skipped."""
    points = _points(ctx)
    if not points:
        return []
    reference = points[0]
    limit = ctx.settings.saturation_margin
    rails = rail_voltages(ctx.circuit, reference.voltages)
    found = []

    def thin(bias: _Bias) -> bool:
        return (bias.region == "saturation" and bias.vov is not None and bias.vds is not None
                and bias.vds >= 0 and bias.vds - bias.vov < limit)

    for element, polarity in _mosfets(ctx.circuit):
        if element.nodes[0] == element.nodes[1]:
            continue
        bias = _device(reference, element.name)
        if bias is None or not thin(bias):
            continue
        assert bias.vds is not None and bias.vov is not None
        other = _level1_differs(points, element.name, thin)
        vds = _names(polarity)[1]
        message = (
            f"{element.name} is in saturation by only {_v(bias.vds - bias.vov)} {solution_phrase(reference.column)} "
            f"({vds} = {_v(bias.vds)}, vov = {_v(bias.vov)}), under the {_v(limit)} margin: a little signal swing or "
            f"part spread puts it in triode{other}"
        )
        fix = _margin_fix(ctx, element, polarity, reference.voltages, rails)
        found.append(_at(element, "op-saturation-margin", message, fix))
    return found


def op_weak_inversion(ctx: LintContext) -> list[Finding]:
    """An overdrive above zero but below ``settings.weak_overdrive``: the device is near weak
    inversion, where the square law (and so the hand analysis and level 1) no longer holds."""
    points = _points(ctx)
    if not points:
        return []
    reference = points[0]
    limit = ctx.settings.weak_overdrive

    def weak(bias: _Bias) -> bool:
        return (bias.vov is not None and bias.region != "cutoff" and bias.vds is not None and bias.vds >= 0
                and 0.0 < bias.vov < limit)

    found = []
    for element, polarity in _mosfets(ctx.circuit):
        bias = _device(reference, element.name)
        if bias is None or not weak(bias):
            continue
        assert bias.vov is not None
        other = _level1_differs(points, element.name, weak)
        vgs = _names(polarity)[0]
        message = (
            f"{element.name}'s overdrive is {_v(bias.vov)} {solution_phrase(reference.column)} "
            f"({vgs} = {_v(bias.vgs)}, vth = {_v(bias.vth)}), under {_v(limit)}: near weak inversion, where the "
            f"drain current grows exponentially with {vgs} and the square law of the hand analysis and of "
            f"level 1 is doubtful{other}"
        )
        fix = f"bias {element.name} with more overdrive (over {_v(limit)}): a higher gate–source voltage or, where a " \
              "current sets the bias, a smaller W/L"
        found.append(_at(element, "op-weak-inversion", message, fix))
    return found


def _op_node_at_rail_at(ctx: LintContext, reference: _Point) -> list[Finding]:
    """A MOSFET's drain or source node (not itself a rail) pinned at a rail: at the rail its own
    resistor goes to while the device is all but off (cutoff, or an overdrive under
    ``settings.weak_overdrive``: next to no current), or at the voltage of the device's other
    channel terminal (no voltage across the device). A node at some other rail's
    voltage is a design choice (a drain at 0 V on split supplies) and is not reported."""
    circuit = ctx.circuit
    voltages = reference.voltages
    rails = rail_voltages(circuit, voltages)
    where = solution_phrase(reference.column)
    found = []
    for element, _ in _mosfets(circuit):
        drain, gate, source, _ = element.nodes
        bias = _device(reference, element.name)
        if drain == gate or bias is None:
            continue
        # A small resistor drops little at a healthy current (a sense resistor): a node by its
        # rail says "no current" only when the device is all but off.
        all_but_off = bias.region == "cutoff" or (bias.vov is not None and bias.vov < ctx.settings.weak_overdrive)
        for role, node, other in (("drain", drain, source), ("source", source, drain)):
            if node in rails:
                continue
            idle = [
                r for r in _on_node(circuit, node, {"resistor"}, element)
                if (far := r.nodes[1] if r.nodes[0] == node else r.nodes[0]) in rails
                and abs(voltages[node] - rails[far]) <= RAIL_TOLERANCE
            ]
            if idle and all_but_off:
                resistor = idle[0]
                far = resistor.nodes[1] if resistor.nodes[0] == node else resistor.nodes[0]
                drop = abs(voltages[node] - rails[far])
                carried = (
                    f"no current flows through it: {element.name} is in cutoff"
                    if bias.region == "cutoff"
                    else f"it and {element.name} carry only {_amperes(drop / resistor.value)}"
                )
                message = (
                    f"{element.name}'s {role} {node} sits within {_v(RAIL_TOLERANCE)} of "
                    f"{rail_name(circuit, far, rails[far])} {where}: "
                    f"{resistor.name} drops {_v(drop)}, {carried}; V({node}) has no room to swing towards that rail"
                )
                fix = (f"bias {element.name} on: more gate–source voltage over its threshold, for a current through "
                       f"{resistor.name} that sets V({node}) away from the rail")
                found.append(_at(element, "op-node-at-rail", message, fix, node=1 if role == "drain" else 3))
                break
            if role == "drain" and other in rails and abs(voltages[node] - voltages[other]) <= RAIL_TOLERANCE:
                if bias.region == "cutoff":
                    continue
                message = (
                    f"{element.name}'s drain {node} is pulled to its source's rail, "
                    f"{rail_name(circuit, other, rails[other])}, {where}: no voltage across the device — it is a "
                    "closed switch (deep triode), not an amplifier"
                )
                fix = f"let {node} rise from the rail: a smaller drain resistor or less gate drive on {element.name}"
                found.append(_at(element, "op-node-at-rail", message, fix, node=1))
    return found


def _op_resistor_power_at(ctx: LintContext, reference: _Point) -> list[Finding]:
    """A resistor dissipating more than ``settings.resistor_rating`` at the operating point (V²/R
    from the solution's node voltages)."""
    rating = ctx.settings.resistor_rating
    found = []
    said = None
    for resistor in ctx.circuit.elements_of("resistor"):
        a, b = resistor.nodes[:2]
        if not resistor.value or resistor.value <= 0 or a not in reference.voltages or b not in reference.voltages:
            continue
        across = reference.voltages[a] - reference.voltages[b]
        power = across * across / resistor.value
        if power <= rating:
            continue
        message = (
            f"{resistor.name} ({engineering(resistor.value, 'Ω')}) dissipates {engineering(power, 'W')} "
            f"{solution_phrase(reference.column)} ({_v(abs(across))} across it, "
            f"{engineering(abs(across) / resistor.value, 'A')}), "
            f"more than the {engineering(rating, 'W')} a small resistor is rated for"
        )
        fix = (f"use a part rated for at least {engineering(DERATING * power, 'W')} (twice the dissipation), or "
               f"lower the current through {resistor.name}")
        # The classic slip, said here unless `scale-milli-meant-meg` says it of this resistor already.
        writing = mega_written_as_milli(resistor)
        if writing is not None:
            said = meant_as_mega(ctx.circuit) if said is None else said
            if resistor.name not in said:
                message += (f"; `{writing[0]}` is {engineering(resistor.value, 'Ω')} in SPICE "
                            "(`M` is milli, mega is `MEG`)")
                fix = f"if mega was meant, write `{writing[1]}`; otherwise {fix}"
        found.append(_at(resistor, "op-resistor-power", message, fix))
    return found


# --- the rules, each judged at the reference solution -------------------------------------------


def bulk_forward(ctx: LintContext) -> list[Finding]:
    """An NMOS bulk above its source or drain (PMOS below) at the operating point: a forward-biased
    body junction. An error when it conducts, a warning below that."""
    return _judged(ctx, _bulk_forward_at)


def bulk_body_effect(ctx: LintContext) -> list[Finding]:
    """A bulk neither at a rail nor at its source (info): the threshold the level-1 device has at
    the operating point's body bias against the one it has with none."""
    return _judged(ctx, _bulk_body_effect_at)


def drain_source_orientation(ctx: LintContext) -> list[Finding]:
    """An NMOS whose drain sits below its source (a PMOS above) at the operating point, conducting
    with the roles swapped."""
    return _judged(ctx, _drain_source_orientation_at)


def op_node_at_rail(ctx: LintContext) -> list[Finding]:
    """A MOSFET's drain or source node (not itself a rail) pinned at a rail: at the rail its own
    resistor goes to while the device is all but off (cutoff, or an overdrive under
    ``settings.weak_overdrive``: next to no current), or at the voltage of the device's other
    channel terminal (no voltage across the device). A node at some other rail's
    voltage is a design choice (a drain at 0 V on split supplies) and is not reported."""
    return _judged(ctx, _op_node_at_rail_at)


def op_resistor_power(ctx: LintContext) -> list[Finding]:
    """A resistor dissipating more than ``settings.resistor_rating`` at the operating point (V²/R
    from the solution's node voltages)."""
    return _judged(ctx, _op_resistor_power_at)


RULES: tuple[Rule, ...] = (
    bulk_forward,
    bulk_body_effect,
    drain_source_orientation,
    op_region,
    op_saturation_margin,
    op_weak_inversion,
    op_node_at_rail,
    op_resistor_power,
)
