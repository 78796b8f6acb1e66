"""Comparison: hand, level-1 and ngspice side by side, the findings, and their causes.

Takes solutions that were computed elsewhere and only measures their differences:
per node and per transistor quantity, each column against the simulator (or, without
one, hand against the level-1 solver), every region disagreement, and the level-1/ngspice
agreement that says whether our own solver and ngspice see the same model. The
attribution re-solves the hand model with one effect switched on at a time.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import field

from .analysis.dcsolve import OperatingPoint, level1_model
from .analysis.hand import HandSolution
from .netlist.circuit import Circuit
from .netlist.numbers import ABSTOL, GMIN, VNTOL, engineering
from .records import record
from .sim.operating_point import SimOperatingPoint
from .vocabulary import (
    BEYOND_LEVEL1,
    BEYOND_LEVEL1_NAME,
    COLUMN_NAMES,
    COLUMN_TITLES,
    COLUMNS,
    DEVICE_QUANTITIES,
    EFFECT_NAMES,
    EFFECTS,
    SAT_MARGIN,
    UNITS,
    Expectation,
    Expectations,
    Finding,
)

# Absolute floors beside the relative tolerance: a value passes when within the relative
# tolerance of the reference OR within the floor, so near-zero values are not flagged for
# picoamp or microvolt noise (common practice, no source): voltages, currents, conductances.
HAND_FLOOR = {"V": 5e-3, "A": 1e-9, "S": 1e-8}
# ... as every message and the legend write them (formatted once, not in every finding).
HAND_FLOOR_TEXT = {unit: engineering(floor, unit) for unit, floor in HAND_FLOOR.items()}
# Our level-1 solver and ngspice solve the same equations; ngspice stops at RELTOL = 1e-3
# (ngspice manual, .options), so agreement to 0.2 % on currents and 1 mV on voltages is the bar.
SOLVER_RELATIVE = 2e-3
SOLVER_FLOOR = {"V": 1e-3, "A": 1e-12, "S": 1e-12}
DEFAULT_TOLERANCE = 0.05
# A device outside saturation: the columns may agree, but the stage does not amplify.
NOT_AMPLIFYING = "not-amplifying"


@record(frozen=True, eq=False)
class Columns:
    """One quantity in each column (None where a column has no value)."""

    hand: float | None
    level1: float | None
    sim: float | None
    expect: float | None = None
    flagged: tuple[str, ...] = ()  # columns that disagree with the reference
    compared: tuple[str, ...] = ()  # columns that were compared with the reference (flagged or not)
    resolution: float = 0.0  # |value| up to this is zero at the solver's resolution (see _resolutions)

    def get(self, column: str) -> float | None:
        return getattr(self, column)


@record(frozen=True, eq=False)
class DeviceComparison:
    """One transistor in a check: its region and quantities in the three columns."""

    name: str
    type: str
    model: str
    line: int
    region: dict[str, str | None]
    quantities: dict[str, Columns]
    attribution: dict[str, float]
    expect_region: str | None = None
    # The region row as the quantities' rows: the columns whose region differs from the
    # reference column's, and those compared with it (flagged or not); see ``_region_flags``.
    region_flagged: tuple[str, ...] = ()
    region_compared: tuple[str, ...] = ()
    reference_column: str = "sim"  # the column the others are judged against: ngspice, else level-1


@record(frozen=True, eq=False)
class FittedEquivalent:
    """A device's level-1 equivalent of its card, fitted around ngspice's operating point (device
    polarity: VTO positive for an enhancement device), and how well it fits there."""

    device: str
    model: str  # the card's name
    level: int
    card: str  # the equivalent's name
    vto: float
    kp: float
    lambda_: float
    w: float
    l: float  # noqa: E741
    temperature: float  # °C
    vbs: float
    around: tuple[float, float]  # ngspice's (vgs, vds)
    rms_around: float
    at_point: float
    error: float  # the larger of the two: the KP scaling the level-1 column's allowance comes from
    points_used: int
    below_floor: bool = False  # ngspice's id there is below the fit's floor: weak inversion, no square law
    swapped: bool = False  # runs with drain and source swapped: `around` and `vbs` seen from the drain terminal


@record(frozen=True, eq=False)
class FittedTolerance:
    """What ``compare`` needs when hand and level-1 run on fitted equivalents: the equivalents by
    device, and per quantity (`V(d)`, `M1 id`) the absolute allowance of the level-1 column beyond
    0.2 % (see ``check.equivalent_columns``)."""

    equivalents: Mapping[str, FittedEquivalent]
    allowance: Mapping[str, float]


# Quantities of a device on a fitted equivalent that the level-1 column does not compare: the
# equivalent's threshold, overdrive and conductances are not the card's.
NOT_COMPARED_FITTED = frozenset({"vth", "vov", "gm", "gds"})


@record(frozen=True, eq=False)
class CheckResult:
    """Everything one check found for one netlist: the columns, the findings, the working."""

    file: str
    title: str
    simulator: tuple[str, str] | None
    topology: str
    closed_form: bool
    nodes: dict[str, Columns]
    devices: dict[str, DeviceComparison]
    findings: tuple[Finding, ...]
    steps: tuple = ()
    has_expect: bool = False
    supplies: dict = field(default_factory=dict)  # name → bias_rules.Supply: current and power per column
    tolerance: float = DEFAULT_TOLERANCE  # the relative tolerance of the hand column
    # Per effect (``vocabulary.EFFECTS``), what it settles switched on alone in the hand model: see ``Settled``.
    settled_by: dict = field(default_factory=dict)  # effect → Settled
    fitted: FittedTolerance | None = None  # hand and level-1 on fitted equivalents of non-level-1 cards

    @property
    def agree(self) -> bool:
        """The columns agree: no error or warning but the not-amplifying one (which is about the
        circuit, not about the columns)."""
        return not any(f.severity in {"error", "warning"} and f.code != NOT_AMPLIFYING for f in self.findings)

    @property
    def amplifies(self) -> bool:
        """No device that should amplify sits outside saturation (see ``_not_amplifying``)."""
        return not any(f.code == NOT_AMPLIFYING for f in self.findings)


def _differs(value: float | None, reference: float | None, relative: float, floor: float) -> bool:
    """Beyond the relative tolerance AND beyond the absolute floor: a value passes when within
    either. Near zero the floor decides, so a reference at the solver's resolution (where a
    relative difference means nothing) is compared absolutely."""
    if value is None or reference is None:
        return False
    difference = abs(value - reference)
    # A difference of exactly the tolerance passes: 0.95 against 1 is 5 % (its float is 5.000000000000004 %).
    return difference > relative * abs(reference) * (1 + _FLOAT_SLACK) and difference > floor


_FLOAT_SLACK = 1e-9  # relative: far below any tolerance, far above a subtraction's rounding


def _resolutions(circuit: Circuit) -> dict[str, float]:
    """Per unit, what a solved value can be and still be zero at the solver's resolution: VNTOL,
    ABSTOL and, for conductances, GMIN, as the netlist's `.options` set them or ngspice's defaults
    (ngspice manual, section 15.1.2). A drain current adds its GMIN leakage (``_drain_resolution``)."""
    options = circuit.options()

    def option(name: str, default: float) -> float:
        value = options.get(name)
        return float(value) if isinstance(value, (int, float)) and value >= 0 else default

    return {"V": option("vntol", VNTOL), "A": option("abstol", ABSTOL), "S": option("gmin", GMIN)}


def _drain_resolution(element, resolution: Mapping[str, float], voltages: Mapping[str, float]) -> dict[str, float]:
    """`resolution` with the current's widened by the GMIN leakage of the drain–bulk junction: ngspice's
    id is the channel current less that junction's, which carries GMIN × V(drain, bulk) even in cutoff."""
    drain, _, _, bulk = element.nodes
    bias = abs(voltages.get(drain, 0.0) - voltages.get(bulk, 0.0))
    return {**resolution, "A": resolution["A"] + resolution["S"] * (bias if math.isfinite(bias) else 0.0)}


