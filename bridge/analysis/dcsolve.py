"""DC operating point of a Circuit: modified nodal analysis solved by Newton–Raphson, as ngspice's op.

    solve_operating_point(circuit) -> OperatingPoint
    solve_dc_sweep(circuit, "VIN", values) -> list[OperatingPoint]

What is solved, stated once:

* Resistors are conductances, capacitors open, inductors 0 V branches. Independent V sources and
  E/H sources carry their branch current as an unknown; I, G and F sources inject current. SPICE
  signs throughout: a source's current flows from n+ through the source to n−.
* Diodes: Shockley (IS·AREA·M, emission coefficient N) with ngspice's reverse-bias form below
  −3·N·Vt and GMIN in parallel. RS, BV and the rest are not modelled; a card that gives them is
  listed in the caveats.
* MOSFETs: the level-1 equations of ``bridge.devices.mos1`` (one Level1Model per card), plus the
  bulk–drain and bulk–source junction diodes with GMIN in parallel that ngspice's mos1 places, so
  cutoff leakage and floating-bulk cases come out as ngspice's do. BJTs are refused.
* Newton with ngspice's voltage limiting (DEVfetlim/DEVlimvds on vgs and vds, DEVpnjlim on every
  junction); when plain Newton fails, gmin stepping, then source stepping. Convergence is judged
  by ngspice's criteria (RELTOL, VNTOL, ABSTOL) and then the iteration goes on to 1e-9 relative:
  the answer is the model's own solution, not merely one within ngspice's tolerance of it.
* Temperature: each device at its own temperature (``Circuit.device_temperature``: ``.temp``,
  ``.options temp``, instance TEMP/DTEMP) with its card's TNOM (``.options tnom`` by default): the
  MOSFET through ``Level1Model.at_temperature`` (ngspice's mos1temp.c) with its bulk junctions'
  IS/JS and kT/q at that temperature, the diode's IS and N·kT/q as ngspice's diotemp.c.
* Newton solves only for the unknowns a nonlinear device touches: the linear rest of the MNA system
  is eliminated once per network (``reduction.reduce_network``, a Schur complement) and recovered
  after each solve, so a one-transistor stage iterates on a 2–4 unknown system in plain Python.

Nothing here reads files: the Circuit is the only input. The hand analysis's numerical path
(``compiled_network.HandNetwork``) runs this Newton with the hand device.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import field
from functools import cached_property
from typing import TYPE_CHECKING, NamedTuple

import numpy as np

from bridge.analysis.connectivity import structure_fault
from bridge.analysis.linear import copy_rows, solve_dense, stamp_rows, stamped
from bridge.analysis.reduction import Reduction as _Reduction
from bridge.analysis.reduction import reduce_network as _reduce
from bridge.devices.interface import DcDevice
from bridge.devices.mos1.convergence import vcrit as _vcrit
from bridge.devices.mos1.instance import (
    InstanceError,
    ModelChoice,
    ModelValueError,
    Mos1Instance,
    NotLevel1,
    default_size,
    mosfet_instance,
)
from bridge.devices.mos1.load import Level1Point
from bridge.devices.mos1.model import Level1Model, card_model_of
from bridge.devices.mos1.params import CIRCUIT_TEMPERATURE_C, K_OVER_Q
from bridge.devices.mos1.placed import PlacedMosfet
from bridge.netlist.circuit import GROUND, Circuit, Element, ModelCard
from bridge.records import record, with_fields

if TYPE_CHECKING:
    from bridge.devices.diode import PlacedDiode

__all__ = [
    "BulkJunctions",
    "DcSolveError",
    "InvalidElement",
    "METHODS",
    "NoConvergence",
    "OperatingPoint",
    "SingularCircuit",
    "UnsupportedElement",
    "level1_model",
    "solve_dc_sweep",
    "solve_dc_sweep_arrays",
    "solve_operating_point",
]

# ngspice's defaults (cktinit.c / .options): the convergence criteria and GMIN.
GMIN = 1e-12  # S, in parallel with every junction
RELTOL = 1e-3
VNTOL = 1e-6  # V
ABSTOL = 1e-12  # A
# Where we stop: Newton converges quadratically, so going from RELTOL to this costs an
# iteration or two and leaves no solver error worth speaking of in the answer.
TIGHT_RELTOL = 1e-9
TIGHT_VNTOL = 1e-12  # V
TIGHT_ABSTOL = 1e-15  # A
# Iterations allowed past ngspice's criteria for the tight ones; a node held only by GMIN can
# carry round-off above 1e-9 relative, and then ngspice's criteria are what we can promise.
TIGHTENING_ITERATIONS = 10
MAX_NEWTON_ITERATIONS = 100  # ngspice's ITL1
STEP_ITERATIONS = 50  # ngspice's ITL2-like budget for one gmin or source step
MAX_STEPS = 400  # bound on the sub-solves of one stepping ladder: never hang
GMIN_STEPPING_START = 1e-2  # S from every node to ground at the first gmin step
GMIN_FACTOR = 10.0  # ngspice's gminfactor
SOURCE_STEP_START = 1e-3  # first source-stepping raise, as ngspice's gillespie_src
ZERO_RESISTANCE = 1e-3  # Ω: what ngspice's resistor makes of R = 0
CIRCUIT_TEMPERATURE_K = 300.15
THERMAL_VOLTAGE = K_OVER_Q * CIRCUIT_TEMPERATURE_K  # kT/q at 27 °C, as ngspice computes it

NEWTON = "newton"
GMIN_STEPPING = "gmin stepping"
SOURCE_STEPPING = "source stepping"
METHODS: tuple[str, ...] = (NEWTON, GMIN_STEPPING, SOURCE_STEPPING)

# Kinds whose branch current is an unknown of the MNA system.
_BRANCH_KINDS = ("vsource", "inductor", "vcvs", "ccvs")
# Diode card parameters ngspice uses that this solver does not model.
_DIODE_UNMODELLED = {
    "rs": "series resistance RS",
    "bv": "reverse breakdown BV",
    "ikf": "high-injection knee IKF",
    "isr": "recombination current ISR",
    "jsw": "sidewall saturation current JSW",
    "isw": "sidewall saturation current ISW",
}


class DcSolveError(Exception):
    """Anything that keeps the solver from giving an operating point."""


class UnsupportedElement(DcSolveError):
    """The circuit holds an element this solver does not model (a BJT, a non-level-1 MOSFET)."""

    def __init__(self, element: str, message: str) -> None:
        super().__init__(message)
        self.element = element


class InvalidElement(DcSolveError):
    """An element's values make no sense for a DC solution (missing model, Leff ≤ 0, ...)."""

    def __init__(self, element: str, message: str) -> None:
        super().__init__(message)
        self.element = element