def _relative_change(value: float, reference: float) -> float:
    if reference == 0:
        return 0.0 if value == 0 else math.copysign(math.inf, value)
    return (value - reference) / abs(reference)


def _percent(change: float) -> str:
    """A relative difference as every percentage in the report is: (other − reference)/|reference|;
    from a million per cent on, in three significant digits with an exponent (not 300 of them)."""
    if not math.isfinite(change):
        return "from zero"
    return f"{change * 100:+.1f} %" if abs(change) < 1e4 else f"{change * 100:+.3g} %"


def compare(
    circuit: Circuit,
    hand: HandSolution,
    level1: OperatingPoint | None,
    sim: SimOperatingPoint | None,
    *,
    simulator: tuple[str, str] | None = None,
    tolerance: float = DEFAULT_TOLERANCE,
    with_effect: Mapping[str, HandSolution] | None = None,
    expect: Expectations | None = None,
    findings: tuple[Finding, ...] = (),
    converged: SimOperatingPoint | None = None,
    fitted: FittedTolerance | None = None,
    supplies: dict | None = None,
) -> CheckResult:
    """Lay the columns side by side and flag what disagrees.

    `converged` is ngspice re-run at a tight RELTOL: when given, the level-1 column is judged
    against it instead of `sim` (the ngspice column still shows what ngspice answered).

    `with_effect[effect]` is the hand model re-solved with that effect switched on (one
    solution per circuit, read by every transistor); `findings`
    carries what the callers already know (a failed simulation, a solver caveat).

    `fitted`: hand and level-1 solved on level-1 equivalents of non-level-1 cards; the level-1
    column is then judged within its allowance, and a fitted device's cause list names the card.

    `supplies`: the supply table (``bias_rules.supplies``) the result carries, when the caller has it.
    """
    found: list[Finding] = list(findings)
    reference_column = "sim" if sim is not None else "level1"
    reference_point = sim if sim is not None else level1
    reference_voltages = reference_point.node_voltages if reference_point else hand.node_voltages
    resolution = _resolutions(circuit)
    nodes: dict[str, Columns] = {}
    for node in ("0",) + circuit.nodes():
        if node == "0":
            continue
        hand_v = hand.node_voltages.get(node)
        level1_v = level1.node_voltages.get(node) if level1 else None
        sim_v = sim.node_voltages.get(node) if sim else None
        solver_v = converged.node_voltages.get(node) if converged else sim_v
        expected = expect.nodes.get(node) if expect else None
        flagged, compared = _flag_columns(
            "V", hand_v, level1_v, sim_v, expected, reference_column, tolerance, found, f"V({node})", None,
            resolution, solver_v, _allowance(fitted, f"V({node})"),
        )
        nodes[node] = Columns(hand_v, level1_v, sim_v, _expect_value(expected), flagged, compared, resolution["V"])

    devices: dict[str, DeviceComparison] = {}
    mosfets = circuit.elements_of("mosfet")
    single = len(mosfets) == 1
    for element in mosfets:
        model = circuit.model(element.model or "")
        mos_type = model.type if model else "nmos"
        hand_device = hand.devices.get(element.name)
        level1_device = level1.devices.get(element.name) if level1 else None
        sim_device = sim.devices.get(element.name) if sim else None
        solver_device = converged.devices.get(element.name) if converged else sim_device
        wanted = (expect.devices.get(element.name.lower(), {}) if expect else {})
        device_resolution = _drain_resolution(element, resolution, reference_voltages)
        on_equivalent = fitted is not None and element.name in fitted.equivalents
        quantities: dict[str, Columns] = {}
        for quantity in DEVICE_QUANTITIES:
            subject, unit = f"{element.name} {quantity}", UNITS[quantity]
            hand_q = getattr(hand_device, quantity) if hand_device else None
            level1_q = getattr(level1_device, quantity) if level1_device else None
            if quantity == "id" and level1 is not None and level1_device is not None:
                # Like ngspice's @m[id]: the channel current less the bulk-drain junction's.
                level1_q = level1.drain_terminal_current(element.name)
            sim_q = getattr(sim_device, quantity) if sim_device else None
            solver_q = getattr(solver_device, quantity) if solver_device else None
            if quantity == "vov":  # vov = vgs − vth in each column, or no value (see _swapped_finding)
                hand_q, level1_q, sim_q, solver_q = _summable_overdrive(
                    (hand_device, level1_device, sim_device, solver_device), (hand_q, level1_q, sim_q, solver_q))
            expected = wanted.get(quantity)
            # The hand model's gds in saturation is 0 by its own assumption (λ = 0): not a finding.
            assumed = quantity == "gds" and hand_device is not None and hand_device.region == "saturation"
            hand_judged = None if assumed else hand_q
            unjudged = on_equivalent and (quantity in NOT_COMPARED_FITTED or (
                quantity == "id" and fitted.equivalents[element.name].below_floor))  # fmt: skip
            flagged, compared = _flag_columns(
                unit, hand_judged, level1_q, sim_q, expected, reference_column, tolerance, found, subject, element,
                device_resolution, solver_q, math.inf if unjudged else _allowance(fitted, subject),
            )
            if unjudged:
                compared = tuple(c for c in compared if c != "level1")
            quantities[quantity] = Columns(
                hand_q, level1_q, sim_q, _expect_value(expected), flagged, compared, device_resolution[unit],
            )
        quantities[SAT_MARGIN] = _sat_margin(quantities, resolution["V"])
        region = {
            "hand": hand_device.region if hand_device else None,
            "level1": level1_device.region if level1_device else None,
            "sim": sim_device.region if sim_device else None,
        }
        reference_region = region[reference_column]
        effect_solutions = with_effect if hand_device and with_effect is not None else {}
        for column in ("hand", "level1") if reference_column == "sim" else ("hand",):
            if region[column] and reference_region and region[column] != reference_region:
                if column == "level1" and on_equivalent:
                    found.append(_equivalent_region_finding(element, region[column], reference_region))
                    continue
                message = (
                    f"{element.name}: the {COLUMN_NAMES[column]} puts it in {region[column]}, "
                    f"{COLUMN_NAMES[reference_column]} in {reference_region}"
                )
                if column == "hand":
                    movers = [
                        EFFECT_NAMES[effect]
                        for effect, solution in effect_solutions.items()
                        if (moved := solution.devices.get(element.name)) is not None
                        and moved.region == reference_region
                    ]
                    if movers:
                        message += f"; {' or '.join(movers)} alone moves the hand model to {reference_region}"
                found.append(
                    Finding(
                        "error" if column == "level1" else "warning",
                        "region-mismatch" if column == "hand" else "solver-region-mismatch",
                        message,
                        element.origin.line,
                        element.name,
                    )
                )
        swapped = _swapped_finding(element, mos_type, {"hand": hand_device, "level1": level1_device,
                                                       "sim": sim_device}, reference_column)
        if swapped is not None:
            found.append(swapped)
        expected_region = wanted.get("region")
        if expected_region is not None and reference_region and str(expected_region.value) != reference_region:
            found.append(
                Finding(
                    "warning", "expect-region",
                    f"{element.name}: expected {expected_region.value}, {COLUMN_NAMES[reference_column]} says "
                    f"{reference_region}{_expect_place(expected_region)}",
                    element.origin.line, element.name,
                )
            )
        reference_device = sim_device if reference_column == "sim" else level1_device
        if not_amplifying := _not_amplifying(element, reference_region, quantities, reference_column, single):
            found.append(not_amplifying)
        gamma = model.params.get("gamma", 0.0) if model is not None else 0.0
        if (
            "hand" in quantities["vth"].flagged
            and reference_device is not None
            and gamma > 0
            and abs(_body_bias(reference_device)) > 1e-6
        ):
            found.append(_body_effect_cause(element, gamma, quantities["vth"], reference_column, reference_device,
                                            level1))
        effects = _attribute(element.name, hand, effect_solutions)
        if on_equivalent:
            effects = _with_beyond_level1(effects, hand_device, level1_device and quantities["id"].level1,
                                          quantities["id"].sim)  # fmt: skip
        if hand_device and (sim_device or level1_device):
            _explain(element.name, element.origin.line, quantities["id"],
                     _acting(effects, element, model, reference_device), reference_column, found)
        expect_region = str(expected_region.value) if expected_region else None
        devices[element.name] = DeviceComparison(
            element.name, mos_type, element.model or "", element.origin.line, region, quantities, effects,
            expect_region, *_region_flags(region, expect_region, reference_column, on_equivalent),
            reference_column,
        )
    return CheckResult(
        file=circuit.source_file,
        title=circuit.title,
        simulator=simulator,
        topology=hand.topology,
        closed_form=hand.closed_form,
        nodes=nodes,
        devices=devices,
        findings=tuple(found),
        steps=hand.steps,  # written when a view reads it (hand_working.Written)
        has_expect=expect is not None,
        supplies={} if supplies is None else supplies,
        tolerance=tolerance,
        settled_by=_settled_by(circuit, hand, with_effect, nodes, devices, tolerance),
        fitted=fitted,
    )