class NoConvergence(DcSolveError):
    """No operating point found; ``methods`` says what was tried, ``iterations`` how hard."""

    def __init__(self, message: str, methods: Sequence[str] = (), iterations: int = 0) -> None:
        super().__init__(message)
        self.methods = tuple(methods)
        self.iterations = iterations


class SingularCircuit(NoConvergence):
    """The MNA matrix is singular by construction: a node with no DC path to ground, or a
    loop of voltage sources. ``nodes`` / ``elements`` name the culprits."""

    def __init__(self, message: str, nodes: Sequence[str] = (), elements: Sequence[str] = ()) -> None:
        super().__init__(message)
        self.nodes = tuple(nodes)
        self.elements = tuple(elements)


class BulkJunctions(NamedTuple):
    """A MOSFET's bulk–drain and bulk–source junction currents (A), GMIN included.

    In device polarity, as ngspice's cbd/cbs: positive when forward biased, flowing from
    the bulk into the drain or source diffusion.
    """

    bulk_drain: float
    bulk_source: float


@record(frozen=True)
class OperatingPoint:
    """One DC solution.

    ``node_voltages`` has every node, ground ``"0"`` included. ``branch_currents`` is keyed by
    the name as written of every voltage source, inductor and E/H source, in SPICE sign: the
    current flowing into n+, through the element, out of n−. ``devices`` holds each MOSFET's
    level-1 point (channel only); ``junctions`` its bulk diodes; ``diode_currents`` the current
    of each diode from anode to cathode. ``method`` is one of ``METHODS``; ``iterations``
    counts every Newton iteration spent, stepping included.
    """

    node_voltages: dict[str, float]
    branch_currents: dict[str, float]
    devices: dict[str, Level1Point]
    method: str
    iterations: int
    caveats: tuple[str, ...] = ()
    junctions: dict[str, BulkJunctions] = field(default_factory=dict)
    diode_currents: dict[str, float] = field(default_factory=dict)

    def voltage(self, node: str) -> float:
        """A node voltage by name, ignoring case (``gnd`` is ground)."""
        key = node.lower()
        return self.node_voltages[GROUND if key == "gnd" else key]

    def device(self, name: str) -> Level1Point:
        """A MOSFET's level-1 point by element name, ignoring case."""
        return self.devices[_lookup(self.devices, name)]

    def current(self, name: str) -> float:
        """A branch current by element name, ignoring case."""
        return self.branch_currents[_lookup(self.branch_currents, name)]

    def drain_terminal_current(self, name: str) -> float:
        """The drain current as ngspice's ``@m[id]`` reports it: channel id minus the
        bulk–drain junction current, in device polarity (positive for a conducting PMOS)."""
        key = _lookup(self.devices, name)
        return self.devices[key].id - self.junctions[key].bulk_drain


def _lookup(table: Mapping[str, object], name: str) -> str:
    if name in table:  # as written: names are unique ignoring case (build refuses duplicates)
        return name
    wanted = name.lower()
    for key in table:
        if key.lower() == wanted:
            return key
    raise KeyError(name)


def level1_model(card: ModelCard) -> Level1Model:
    """The Level1Model ngspice would build from a ``.model`` card (the default model choice);
    ``Level1Model.from_card``, remembered for the last cards (``model.card_model_of``)."""
    return card_model_of(card.type, card.params)



# --- the compiled network -----------------------------------------------------------------


# The nonlinear devices as the network places them (``bridge.devices.interface.DcDevice``).
_Mosfet = PlacedMosfet
if TYPE_CHECKING:  # the diode's modules are imported with the first diode (`_diode`)
    _Diode = PlacedDiode