def _region_flags(
    region: Mapping[str, str | None], expect_region: str | None, reference_column: str, fitted: bool = False,
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The columns (and the designer's expected region) whose region differs from the reference
    column's, and every one compared with it: as the region findings judge them."""
    reference = region.get(reference_column)
    if reference is None:
        return (), ()
    values = {**region, "expect": expect_region}
    compared = tuple(column for column, value in values.items() if value is not None and column != reference_column
                     and not (fitted and column == "level1"))  # an equivalent's: see _equivalent_region_finding
    return tuple(column for column in compared if values[column] != reference), compared


def _expect_place(expected: Expectation) -> str:
    """Where a target was written: finding lines refer to the netlist, so the TOML line goes in the text."""
    return f" (expect file line {expected.line})" if expected.line else ""


def _expect_value(expected: Expectation | None) -> float | None:
    return expected.value if expected is not None and isinstance(expected.value, float) else None


def _flag_columns(
    unit: str,
    hand_v: float | None,
    level1_v: float | None,
    sim_v: float | None,
    expected: Expectation | None,
    reference_column: str,
    tolerance: float,
    found: list[Finding],
    subject: str,
    element,
    resolutions: Mapping[str, float],
    solver_v: float | None,
    allowance: float | None = None,
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The columns that differ from the reference (each with its finding, added to `found`) and
    those compared with it, flagged or not (the ones with a value to compare).

    `solver_v`: ngspice's value the level-1 column is judged against (`sim_v`, or a re-run's);
    `allowance`: with fitted equivalents, how far beyond 0.2 % their fit error lets it be."""
    reference = sim_v if reference_column == "sim" else level1_v
    line = element.origin.line if element is not None else None
    name = element.name if element is not None else subject
    resolution = resolutions[unit]
    flagged: list[str] = []
    if _differs(hand_v, reference, tolerance, HAND_FLOOR[unit]):
        flagged.append("hand")
        found.append(
            Finding(
                "warning", "hand-differs",
                f"{subject}: hand {engineering(hand_v, unit, resolution=resolution)} vs "
                f"{COLUMN_NAMES[reference_column]} {engineering(reference, unit, resolution=resolution)} "
                f"({_difference(hand_v, reference, resolution, unit)}; tolerance {tolerance * 100:g} % or "
                f"{HAND_FLOOR_TEXT[unit]})",
                line, name, quantity=subject,
            )
        )
    if allowance is not None:
        if reference_column == "sim" and _differs(
            level1_v, solver_v, SOLVER_RELATIVE, max(SOLVER_FLOOR[unit], resolution) + allowance
        ):
            flagged.append("level1")
            found.append(_equivalent_differs(subject, line, name, unit, level1_v, sim_v, allowance, resolution))
    elif reference_column == "sim" and _differs(
        level1_v, solver_v, SOLVER_RELATIVE, max(SOLVER_FLOOR[unit], resolution)
    ):
        flagged.append("level1")
        found.append(
            Finding(
                "error", "solver-differs",
                f"{subject}: level-1 solver {engineering(level1_v, unit, resolution=resolution)} vs ngspice "
                f"{engineering(sim_v, unit, resolution=resolution)} "
                "beyond 0.2 %: a defect of biasbridge's solver or a model feature it does not cover",
                line, name, quantity=subject,
            )
        )
    if (
        expected is not None
        and isinstance(expected.value, float)
        and _differs(reference, expected.value, expected.tolerance, resolution)
    ):
        flagged.append("expect")
        found.append(
            Finding(
                "warning", "expect-differs",
                f"{subject}: expected {engineering(expected.value, unit)} ± {expected.tolerance * 100:g} %, "
                f"{COLUMN_NAMES[reference_column]} gives {engineering(reference, unit, resolution=resolution)}"
                f"{_expect_place(expected)}",
                element.origin.line if element is not None else None, name, quantity=subject,
            )
        )
    if reference is None:
        return tuple(flagged), ()
    compared = ["hand"] if hand_v is not None else []
    if reference_column == "sim" and level1_v is not None:
        compared.append("level1")
    if expected is not None and isinstance(expected.value, float):
        compared.append("expect")
    return tuple(flagged), tuple(compared)


def _difference(value: float, reference: float, resolution: float, unit: str) -> str:
    """How far `value` is from `reference`: relative, (value − reference)/|reference|, or absolute
    when the reference is zero at the solver's resolution (a percentage of it means nothing)."""
    if abs(reference) <= resolution:
        change = value - reference
        return f"{'+' if change > 0 else ''}{engineering(change, unit)} from a value at the solver's resolution"
    return _percent(_relative_change(value, reference))


def _sat_margin(quantities: Mapping[str, Columns], resolution: float) -> Columns:
    """vds − vov in each column: how far the device is inside saturation (negative: triode)."""

    def margin(column: str) -> float | None:
        vds, vov = quantities["vds"].get(column), quantities["vov"].get(column)
        return None if vds is None or vov is None else vds - vov

    return Columns(margin("hand"), margin("level1"), margin("sim"), resolution=resolution)


def _not_amplifying(
    element, region: str | None, quantities: Mapping[str, Columns], reference_column: str, single: bool
) -> Finding | None:
    """A device out of saturation in the reference column: the columns may agree, but the stage is
    not biased to amplify. A diode-connected device (drain on its gate) is a bias element: skipped.
    Only cutoff (gm = 0) is said not to amplify at all, of the stage when it is the only transistor;
    in triode the stage can keep some gain (a common gate, a cascode), so only the facts are given."""
    if region not in ("cutoff", "triode") or element.nodes[0] == element.nodes[1]:
        return None
    source = COLUMN_NAMES[reference_column]

    def shown(quantity: str) -> str:
        columns = quantities[quantity]
        return engineering(columns.get(reference_column), UNITS[quantity], resolution=columns.resolution)

    if region == "cutoff":
        vov = quantities["vov"].get(reference_column)
        overdrive = "" if vov is None else f" (vov = {shown('vov')})"
        message = (f"{element.name}: {source} puts it in cutoff{overdrive}: no channel current, "
                   f"gm = 0 — {'the stage' if single else 'it'} does not amplify")
    else:
        message = (f"{element.name}: {source} puts it in triode (vds − vov = {shown(SAT_MARGIN)}), not "
                   "saturation — the stage is not biased to amplify")
        gm, gds = quantities["gm"].get(reference_column), quantities["gds"].get(reference_column)
        if gm is not None and gds:
            message += f"; its intrinsic gain gm/gds is {gm / gds:.3g}"
    message += " (--allow-region accepts a stage meant to sit there)"
    return Finding("warning", NOT_AMPLIFYING, message, element.origin.line, element.name)


def _attribute(name: str, hand: HandSolution, solutions: Mapping[str, HandSolution]) -> dict[str, float]:
    """Relative change of the hand id that each effect causes on its own, largest first."""
    base = hand.devices.get(name)
    if base is None:
        return {}
    changes: dict[str, float] = {}
    for effect, solution in solutions.items():
        with_effect = solution.devices.get(name)
        if with_effect is not None:
            changes[effect] = _relative_change(with_effect.id, base.id)
    return dict(sorted(changes.items(), key=lambda item: -abs(item[1]) if math.isfinite(item[1]) else -math.inf))


def _explain(
    name: str, line: int, id_columns: Columns, effects: Mapping[str, float], reference_column: str,
    found: list[Finding],
) -> None:
    reference = id_columns.get(reference_column)
    if id_columns.hand is None or reference is None:
        return
    if abs(reference) <= id_columns.resolution:
        return  # the reference is zero at the solver's resolution: no percentage of it means anything
    # Every percentage as the report states it: (other − reference)/|reference|. An effect's change
    # of the hand id (relative to the hand value) is restated as a share of the reference id.
    gap = _relative_change(id_columns.hand, reference)
    if not effects or abs(gap) < 1e-4 or max(abs(id_columns.hand), abs(reference)) < HAND_FLOOR["A"]:
        # Nothing to explain: equal, or both at leakage level (a device in cutoff).
        return
    share = abs(id_columns.hand / reference)
    parts = [f"{_effect_name(effect)} {_percent(change * share)}" for effect, change in effects.items()
             if effect != BEYOND_LEVEL1]  # fmt: skip
    explained = sum(change * share for change in effects.values() if math.isfinite(change))
    message = (
        f"{name}: hand id is {_percent(gap)} from {COLUMN_NAMES[reference_column]}'s; each effect switched on "
        f"alone in the hand model moves it by (of {COLUMN_NAMES[reference_column]}'s id): " + ", ".join(parts)
    )
    if BEYOND_LEVEL1 in effects:
        message = _beyond_level1_cause(message, parts, effects[BEYOND_LEVEL1] * share, id_columns)
    if math.isfinite(gap) and math.isfinite(explained) and abs(gap + explained) > max(0.01, 0.2 * abs(gap)):
        message += f" (together {_percent(explained)}; the rest comes from their interaction or the circuit)"
    found.append(Finding("info", "cause", message, line, name))


def _runs_swapped(device) -> bool:
    """Drain and source work swapped (vds < 0, ngspice's mode −1); False where vds is unknown."""
    return device is not None and device.vds is not None and device.vds < 0


def _body_bias(device) -> float:
    """The bulk's bias against the terminal that acts as source, in device polarity: vbs, or vbd
    when the device runs with drain and source swapped (vds < 0, ngspice's mode −1)."""
    return device.vbs - device.vds if _runs_swapped(device) else device.vbs


def _body_effect_cause(
    element, gamma: float, vth: Columns, reference_column: str, device, level1: OperatingPoint | None,
) -> Finding:
    """What the body effect does to the threshold at this bias, from the sign of the body bias
    and the thresholds themselves: a reverse-biased bulk raises it, a forward-biased one lowers
    it, and a forward-biased junction conducts (its current from the level-1 solver)."""
    body = _body_bias(device)
    terminal = "drain" if _runs_swapped(device) else "source"
    shifted, plain = vth.get(reference_column), vth.hand
    direction = "raises" if shifted is not None and plain is not None and shifted > plain else "lowers"
    state = "reverse" if body < 0 else "forward"
    message = (
        f"{element.name}: the body effect (GAMMA = {gamma:g} √V; the bulk–{terminal} junction {state} biased by "
        f"{engineering(abs(body), 'V')}, vb{terminal[0]} = {body:+.4g} V in device polarity) {direction} the "
        f"threshold to {engineering(shifted, 'V')}; the hand model takes Vt = "
        f"{engineering(plain, 'V')} from VTO"
    )
    if body > 0:
        message += "; a forward-biased junction conducts"
        junction = level1.junctions.get(element.name) if level1 is not None else None
        current = None if junction is None else (junction.bulk_drain if terminal == "drain" else junction.bulk_source)
        if current is not None and current > 0:
            message += f": {engineering(current, 'A')} through it in the level-1 solver"
    return Finding("info", "cause", message, element.origin.line, element.name, effect="gamma")


def _acting(effects: dict[str, float], element, model, reference_device) -> dict[str, float]:
    """Only the effects that can act on this device: LAMBDA when the card gives it one, GAMMA
    when the card gives it one and the bulk is not tied to the terminal acting as source."""
    if model is None:
        return {}
    try:
        # Remembered by the card's names and values (``model.card_model_of``): a card that came
        # from the ahead helper, a new object in every check, is not built again.
        card = level1_model(model)
    except ValueError:
        return effects
    drain, _, source, bulk = element.nodes
    acting_source = drain if _runs_swapped(reference_device) else source
    can_act = {"lambda": card.lambda_ > 0, "gamma": card.gamma > 0 and bulk != acting_source}
    return {effect: change for effect, change in effects.items() if can_act.get(effect, True)}


def _summable_overdrive(devices: tuple, values: tuple) -> tuple:
    """vov where the row adds up (vov = vgs − vth), None in a column whose device runs with
    drain and source swapped: there vgs is the terminal value and vth, vov belong to the gate
    against the drain terminal (ngspice's mode −1)."""
    return tuple(
        None if _runs_swapped(device) else value for device, value in zip(devices, values)
    )


def _swapped_finding(element, mos_type: str, devices: Mapping[str, object], reference_column: str) -> Finding | None:
    """A device wired upside down (drain and source swapped): which terminal acts as source, what
    the table's rows then mean, and the overdrive from that terminal."""
    swapped = [column for column in COLUMNS if _runs_swapped(devices.get(column))]
    if not swapped:
        return None
    device = devices.get(reference_column) if reference_column in swapped else devices[swapped[0]]
    column = reference_column if reference_column in swapped else swapped[0]
    drain, _, source, _ = element.nodes
    titles = COLUMN_TITLES
    higher = "above" if mos_type == "pmos" else "below"
    message = (
        f"{element.name}: drain and source work swapped — its drain node {drain} is {higher} its source node "
        f"{source} (vds = {engineering(device.vds, 'V')} in the {titles[column]} column), so node {drain} acts as "
        f"the {mos_type.upper()}'s source, as ngspice takes it (mode −1). vgs, vds and id are the terminal values "
        f"(id negative), vth, gm, gds and the region those of the swapped device; vov = vgs − vth does not hold "
        f"there, so vov is left empty in the {_listed([titles[c] for c in swapped])} "
        f"column{'s' if len(swapped) > 1 else ''}: the overdrive from node {drain} is vgd − vth (device polarity) = "
        f"{engineering(device.vov, 'V')}. If this is not meant, exchange the drain and source nodes ({drain} and "
        f"{source})"
    )
    return Finding("warning", "swapped-terminals", message, element.origin.line, element.name)


def _listed(words: list[str]) -> str:
    return words[0] if len(words) == 1 else f"{', '.join(words[:-1])} and {words[-1]}"


# --- causes of several differences at once -------------------------------------------------------


@record(frozen=True, eq=False)
class Settled:
    """The hand differences one effect settles on its own: with only that effect switched on in the
    hand model, each of these `quantities` (as ``Finding.quantity`` names them: `V(d)`, `M1 id`),
    of those the hand column is flagged on, is within the hand tolerance of the reference column
    (or, for gds in saturation without λ, not compared, as the plain hand model's), and each of
    these `regions` (device names) is the reference column's region."""

    quantities: tuple[str, ...] = ()
    regions: tuple[str, ...] = ()


def _settled_by(
    circuit: Circuit, hand: HandSolution, with_effect: Mapping[str, HandSolution] | None,
    nodes: Mapping[str, Columns], devices: Mapping[str, DeviceComparison], tolerance: float,
) -> dict[str, Settled]:
    """Per effect, the hand differences its re-solved hand model brings to the reference (see
    ``Settled``), judged by the same rule as the hand column (``_differs``, tolerance or floor).
    Only the quantities flagged in the hand column are judged again: no other can be a difference
    that a cause explains (``cause_groups``)."""
    if not with_effect:
        return {}
    # What each difference is judged against is the same for every effect: looked up once.
    node_references = [
        (node, f"V({node})", columns.sim if columns.sim is not None else columns.level1)
        for node, columns in nodes.items() if "hand" in columns.flagged
    ]
    device_references = [
        (name, device.region.get(device.reference_column), [
            (quantity, f"{name} {quantity}", device.quantities[quantity].get(device.reference_column),
             HAND_FLOOR[UNITS[quantity]])
            for quantity in DEVICE_QUANTITIES if "hand" in device.quantities[quantity].flagged
        ])
        for name, device in devices.items() if hand.devices.get(name) is not None
    ]  # fmt: skip
    settled: dict[str, Settled] = {}
    for effect, solution in with_effect.items():
        quantities: list[str] = []
        regions: list[str] = []
        for node, label, reference in node_references:
            value = solution.node_voltages.get(node)
            if value is not None and reference is not None and not _differs(value, reference, tolerance,
                                                                             HAND_FLOOR["V"]):
                quantities.append(label)
        for name, reference_region, references in device_references:
            moved = solution.devices.get(name)
            if moved is None:
                continue
            if reference_region is not None and moved.region == reference_region:
                regions.append(name)
            swapped = _runs_swapped(moved)
            for quantity, label, reference, floor in references:
                value = None if quantity == "vov" and swapped else getattr(moved, quantity)
                assumed = quantity == "gds" and moved.region == "saturation" and effect != "lambda"
                if assumed or (value is not None and reference is not None
                               and not _differs(value, reference, tolerance, floor)):
                    quantities.append(label)
        settled[effect] = Settled(tuple(quantities), tuple(regions))
    return settled


REGION_CHANGE = "region"  # a cause group led by a device's region disagreement (no effect alone settles it)
HAND_DIFFERS, REGION_MISMATCH, CAUSE = "hand-differs", "region-mismatch", "cause"


@record(frozen=True)
class CauseGroup:
    """Findings (indices into ``CheckResult.findings``) that one cause explains.

    `cause` is an effect of ``vocabulary.EFFECTS`` — switched on alone in the hand model it settles
    every finding in `findings` (see ``Settled``) — or ``REGION_CHANGE``: the hand analysis puts
    device `subject` in another region than the reference and no effect alone moves it there; the
    findings are that device's own hand differences. `stated_by`: the findings that state the
    cause (the devices' `cause` lines; for a region change, its `region-mismatch` finding)."""

    cause: str
    subject: str | None
    stated_by: tuple[int, ...]
    findings: tuple[int, ...]


def cause_groups(result: CheckResult) -> tuple[CauseGroup, ...]:
    """The hand differences of `result` grouped by the cause that explains them, from the data the
    comparison holds (``CheckResult.settled_by``), never from the findings' text.

    Each finding is in one group at most: a hand difference that several effects settle goes to the
    effect that settles the most findings (``EFFECTS`` order on a tie). A group holds at least one
    explained finding. Effect groups come first, largest first; then region changes, in device order.
    """
    findings = result.findings
    explainable = {
        index: finding for index, finding in enumerate(findings)
        if finding.code == HAND_DIFFERS or finding.code == REGION_MISMATCH
    }

    def settles(effect: str, finding: Finding) -> bool:
        settled = result.settled_by.get(effect)
        if settled is None:
            return False
        if finding.code == REGION_MISMATCH:
            return finding.subject in settled.regions
        return finding.quantity in settled.quantities

    reach = {
        effect: [index for index, finding in explainable.items() if settles(effect, finding)]
        for effect in EFFECTS if effect in result.settled_by
    }
    order = sorted(reach, key=lambda effect: (-len(reach[effect]), EFFECTS.index(effect)))
    taken: set[int] = set()
    stated: set[int] = set()
    groups: list[CauseGroup] = []
    for effect in order:
        members = [index for index in reach[effect] if index not in taken]
        if not members:
            continue
        taken.update(members)
        subjects = {findings[index].subject for index in members}
        # A device's cause lines: the one on every effect's share of its id goes with its first
        # group, one that speaks of a single effect (the body effect's) with that effect's group.
        statements = [
            index for index, finding in enumerate(findings)
            if finding.code == CAUSE and finding.subject in subjects and index not in stated
            and finding.effect in (None, effect)
        ]
        stated.update(statements)
        groups.append(CauseGroup(effect, None, tuple(statements), tuple(members)))
    for index, finding in explainable.items():
        if finding.code != REGION_MISMATCH or index in taken:
            continue
        members = [
            other for other, candidate in explainable.items()
            if candidate.code == HAND_DIFFERS and candidate.subject == finding.subject and other not in taken
        ]
        if members:
            taken.update(members)
            taken.add(index)
            groups.append(CauseGroup(REGION_CHANGE, finding.subject, (index,), tuple(members)))
    return tuple(groups)


NO_SIMULATOR = "no-simulator"  # a leading cause: ngspice gave no column (not installed, or it failed)


@record(frozen=True, eq=False)
class LeadingCause:
    """The one cause a one-line summary of a check names (``leading_cause``): an effect of
    ``vocabulary.EFFECTS``, ``REGION_CHANGE`` (with its device as `subject`) or ``NO_SIMULATOR``;
    `explains` the number of findings its group explains (0 when no finding is flagged)."""

    cause: str
    subject: str | None = None
    explains: int = 0


def leading_cause(result: CheckResult) -> LeadingCause | None:
    """The cause that explains the most flagged findings (the first of ``cause_groups``); without
    one, a missing ngspice column; else, when a `cause` finding states the hand id's difference,
    the effect that moves the hand id most on its own (``DeviceComparison.attribution``, largest
    first); else None."""
    groups = cause_groups(result)
    if groups:
        group = groups[0]
        return LeadingCause(group.cause, group.subject, len(group.findings))
    if any(device.region.get("sim") is None for device in result.devices.values()) and any(
        finding.code == NO_SIMULATOR or finding.code.startswith("sim-") and finding.severity == "error"
        for finding in result.findings
    ):
        return LeadingCause(NO_SIMULATOR)
    for name, device in result.devices.items():
        stated = any(finding.code == CAUSE and finding.subject == name for finding in result.findings)
        largest = next((effect for effect, change in device.attribution.items() if change), None)
        if stated and largest is not None:
            return LeadingCause(largest, name)
    return None


def hand_difference(columns: Columns, unit: str = "A") -> str | None:
    """The hand value's difference from ngspice's as the findings state it (a percentage, or an
    absolute difference from a value at the solver's resolution); None without both values."""
    if columns.hand is None or columns.sim is None:
        return None
    return _difference(columns.hand, columns.sim, columns.resolution, unit)


def _allowance(fitted: FittedTolerance | None, subject: str) -> float | None:
    """The level-1 column's allowance for `subject` on fitted equivalents (None without them)."""
    if fitted is None:
        return None
    return fitted.allowance.get(subject, math.inf)


def _equivalent_differs(
    subject: str, line: int | None, name: str, unit: str, level1_v: float, sim_v: float | None, allowance: float,
    resolution: float,
) -> Finding:  # fmt: skip
    """A level-1 value on fitted equivalents beyond what their fit error allows."""
    return Finding(
        "error", "solver-differs",
        f"{subject}: level-1 solver {engineering(level1_v, unit, resolution=resolution)} vs ngspice "
        f"{engineering(sim_v, unit, resolution=resolution)} beyond 0.2 % plus {engineering(allowance, unit)} (what "
        "the fitted equivalents' error around the operating point allows): the equivalent departs from the card "
        "more than its fit says, or a defect of biasbridge's solver",
        line, name, quantity=subject,
    )  # fmt: skip


def _equivalent_region_finding(element, level1_region: str, sim_region: str) -> Finding:
    """The level-1 equivalent's region differs from ngspice's: each is judged from its own model's
    threshold (the equivalent's VTO, the card's vth), so this says where the device sits, not that
    the solver is wrong (its currents and voltages are judged on their own)."""
    return Finding(
        "info", "equivalent-region",
        f"{element.name}: the level-1 solver on the fitted equivalent puts it in {level1_region}, ngspice on the "
        f"card in {sim_region}: each judges the region from its own model's threshold (the equivalent's VTO, "
        "the card's vth); the level-1 region is not compared",
        element.origin.line, element.name,
    )  # fmt: skip


def _with_beyond_level1(
    effects: dict[str, float], hand_device, level1_id: float | None, sim_id: float | None
) -> dict[str, float]:
    """`effects` with the card's own share: the move from the level-1 equivalent's id to ngspice's
    (on the card), as a change of the hand id like the others; largest first."""
    if hand_device is None or level1_id is None or sim_id is None or hand_device.id == 0:
        return effects
    changes = {**effects, BEYOND_LEVEL1: (sim_id - level1_id) / abs(hand_device.id)}
    return dict(sorted(changes.items(), key=lambda item: -abs(item[1]) if math.isfinite(item[1]) else -math.inf))


def _effect_name(effect: str) -> str:
    return BEYOND_LEVEL1_NAME if effect == BEYOND_LEVEL1 else EFFECT_NAMES.get(effect, effect)


def _beyond_level1_cause(message: str, parts: list[str], change: float, id_columns: Columns) -> str:
    """The cause line of a device on a fitted equivalent: the hand model's own effects, then the
    card's share (ngspice on the card against the level-1 column on its equivalent)."""
    if not parts:
        message = message.split("; each effect")[0] + "; the hand model has no effect to switch on"
    message += f"; {BEYOND_LEVEL1_NAME} {_percent(change)}"
    if "hand" in id_columns.flagged and "level1" not in id_columns.flagged:
        message += (" — the level-1 equivalent agrees with ngspice within its fit's error while the hand differs: "
                    "its difference is the card's behaviour that the square law with VTO and KP alone leaves out")
    return message