@record(frozen=True, eq=False)
class _Network:
    """The circuit as MNA arrays: ground is row/column 0 (stamped, then sliced away)."""

    nodes: tuple[str, ...]
    branch_names: tuple[str, ...]
    linear: np.ndarray
    source_columns: np.ndarray
    source_names: tuple[str, ...]
    source_defaults: np.ndarray
    mosfets: tuple[_Mosfet, ...]
    diodes: tuple[_Diode, ...]
    gmin: float
    caveats: tuple[str, ...]
    nodeset: dict[str, float]
    # Nodes shorted into another (the hand's merged nodes: inductors, 0 Ω resistors) → that node.
    merged: dict[str, str] = field(default_factory=dict)
    # Whether Newton works on the reduced system (the Schur complement) or on the whole one: the
    # hand's small networks are solved whole, so that its node voltages keep the precision of one
    # LU of the MNA system (a reduction can leave ~1e-13 relative in a node it recovers).
    eliminate: bool = True

    @property
    def size(self) -> int:
        return 1 + len(self.nodes) + len(self.branch_names)

    @cached_property
    def devices(self) -> tuple[DcDevice, ...]:
        """Every nonlinear device, in the order Newton loads them: the MOSFETs, then the diodes."""
        return (*self.mosfets, *self.diodes)

    @cached_property
    def newton_floors(self) -> tuple[tuple[float, ...], tuple[float, ...]]:
        """The loose and tight absolute tolerances of each unknown (ground first)."""
        node_count, branch_count = len(self.nodes), len(self.branch_names)
        loose = (0.0,) + (VNTOL,) * node_count + (ABSTOL,) * branch_count
        tight = (0.0,) + (TIGHT_VNTOL,) * node_count + (TIGHT_ABSTOL,) * branch_count
        return loose, tight

    @cached_property
    def plain_reduction(self) -> _Reduction:
        """The reduced system without stepped gmin: built once, used by every plain Newton."""
        return _reduce(self, 0.0, eliminate=self.eliminate)

    def with_devices(self, devices: Mapping[str, Mos1Instance]) -> _Network:
        """The same network with the MOSFETs named in `devices` given those instances (another
        model of the same elements); the linear part and its reduction are shared.

        The reduction depends on the linear part and on the unknowns the devices touch, which
        another instance at the same place leaves as they are: it is built here once (if it was
        not yet) and handed on, so that the attribution's re-solves (one network each) share it."""
        # The cached properties that hold for the new devices kept, `devices` (the old ones) dropped.
        return with_fields(self, drop=("devices",), plain_reduction=self.plain_reduction, mosfets=tuple(
            mos.with_device(devices[mos.name]) if mos.name in devices else mos for mos in self.mosfets
        ))  # fmt: skip

    def reduction(self, diagonal_gmin: float) -> _Reduction:
        """The system Newton solves with `diagonal_gmin` from every node to ground (each gmin
        step builds its own, once for all its iterations)."""
        return self.plain_reduction if diagonal_gmin == 0.0 else _reduce(self, diagonal_gmin, eliminate=self.eliminate)

    def source_vector(self, overrides: Mapping[str, float] | None) -> np.ndarray:
        values = self.source_defaults.copy()
        if overrides:
            position = {name.lower(): k for k, name in enumerate(self.source_names)}
            for name, value in overrides.items():
                k = position.get(name.lower())
                if k is None:
                    raise ValueError(f"`{name}` is not an independent source of this circuit")
                values[k] = float(value)
        return values


@record(eq=False)
class _State:
    """Where Newton stands: the solution vector and each device's state (its last limited
    voltages: vgs, vds, vbs, vbd and von of a MOSFET in device polarity, vd of a diode), in the
    order of ``_Network.devices``."""

    x: np.ndarray
    devices: list[list[float]]

    def copy(self) -> _State:
        return _State(self.x.copy(), [row[:] for row in self.devices])


def _number(value: object, what: str, element: Element) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InvalidElement(element.name, f"{element.name}: {what} is not a number ({value!r})")
    return float(value)


def _build_network(
    circuit: Circuit,
    model_choice: ModelChoice,
    hand: tuple[Mapping[str, Mos1Instance], Mapping[str, str]] | None = None,
) -> _Network:
    """Compile the circuit once: linear stamps, source columns and the nonlinear devices.

    `hand` is (instances, merged) for the hand model (``HandNetwork``): each MOSFET placed as the
    instance given for it, and the nodes shorted by inductors and 0 Ω resistors merged (every
    node → the node naming its class) instead of 1 mΩ and 0 V branches.
    """
    caveats: list[str] = []
    options = circuit.options()
    gmin = float(options["gmin"]) if isinstance(options.get("gmin"), (int, float)) else GMIN
    default_w, default_l = default_size(circuit)
    if hand is None:  # a HandNetwork's answer carries no caveats (HandNetwork.solve)
        caveats.extend(_temperature_notes(circuit))
    nodeset: dict[str, float] = {}
    for directive in circuit.directives:
        if directive.kind == "ic" and directive.settings:
            caveats.append("`.ic` ignored: ngspice applies it to a transient's operating point only")
        elif directive.kind == "nodeset":
            nodeset.update({node: float(v) for node, v in directive.settings if isinstance(v, (int, float))})
    if nodeset:
        caveats.append("`.nodeset` used as the starting guess of the Newton iteration")

    for element in circuit.elements:
        if element.kind == "bjt":
            raise UnsupportedElement(
                element.name, f"{element.name}: bipolar transistors are not modelled by this DC solver"
            )
        if element.kind not in {
            "resistor", "capacitor", "inductor", "vsource", "isource",
            "vcvs", "vccs", "cccs", "ccvs", "diode", "mosfet",
        }:  # fmt: skip
            raise UnsupportedElement(
                element.name, f"{element.name}: element kind {element.kind} is not modelled"
            )

    nodes = circuit.nodes()
    index = {GROUND: 0, **{node: k + 1 for k, node in enumerate(nodes)}}
    branch_kinds = _BRANCH_KINDS
    merged: dict[str, str] = {}
    if hand is not None:
        instances, merged = hand[0], {node: root for node, root in hand[1].items() if node != root}
        nodes = tuple(node for node in dict.fromkeys(hand[1].get(n, n) for n in nodes) if node != GROUND)
        index = {GROUND: 0, **{node: k + 1 for k, node in enumerate(nodes)}}
        index.update({node: index[root] for node, root in merged.items()})
        branch_kinds = tuple(kind for kind in _BRANCH_KINDS if kind != "inductor")  # shorts, merged
        nodeset = {}
    branch_elements = [e for e in circuit.elements if e.kind in branch_kinds]
    branch_index = {e.name.lower(): 1 + len(nodes) + k for k, e in enumerate(branch_elements)}
    size = 1 + len(nodes) + len(branch_elements)
    # Stamped in plain floats (numpy's per-element indexing is slow), the same sums in the same order.
    linear = stamp_rows(size)  # dict rows from linear.SPARSE_FROM unknowns on
    sources = [e for e in circuit.elements if e.kind in ("vsource", "isource")]
    source_columns = [[0.0] * len(sources) for _ in range(size)]
    source_column = {e.name: k for k, e in enumerate(sources)}

    def control_branch(element: Element) -> int:
        name = (element.controlling_source or "").lower()
        if name not in branch_index:
            raise InvalidElement(
                element.name,
                f"{element.name}: controlling source `{element.controlling_source}` is not a voltage source",
            )
        return branch_index[name]

    mosfets: list[_Mosfet] = []
    diodes: list[_Diode] = []
    models: dict[tuple[str, float], Level1Model] = {}
    for element in circuit.elements:
        at = [index[node] for node in element.nodes]
        kind = element.kind
        if hand is not None and kind in ("resistor", "inductor") and at[0] == at[1]:
            continue  # a short the hand model merged (or a resistor across one): nothing to stamp
        if kind == "resistor":
            resistance = _resistance(element)
            if resistance == 0.0:
                # ngspice's resistor sets 0 Ω to 1 mΩ (silently); so do we, to agree with it.
                resistance = ZERO_RESISTANCE
                caveats.append(f"{element.name}: 0 Ω taken as {ZERO_RESISTANCE:g} Ω, as ngspice does")
            conductance = 1.0 / resistance
            a, c = at[0], at[1]
            linear[a][a] += conductance
            linear[c][c] += conductance
            linear[a][c] -= conductance
            linear[c][a] -= conductance
        elif kind in branch_kinds:
            k = branch_index[element.name.lower()]
            a, c = at[0], at[1]
            # KCL: the branch current leaves n+ and enters n−; the branch row states the voltage.
            linear[a][k] += 1.0
            linear[c][k] -= 1.0
            linear[k][a] += 1.0
            linear[k][c] -= 1.0
            if kind == "vsource":
                source_columns[k][source_column[element.name]] = 1.0
            elif kind == "vcvs":
                gain = _number(element.value, "gain", element)
                linear[k][at[2]] -= gain
                linear[k][at[3]] += gain
            elif kind == "ccvs":
                linear[k][control_branch(element)] -= _number(element.value, "transresistance", element)
        elif kind == "isource":
            # SPICE: the current leaves n+ into the source and re-enters the circuit at n−.
            column = source_column[element.name]
            source_columns[at[0]][column] -= 1.0
            source_columns[at[1]][column] += 1.0
        elif kind == "vccs":
            gm = _number(element.value, "transconductance", element)
            a, c, p, n = at
            linear[a][p] += gm
            linear[a][n] -= gm
            linear[c][p] -= gm
            linear[c][n] += gm
        elif kind == "cccs":
            gain = _number(element.value, "gain", element)
            k = control_branch(element)
            linear[at[0]][k] += gain
            linear[at[1]][k] -= gain
        elif kind == "diode":
            diodes.append(_diode(element, at, circuit, caveats))
        elif kind == "mosfet" and hand is not None:
            mosfets.append(PlacedMosfet(element.name, at[0], at[1], at[2], at[3], instances[element.name]))
        elif kind == "mosfet":
            mosfets.append(_mosfet(element, at, circuit, models, model_choice, caveats, default_w, default_l))
        # capacitors: open at DC, nothing to stamp

    _check_structure(circuit, circuit.nodes(), channels=hand is not None)
    linear_matrix = stamped(linear, size)
    return _Network(
        nodes=nodes,
        branch_names=tuple(e.name for e in branch_elements),
        linear=linear_matrix,
        source_columns=np.array(source_columns, dtype=float).reshape(size, len(sources)),
        source_names=tuple(e.name for e in sources),
        source_defaults=np.array([float(e.value or 0.0) for e in sources]),
        mosfets=tuple(mosfets),
        diodes=tuple(diodes),
        gmin=gmin,
        caveats=tuple(dict.fromkeys(caveats)),
        nodeset={node: value for node, value in nodeset.items() if node in index},
        merged=merged,
        # The hand's networks whole, but for large ones (stamped sparse), where Newton on the whole
        # system would copy and factor thousands of rows at every iteration.
        eliminate=hand is None or not isinstance(linear_matrix, np.ndarray),
    )


def _resistance(element: Element) -> float:
    value = element.value
    if value is None:
        value = element.params.get("r", element.params.get("resistance"))
    if value is None:
        raise InvalidElement(element.name, f"{element.name}: resistor without a value")
    resistance = _number(value, "resistance", element)
    # M resistors in parallel.
    return resistance / _number(element.params.get("m", 1.0), "M", element)


def _diode(element: Element, at: list[int], circuit: Circuit, caveats: list[str]) -> PlacedDiode:
    from bridge.devices.diode import PlacedDiode, diode_at_temperature

    card = circuit.model(element.model or "")
    if card is None or card.type.lower() != "d":
        raise InvalidElement(element.name, f"{element.name}: no diode model `{element.model}`")
    params = card.params
    if card.level != 1:
        caveats.append(f"model {card.name}: diode LEVEL={card.level} solved with the level-1 equations")
    for key, what in _DIODE_UNMODELLED.items():
        # BV counts whenever given (ngspice then switches breakdown on); the others when non-zero.
        if (key == "bv" and key in params) or params.get(key, 0.0) != 0.0:
            caveats.append(f"model {card.name}: {what} not modelled (ignored by this solver)")
    area = _number(element.params.get("area", 1.0), "AREA", element)
    multiplier = _number(element.params.get("m", 1.0), "M", element)
    try:
        saturation_current, emission_voltage = diode_at_temperature(
            params, circuit.device_temperature(element), circuit.nominal_temperature()
        )
    except ValueError as exc:
        raise InvalidElement(element.name, f"{element.name}: {exc}") from None
    saturation_current *= area * multiplier
    if emission_voltage <= 0.0:
        raise InvalidElement(element.name, f"model {card.name}: emission coefficient N must be positive")
    if "off" in element.flags:
        caveats.append(f"{element.name}: OFF ignored (it only picks the starting point)")
    return PlacedDiode(
        element.name, at[0], at[1], saturation_current, emission_voltage,
        _vcrit(emission_voltage, saturation_current),
    )  # fmt: skip


def _mosfet(
    element: Element,
    at: list[int],
    circuit: Circuit,
    models: dict[tuple[str, float], Level1Model],
    model_choice: ModelChoice,
    caveats: list[str],
    default_w: float,
    default_l: float,
) -> PlacedMosfet:
    # One model per card and device temperature (instances with TEMP/DTEMP may differ).
    known = set(models)
    try:
        device = mosfet_instance(
            circuit, element, model_choice=model_choice, defaults=(default_w, default_l), models=models
        )
    except NotLevel1 as exc:
        raise UnsupportedElement(
            element.name,
            f"{element.name}: model {exc.card.name} is LEVEL={exc.card.level}; this solver has level 1 only",
        ) from None
    except ModelValueError as exc:
        raise InvalidElement(element.name, f"{element.name}: model {exc.card.name}: {exc}") from None
    except InstanceError as exc:
        raise InvalidElement(element.name, f"{element.name}: {exc}") from None
    model, card = device.model, device.card
    if set(models) != known:
        caveats.extend(f"model {card.name}: {caveat}" for caveat in model.caveats)
        if model.unrecognised:
            names = ", ".join(n.upper() for n in model.unrecognised)
            caveats.append(f"model {card.name}: parameters not known to level 1 ignored: {names}")
    if "off" in element.flags:
        caveats.append(f"{element.name}: OFF ignored (it only picks the starting point)")
    return PlacedMosfet(element.name, at[0], at[1], at[2], at[3], device)


def _temperature_notes(circuit: Circuit) -> list[str]:
    """What the reader should know about the temperature the circuit is solved at."""
    notes: list[str] = []
    last = [d for d in circuit.directives if d.kind == "temp" and d.settings][-1:]
    if last and len(last[0].settings) > 1:
        notes.append(
            f"`{' '.join(last[0].text.split())}` gives several temperatures: ngspice sets none of them "
            f"(it warns \"Could not set temperature\") and runs at {CIRCUIT_TEMPERATURE_C:g} °C; so does this solver"
        )
    temperature, nominal = circuit.temperature(), circuit.nominal_temperature()
    devices = [e for e in circuit.elements if e.kind in ("mosfet", "diode")]
    own = [e for e in devices if circuit.device_temperature(e) != temperature]
    cards = [circuit.model(e.model or "") for e in devices]
    card_tnom = any(card is not None and card.params.get("tnom", nominal) != nominal for card in cards)
    if devices and (temperature != CIRCUIT_TEMPERATURE_C or nominal != CIRCUIT_TEMPERATURE_C or own or card_tnom):
        what = []
        if any(e.kind == "mosfet" for e in devices):
            what.append("MOSFET KP, VTO, PHI and bulk-junction IS")
        if any(e.kind == "diode" for e in devices):
            what.append("diode IS")
        exceptions = "".join(f", {e.name} at {circuit.device_temperature(e):g} °C (TEMP/DTEMP)" for e in own)
        notes.append(
            f"solved at {temperature:g} °C{exceptions}, TNOM {nominal:g} °C unless a card gives its own: "
            f"{' and '.join(what)} and kT/q at the device temperature by ngspice's rules"
        )
    return notes


def _check_structure(circuit: Circuit, nodes: tuple[str, ...], *, channels: bool = False) -> None:
    """Refuse a circuit whose matrix is singular by construction, naming the cause
    (``connectivity.structure_fault``; `channels`: the hand device's network)."""
    fault = structure_fault(circuit, nodes, channels=channels)
    if fault is not None:
        raise SingularCircuit(fault.message, nodes=fault.nodes, elements=fault.elements)


# --- Newton ---------------------------------------------------------------------------------


class _Attempt(NamedTuple):  # a named tuple: made once per Newton run, a frozen dataclass costs more
    state: _State | None
    iterations: int
    tight: bool = False
    singular: bool = False


def _settle(net: _Network, x: np.ndarray) -> _State:
    """The device state of a solution vector, so that Newton can continue from it."""
    values = x.tolist()
    return _State(x.copy(), [device.settle(values) for device in net.devices])


def _junction_start(net: _Network, x: np.ndarray | None = None) -> _State:
    """ngspice's MODEINITJCT: devices start at fixed local voltages, not the node guess."""
    return _State(np.zeros(net.size) if x is None else x.copy(), [device.start() for device in net.devices])


def _newton(
    net: _Network,
    start: _State,
    sources: np.ndarray,
    *,
    diagonal_gmin: float = 0.0,
    max_iterations: int = MAX_NEWTON_ITERATIONS,
    fresh: bool = False,
) -> _Attempt:
    """Newton–Raphson from `start`; `fresh` means the device voltages are MODEINITJCT's guess.

    The first iteration linearises every device at its state voltages unlimited (the guess,
    or the previous solution); later ones limit the new voltages against the last ones.
    Converged means: no junction step clipped, the solution moved by less than the tolerance,
    and every device's linearised current agrees with its current at the new voltages.
    Each iteration solves the reduced system (`_Reduction`) and recovers the other unknowns.
    """
    state = start.copy()
    reduction = net.reduction(diagonal_gmin)
    position = reduction.position
    base_rhs = (reduction.source_map @ sources).tolist()
    recovery = list(zip(reduction.eliminated, (reduction.recover_sources @ sources).tolist(),
                        reduction.recover_kept, strict=True))  # fmt: skip
    kept = reduction.kept
    loose_floor, tight_floor = net.newton_floors
    gmin = net.gmin
    x = state.x.tolist()
    # Every unknown but ground kept, in order (a whole system): the solution is the new vector.
    whole = not recovery and len(kept) == len(x) - 1
    # Per device, what no iteration changes: its state row (updated in place by its load) and
    # the places of its terminals in the reduced system.
    devices = [
        (device, device_state, device.places(position))
        for device, device_state in zip(net.devices, state.devices, strict=True)
    ]
    loose_count = 0
    for iteration in range(1, max_iterations + 1):
        matrix = copy_rows(reduction.matrix)
        rhs = base_rhs[:]
        # As in ngspice, only a clipped junction step (pnjlim's icheck) forbids convergence;
        # fetlim/limvds steps are caught by the device current test instead. That matters for
        # a cut-off device whose gate is driven far negative: its limited vgs lags for many
        # iterations while its current (zero) is already right.
        clipped = False
        first = iteration == 1
        linearised: list[tuple] = []
        for device, device_state, places in devices:
            entry, junction_clipped = device.load(device_state, places, x, first, gmin, matrix, rhs)
            clipped = clipped or junction_clipped
            linearised.append((device, entry))
        solution = solve_dense(matrix, rhs)
        if solution is None:
            return _Attempt(None, iteration, singular=True)
        if not math.isfinite(sum(solution)):  # an inf or nan anywhere makes the sum one
            return _Attempt(None, iteration)
        if whole:
            new = [0.0, *solution]
        else:
            new = [0.0] * len(x)
            for index, value in zip(kept, solution, strict=True):
                new[index] = value
            for index, value, weights in recovery:
                for weight, kept_value in zip(weights, solution):
                    value -= weight * kept_value
                new[index] = value
        # A MODEINITJCT iteration proves nothing: its devices did not sit at the node voltages.
        moved = 0 if (fresh and iteration == 1) or clipped else _settled(new, x, loose_floor, tight_floor)
        if moved:
            loose, tight = _devices_settled(linearised, new, gmin)
            tight = tight and moved == 2
            if tight:
                state.x = np.array(new)
                return _Attempt(state, iteration, tight=True)
            if loose:
                loose_count += 1
                if loose_count > TIGHTENING_ITERATIONS:
                    state.x = np.array(new)
                    return _Attempt(state, iteration, tight=False)
        x = new
    return _Attempt(None, max_iterations)


def _settled(new: list[float], old: list[float], loose: tuple[float, ...], tight: tuple[float, ...]) -> int:
    """How far every unknown has settled: 2 within the tight tolerances (TIGHT_RELTOL of its
    size plus its tight floor), 1 within ngspice's (RELTOL plus VNTOL or ABSTOL), else 0."""
    level = 2
    for a, b, loose_floor, tight_floor in zip(new, old, loose, tight, strict=True):
        change, size_a, size_b = abs(a - b), abs(a), abs(b)
        size = size_a if size_a > size_b else size_b
        if change > RELTOL * size + loose_floor:
            return 0
        if level == 2 and change > TIGHT_RELTOL * size + tight_floor:
            level = 1
    return level


def _devices_settled(linearised: list[tuple[DcDevice, tuple]], x: list[float], gmin: float) -> tuple[bool, bool]:
    """ngspice's device convergence test (MOS1convTest, DIOconvTest), to both tolerances:
    does each linearised current, carried to the new voltages, match the current there?"""
    tight = True
    for device, entry in linearised:
        pairs = device.convergence_pairs(entry, x, gmin)
        for predicted, actual in pairs:
            error, size_p, size_a = abs(predicted - actual), abs(predicted), abs(actual)
            size = size_p if size_p > size_a else size_a
            if error > RELTOL * size + ABSTOL:
                return False, False
            tight = tight and error <= TIGHT_RELTOL * size + TIGHT_ABSTOL
    return True, tight


class _Solved(NamedTuple):
    state: _State
    method: str
    iterations: int
    tight: bool


def _gmin_stepping(net: _Network, start: _State, sources: np.ndarray, fresh: bool) -> tuple[_Attempt, int]:
    """ngspice's dynamic gmin stepping: a conductance from every node to ground, shrunk
    while Newton keeps converging, the step cut back when it does not; then removed."""
    spent = 0
    factor = GMIN_FACTOR
    diagonal = previous = GMIN_STEPPING_START
    # The last stepped value before the conductances go: GMIN, or 1e-12 S when `.options
    # gmin=0` (else the stepping would shrink towards zero without end).
    target = net.gmin if net.gmin > 0.0 else GMIN
    state, saved = start, None
    for _ in range(MAX_STEPS):
        attempt = _newton(net, state, sources, diagonal_gmin=diagonal, max_iterations=STEP_ITERATIONS,
                          fresh=fresh and saved is None)  # fmt: skip
        spent += attempt.iterations
        if attempt.state is not None:
            saved = _settle(net, attempt.state.x)
            state = saved
            if diagonal <= target:
                break
            if attempt.iterations <= STEP_ITERATIONS // 4:
                factor = min(factor * math.sqrt(factor), GMIN_FACTOR)
            if attempt.iterations > 3 * STEP_ITERATIONS // 4:
                factor = math.sqrt(factor)
            previous = diagonal
            if diagonal < factor * target:
                diagonal = target
            else:
                diagonal /= factor
        else:
            if saved is None or factor < 1.00005:
                return _Attempt(None, spent, singular=attempt.singular), spent
            factor = math.sqrt(math.sqrt(factor))
            diagonal = previous / factor
            state = saved
    else:
        return _Attempt(None, spent), spent
    final = _newton(net, state, sources)
    return final, spent + final.iterations


def _source_stepping(net: _Network, start: _State, sources: np.ndarray, fresh: bool) -> tuple[_Attempt, int]:
    """ngspice's source stepping: every independent source scaled from 0 to its value, the
    step grown after easy solves and cut after failures."""
    spent = 0
    attempt = _newton(net, start, sources * 0.0, fresh=fresh)
    spent += attempt.iterations
    if attempt.state is None:
        attempt, used = _gmin_stepping(net, start, sources * 0.0, fresh)
        spent += used
        if attempt.state is None:
            return attempt, spent
    saved = _settle(net, attempt.state.x)
    reached, raise_by = 0.0, SOURCE_STEP_START
    for _ in range(MAX_STEPS):
        scale = min(1.0, reached + raise_by)
        attempt = _newton(net, saved, sources * scale, max_iterations=STEP_ITERATIONS)
        spent += attempt.iterations
        if attempt.state is not None:
            reached = scale
            saved = _settle(net, attempt.state.x)
            if reached >= 1.0:
                return attempt, spent
            if attempt.iterations <= STEP_ITERATIONS // 4:
                raise_by *= 1.5
            if attempt.iterations > 3 * STEP_ITERATIONS // 4:
                raise_by *= 0.5
        else:
            if scale - reached < 1e-8:
                break
            raise_by /= 10.0
    return _Attempt(None, spent), spent


def _solve(net: _Network, sources: np.ndarray, start: _State, fresh: bool, methods: Sequence[str]) -> _Solved:
    """Plain Newton, then gmin stepping, then source stepping, as asked; each bounded."""
    spent = 0
    tried: list[str] = []
    singular = False
    for method in methods:
        tried.append(method)
        if method == NEWTON:
            attempt = _newton(net, start, sources, fresh=fresh)
            spent += attempt.iterations
        elif method == GMIN_STEPPING:
            attempt, used = _gmin_stepping(net, start, sources, fresh)
            spent += used
        elif method == SOURCE_STEPPING:
            attempt, used = _source_stepping(net, start, sources, fresh)
            spent += used
        else:
            raise ValueError(f"unknown method {method!r}; choose from {', '.join(METHODS)}")
        if attempt.state is not None:
            return _Solved(attempt.state, method, spent, attempt.tight)
        singular = singular or attempt.singular
    why = " (the matrix was singular)" if singular else ""
    raise NoConvergence(
        f"no DC operating point found{why}: tried {', '.join(tried) or 'nothing'} "
        f"({spent} Newton iterations in all)",
        methods=tried,
        iterations=spent,
    )


def _operating_point(net: _Network, solved: _Solved, circuit_caveats: Sequence[str]) -> OperatingPoint:
    x = solved.state.x.tolist()
    node_voltages = {GROUND: 0.0}
    node_voltages.update(zip(net.nodes, x[1:]))
    node_voltages.update({node: node_voltages[root] for node, root in net.merged.items()})
    branch_currents = dict(zip(net.branch_names, x[1 + len(net.nodes) :]))
    devices: dict[str, Level1Point] = {}
    junctions: dict[str, BulkJunctions] = {}
    for mos in net.mosfets:
        vd, vg, vs, vb = x[mos.drain], x[mos.gate], x[mos.source], x[mos.bulk]
        devices[mos.name] = mos.point(vd, vg, vs, vb)
        junctions[mos.name] = BulkJunctions(*mos.junction_currents(x, net.gmin))
    diode_currents = {d.name: d.current(x[d.anode] - x[d.cathode], net.gmin)[0] for d in net.diodes}
    caveats = tuple(circuit_caveats)
    if not solved.tight:
        caveats += (
            f"converged to ngspice's tolerances (RELTOL {RELTOL:g}) but not to {TIGHT_RELTOL:g}: "
            "a node is held by very small conductances",
        )
    return OperatingPoint(
        node_voltages=node_voltages,
        branch_currents=branch_currents,
        devices=devices,
        method=solved.method,
        iterations=solved.iterations,
        caveats=caveats,
        junctions=junctions,
        diode_currents=diode_currents,
    )


def _start(net: _Network, initial: Mapping[str, float] | None) -> tuple[_State, bool]:
    """The starting state: the caller's node guess, else `.nodeset`, else MODEINITJCT."""
    guess = dict(net.nodeset) if initial is None else {}
    known = set(net.nodes) if initial else ()  # a set: a guess may name thousands of nodes
    for node, value in (initial or {}).items():
        key = node.lower()
        key = GROUND if key == "gnd" else net.merged.get(key, key)
        if key != GROUND and key not in known:
            raise ValueError(f"initial guess names node `{node}`, which is not in the circuit")
        guess[key] = float(value)
    if not guess:
        return _junction_start(net), True
    x = np.zeros(net.size)
    for k, node in enumerate(net.nodes):
        x[k + 1] = guess.get(node, 0.0)
    return _settle(net, x), False


def solve_operating_point(
    circuit: Circuit,
    *,
    initial: Mapping[str, float] | None = None,
    source_values: Mapping[str, float] | None = None,
    model_override: ModelChoice | None = None,
    methods: Sequence[str] = METHODS,
) -> OperatingPoint:
    """The DC operating point by MNA and Newton–Raphson, falling back to gmin then source stepping.

    ``initial`` guesses node voltages (continuation); ``source_values`` replaces named independent
    sources' DC values; ``model_override`` builds the Level1Model for a card in place of
    ``level1_model`` (e.g. with LAMBDA and GAMMA set to 0); ``methods`` limits the ladder.
    Raises UnsupportedElement, InvalidElement, SingularCircuit or NoConvergence.
    """
    net = _build_network(circuit, model_override or level1_model)
    sources = net.source_vector(source_values)
    start, fresh = _start(net, initial)
    solved = _solve(net, sources, start, fresh, methods)
    return _operating_point(net, solved, net.caveats)


def solve_dc_sweep(
    circuit: Circuit,
    source: str,
    values: Sequence[float],
    *,
    source_values: Mapping[str, float] | None = None,
    model_override: ModelChoice | None = None,
    methods: Sequence[str] = METHODS,
) -> list[OperatingPoint]:
    """Operating points with `source` stepped through `values`, each started from the last.

    Like ngspice's ``.dc``: Newton continues from the previous solution, and a point where that
    fails is solved afresh with the full ladder. Raises NoConvergence naming the failing value.
    """
    net = _build_network(circuit, model_override or level1_model)
    if source.lower() not in {name.lower() for name in net.source_names}:
        raise ValueError(f"`{source}` is not an independent source of this circuit")
    swept = next(k for k, name in enumerate(net.source_names) if name.lower() == source.lower())
    fixed = net.source_vector(source_values)
    points: list[OperatingPoint] = []
    previous: _State | None = None
    for value in values:
        sources = fixed.copy()
        sources[swept] = float(value)
        solved: _Solved | None = None
        spent = 0
        if previous is not None:
            attempt = _newton(net, previous, sources)
            spent = attempt.iterations
            if attempt.state is not None:
                solved = _Solved(attempt.state, NEWTON, spent, attempt.tight)
        if solved is None:
            start, fresh = _start(net, None)
            try:
                solved = _solve(net, sources, start, fresh, methods)
            except NoConvergence as exc:
                raise NoConvergence(
                    f"at {net.source_names[swept]} = {value:g}: {exc}", exc.methods, exc.iterations + spent
                ) from None
            solved = _Solved(solved.state, solved.method, solved.iterations + spent, solved.tight)
        previous = _settle(net, solved.state.x)
        points.append(_operating_point(net, solved, net.caveats))
    return points


# --- many operating points at once: bridge.analysis.dcbatch -----------------------------------
def solve_dc_sweep_arrays(
    circuit: Circuit, source: str, values: Sequence[float], *, start: Mapping[str, float] | np.ndarray | None = None
):
    """The operating points of `source` stepped through `values`, solved all at once: the batch
    engine's sweep (``bridge.analysis.dcbatch.solve_dc_sweep_arrays``, which says how)."""
    from bridge.analysis.dcbatch import solve_dc_sweep_arrays as solve

    return solve(circuit, source, values, start=start)


def __getattr__(name: str) -> object:
    """``SweepArrays`` lives in ``dcbatch`` (imported on first use: it imports this module)."""
    if name == "SweepArrays":
        from bridge.analysis.dcbatch import SweepArrays

        return SweepArrays
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
