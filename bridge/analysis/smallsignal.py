"""The small-signal columns of one stage: the hand model's and the level-1 model's midband gain,
input and output resistance, and the hand's band-edge estimates (short-circuit time constants,
Miller), as numbers with the hand working; the networks' exact band edges are ``band_edges``'.

    SignalNetwork(circuit, devices, input_source).solve(...)   one linear (complex) solve
    hand_column(circuit, hand, setup)                           closed form or the hand network
    level1_column(circuit, level1, setup)                       the level-1 linearisation

Definitions (those of ``bridge.sim.ac``): the gain is v(output) over the input source's own
terminal voltage (so a series signal-source resistor counts); Rin is the impedance the input
source sees; Rout is the impedance seen from the output node with the load element taken out and
the input source zeroed (a voltage source shorted, a current source opened). Every other
independent source is zeroed. A complex value is reported as a signed magnitude: |Z| with the
sign of its real part (at midband the phase is within a degree of 0 or 180°).

The hand small-signal model: each MOSFET at the hand bias point as gm = K·VOV (the device
module's ``evaluate`` with LAMBDA = GAMMA = 0: ro infinite, no body effect), every capacitor of the
netlist a short at midband, the device capacitances open. The level-1 model: each MOSFET's
conductances (gm, gds, gmbs: ``Level1Point.conductances``) and bulk-junction conductances at the
project's own level-1 operating point, its Meyer gate capacitances where the card gives them
(``devices.mos1.smallsignal``), every capacitor an admittance jωC at the frequency asked.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import field

import numpy as np

from ..devices.mos1.instance import InstanceError, mosfet_instance
from ..devices.mos1.load import evaluate
from ..devices.mos1.smallsignal import (
    GateCapacitances,
    body_transconductance,
    card_gives_gate_capacitances,
    meyer_capacitances,
    output_conductance,
)
from ..netlist.circuit import GROUND, Circuit, Element
from ..netlist.numbers import engineering
from ..records import record
from ..vocabulary import Step
from .hand import HandSolution, hand_model

SIGNAL_KINDS = frozenset({"resistor", "capacitor", "inductor", "vsource", "isource", "vcvs", "vccs", "mosfet"})
DEFAULT_GMIN = 1e-12  # S, ngspice's GMIN across each bulk junction (manual, .options)


class SmallSignalError(ValueError):
    """The circuit has no small-signal model here (an element outside it, a singular network)."""


@record(frozen=True)
class DeviceSignal:
    """One MOSFET's small-signal model: the derivatives of the current into its drain terminal with
    respect to drain, gate, source and bulk voltage; its bulk-junction conductances; its gate
    capacitances (None: open)."""

    conductances: tuple[float, float, float, float]
    gbd: float = 0.0
    gbs: float = 0.0
    capacitances: GateCapacitances | None = None
    gm: float = 0.0
    region: str = "saturation"


@record(frozen=True)
class SignalSetup:
    """What a small-signal column is asked for: the input source, the output node, the element
    taken out for Rout (None: nothing) and the midband frequency (Hz)."""

    input_source: str
    output_node: str
    load: str | None
    midband_hz: float


def signed(value: complex) -> float:
    """|value| with the sign of its real part: a midband gain or resistance as one real number."""
    magnitude = abs(value)
    return -magnitude if value.real < 0.0 else magnitude


class _Roots:
    """Union-find of nodes joined by shorts; ground's class is named ground."""

    def __init__(self) -> None:
        self.parent: dict[str, str] = {}

    def find(self, node: str) -> str:
        parent = self.parent
        parent.setdefault(node, node)
        root = node
        while parent[root] != root:
            root = parent[root]
        while parent[node] != root:
            parent[node], node = root, parent[node]
        return root

    def join(self, a: str, b: str) -> bool:
        ra, rb = self.find(a), self.find(b)
        if ra == rb:
            return False
        if rb == GROUND:
            ra, rb = rb, ra
        self.parent[rb] = ra
        return True


def element_value(element: Element) -> float:
    value = element.value
    if not isinstance(value, (int, float)) or isinstance(value, bool):
        raise SmallSignalError(f"{element.name}: no numeric value")
    return float(value)


def element_multiplier(element: Element) -> float:
    m = element.params.get("m", 1.0)
    return float(m) if isinstance(m, (int, float)) and not isinstance(m, bool) and m > 0 else 1.0


@record
class SignalNetwork:
    """The small-signal network of `circuit` with the MOSFETs of `devices`, driven by `input_source`."""

    circuit: Circuit
    devices: Mapping[str, DeviceSignal]
    input_source: str
    elements: tuple[Element, ...] = field(init=False)
    source: Element = field(init=False)

    def __post_init__(self) -> None:
        for element in self.circuit.elements:
            if element.kind not in SIGNAL_KINDS:
                raise SmallSignalError(
                    f"{element.name}: a {element.kind} is outside the small-signal model (MOSFETs, R, C, L, "
                    "independent sources, E and G sources)"
                )
        source = self.circuit.element(self.input_source)
        if source is None or source.kind not in ("vsource", "isource"):
            raise SmallSignalError(f"no independent source `{self.input_source}`")
        self.source = source
        self.elements = self.circuit.elements

    @property
    def capacitors(self) -> tuple[Element, ...]:
        return tuple(e for e in self.elements if e.kind == "capacitor")

    def solve(
        self,
        frequency: float,
        *,
        shorted: Iterable[str] = (),
        removed: Iterable[str] = (),
        inject: tuple[str, str] | None = None,
    ) -> tuple[dict[str, complex], complex | None]:
        """Node voltages (every node of the circuit, ground included) and the current the input
        source delivers into the circuit, at `frequency` (Hz).

        The input source carries 1 (V or A) unless `inject` = (a, b) is given: then it is zeroed
        and 1 A flows into node a and out of node b. Capacitors named in `shorted` are shorts,
        elements named in `removed` are taken out, every other capacitor is jωC (open at 0 Hz).
        Raises SmallSignalError when the network is singular or the input is shorted.
        """
        s = np.array([2j * math.pi * frequency])
        matrices, rhs, at, size, branches = self.assemble(s, shorted=shorted, removed=removed, inject=inject)
        try:
            solution = np.linalg.solve(matrices[0], rhs) if size else np.zeros(0, dtype=complex)
        except np.linalg.LinAlgError:
            raise SmallSignalError("the small-signal network is singular (a node with no path at this "
                                   "frequency)") from None
        if not np.all(np.isfinite(solution)):
            raise SmallSignalError("the small-signal network is singular")
        voltages = {GROUND: 0j}
        for node in self.circuit.nodes():
            k = at(node)
            voltages[node] = complex(solution[k]) if k >= 0 else 0j
        source = self.source
        driven = inject is None
        current = None
        if driven and source in branches:
            current = -complex(solution[size - len(branches) + branches.index(source)])
        elif driven:
            current = 1.0 + 0j
        return voltages, current

    def assemble(self, s: np.ndarray, *, shorted: Iterable[str] = (), removed: Iterable[str] = (),
                  inject: tuple[str, str] | None = None):  # fmt: skip
        """The nodal system at each complex frequency of `s` (rad/s; 0 is DC: capacitors open,
        inductors left out), as `solve` describes it: (matrices (len(s), n, n), right-hand side (n),
        node → row (−1: ground), n, the branch elements)."""
        shorted_set = {n.lower() for n in shorted}
        removed_set = {n.lower() for n in removed}
        source = self.source
        driven = inject is None
        roots = _Roots()
        roots.find(GROUND)
        branches: list[Element] = []
        for element in self.elements:
            name = element.name.lower()
            if name in removed_set:
                continue
            if element.kind == "vsource":
                if element is source and driven:
                    branches.append(element)
                else:
                    roots.join(element.nodes[0], element.nodes[1])
            elif (element.kind == "capacitor" and name in shorted_set) or (
                    element.kind == "resistor" and element_value(element) == 0.0):
                roots.join(element.nodes[0], element.nodes[1])
            elif element.kind == "vcvs":
                branches.append(element)
        for node in self.circuit.nodes():
            roots.find(node)
        if driven and source.kind == "vsource" and roots.find(source.nodes[0]) == roots.find(source.nodes[1]):
            raise SmallSignalError(f"the input source {source.name} is shorted at this frequency")
        names = [n for n in dict.fromkeys(roots.find(n) for n in roots.parent) if n != GROUND]
        index = {n: k for k, n in enumerate(names)}
        size = len(names) + len(branches)
        s = np.asarray(s, dtype=complex)
        matrix = np.zeros((len(s), size, size), dtype=complex)
        rhs = np.zeros(size, dtype=complex)
        reactive = bool(np.any(s != 0.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            inverse_s = np.where(s != 0.0, 1.0 / np.where(s != 0.0, s, 1.0), 0.0)

        def at(node: str) -> int:
            return index.get(roots.find(node), -1)

        def admit(a: int, b: int, y) -> None:
            if a >= 0:
                matrix[:, a, a] += y
                if b >= 0:
                    matrix[:, a, b] -= y
            if b >= 0:
                matrix[:, b, b] += y
                if a >= 0:
                    matrix[:, b, a] -= y

        def transfer(out_p: int, out_n: int, in_p: int, in_n: int, g: complex) -> None:
            """g·(v(in_p) − v(in_n)) flowing out of out_p into out_n through the element."""
            for row, sign in ((out_p, 1.0), (out_n, -1.0)):
                if row < 0:
                    continue
                if in_p >= 0:
                    matrix[:, row, in_p] += sign * g
                if in_n >= 0:
                    matrix[:, row, in_n] -= sign * g

        for element in self.elements:
            name = element.name.lower()
            if name in removed_set:
                continue
            kind = element.kind
            if kind == "resistor":
                resistance = element_value(element) / element_multiplier(element)
                if resistance != 0.0:
                    admit(at(element.nodes[0]), at(element.nodes[1]), 1.0 / resistance)
            elif kind == "capacitor" and name not in shorted_set and reactive:
                capacitance = element_value(element) * element_multiplier(element)
                admit(at(element.nodes[0]), at(element.nodes[1]), s * capacitance)
            elif kind == "inductor":
                inductance = element_value(element) / element_multiplier(element)
                if reactive and inductance != 0.0:
                    admit(at(element.nodes[0]), at(element.nodes[1]), inverse_s / inductance)
            elif kind == "vccs":
                p, n, cp, cn = (at(x) for x in element.nodes[:4])
                transfer(p, n, cp, cn, element_value(element))
            elif kind == "mosfet":
                device = self.devices.get(element.name)
                if device is None:
                    raise SmallSignalError(f"{element.name}: no small-signal model")
                d, g, src, b = (at(x) for x in element.nodes[:4])
                for column, conductance in zip((d, g, src, b), device.conductances):
                    if column < 0 or conductance == 0.0:
                        continue
                    if d >= 0:
                        matrix[:, d, column] += conductance
                    if src >= 0:
                        matrix[:, src, column] -= conductance
                admit(b, d, device.gbd)
                admit(b, src, device.gbs)
                if device.capacitances is not None and reactive:
                    caps = device.capacitances
                    admit(g, src, s * caps.cgs)
                    admit(g, d, s * caps.cgd)
                    admit(g, b, s * caps.cgb)
        for k, element in enumerate(branches):
            row = len(names) + k
            p, n = at(element.nodes[0]), at(element.nodes[1])
            # The branch current flows into n+, through the element, out of n− (SPICE sign).
            if p >= 0:
                matrix[:, p, row] += 1.0
                matrix[:, row, p] += 1.0
            if n >= 0:
                matrix[:, n, row] -= 1.0
                matrix[:, row, n] -= 1.0
            if element.kind == "vcvs":
                cp, cn = at(element.nodes[2]), at(element.nodes[3])
                gain = element_value(element)
                if cp >= 0:
                    matrix[:, row, cp] -= gain
                if cn >= 0:
                    matrix[:, row, cn] += gain
            else:
                rhs[row] = 1.0
        if driven and source.kind == "isource":
            p, n = at(source.nodes[0]), at(source.nodes[1])
            if p >= 0:
                rhs[p] -= 1.0
            if n >= 0:
                rhs[n] += 1.0
        elif not driven:
            a, b = (at(x) for x in inject)  # type: ignore[union-attr]
            if a >= 0:
                rhs[a] += 1.0
            if b >= 0:
                rhs[b] -= 1.0
        return matrix, rhs, at, size, branches

    def transfer(self, s: np.ndarray, output: str, shorted: Iterable[str] = ()) -> np.ndarray:
        """The gain v(output)/v(input source's terminals) at each complex frequency of `s` (rad/s,
        none 0), in one stacked solve; NaN where the network is singular there."""
        matrices, rhs, at, size, _ = self.assemble(np.asarray(s, dtype=complex), shorted=shorted)
        if not size:
            return np.full(len(s), np.nan, dtype=complex)
        solution = np.full((len(s), size), np.nan, dtype=complex)
        try:
            solution = np.linalg.solve(matrices, np.broadcast_to(rhs, (len(s), size))[..., None])[..., 0]
        except np.linalg.LinAlgError:  # one singular frequency: the others one by one
            for k in range(len(s)):
                try:
                    solution[k] = np.linalg.solve(matrices[k], rhs)
                except np.linalg.LinAlgError:
                    continue

        def node(name: str) -> np.ndarray:
            k = at(name)
            return solution[:, k] if k >= 0 else np.zeros(len(s), dtype=complex)

        plus, minus = self.source.nodes[:2]
        with np.errstate(divide="ignore", invalid="ignore"):
            return node(output) / (node(plus) - node(minus))

    def input_voltage(self, voltages: Mapping[str, complex]) -> complex:
        """The input source's own terminal voltage v(n+) − v(n−)."""
        return voltages[self.source.nodes[0]] - voltages[self.source.nodes[1]]

    def midband(
        self, frequency: float, output: str, load: str | None, shorted: Iterable[str] = ()
    ) -> tuple[complex, complex, complex]:
        """(gain, Rin, Rout) at `frequency`: see the module's definitions."""
        shorted = tuple(shorted)
        voltages, current = self.solve(frequency, shorted=shorted)
        vin = self.input_voltage(voltages)
        gain = voltages[output] / vin
        # A current source drives 1 A into n− and out of n+: the impedance is the voltage it develops.
        rin = (vin / current if current else complex(math.inf)) if self.source.kind == "vsource" else -vin
        removed = (load,) if load else ()
        try:
            seen, _ = self.solve(frequency, shorted=shorted, removed=removed, inject=(output, GROUND))
            rout = seen[output]
        except SmallSignalError:
            rout = complex(math.inf)
        return gain, rin, rout


# --- the devices' small-signal models ----------------------------------------------------------


def _gmin(circuit: Circuit) -> float:
    value = circuit.options().get("gmin")
    return float(value) if isinstance(value, (int, float)) else DEFAULT_GMIN


def hand_devices(
    circuit: Circuit, hand: HandSolution, effects: frozenset[str] = frozenset()
) -> dict[str, DeviceSignal]:
    """Each MOSFET's hand small-signal model at the hand bias point: gm only (the device module's
    ``evaluate`` with LAMBDA = GAMMA = 0), plus gds = λ·ID with "lambda" in `effects` and
    gmbs = gm·GAMMA/(2√(PHI − VBS)) with "gamma" (the card's values, the bias point unchanged)."""
    voltages = hand.node_voltages
    devices = {}
    for element in circuit.elements_of("mosfet"):
        try:
            instance = mosfet_instance(circuit, element)
        except InstanceError as exc:
            raise SmallSignalError(f"{element.name}: {exc}") from None
        model = hand_model(instance.model)
        d, g, s, b = (voltages[n] for n in element.nodes[:4])
        point = evaluate(model, instance.geometry, d, g, s, b)
        gd, gg, gs, gb = point.conductances
        if not point.swapped:
            if "lambda" in effects:
                gds = output_conductance(instance.model.lambda_, point.id)
                gd, gs = gd + gds, gs - gds
            if "gamma" in effects:
                gmbs = body_transconductance(instance.model, point.gm, point.vbs)
                gb, gs = gb + gmbs, gs - gmbs
        devices[element.name] = DeviceSignal((gd, gg, gs, gb), gm=point.gm, region=point.region)
    return devices


def level1_devices(circuit: Circuit, level1) -> dict[str, DeviceSignal]:
    """Each MOSFET's level-1 small-signal model at the level-1 operating point `level1`
    (``dcsolve.OperatingPoint``): its channel conductances, its bulk junctions' conductances
    (GMIN included) and, where the card gives them, its Meyer gate capacitances."""
    gmin = _gmin(circuit)
    devices = {}
    for element in circuit.elements_of("mosfet"):
        try:
            instance = mosfet_instance(circuit, element)
        except InstanceError as exc:
            raise SmallSignalError(f"{element.name}: {exc}") from None
        point = level1.devices[element.name]
        voltages = level1.node_voltages
        polarity = instance.model.polarity
        vd, vs, vb = (voltages[n] for n in (element.nodes[0], element.nodes[2], element.nodes[3]))
        gbd = instance.junction(polarity * (vb - vd), True, gmin)[1]
        gbs = instance.junction(polarity * (vb - vs), False, gmin)[1]
        caps = None
        if card_gives_gate_capacitances(instance.card.params):
            caps = meyer_capacitances(instance.card.params, instance.model, instance.geometry, point)
        devices[element.name] = DeviceSignal(tuple(point.conductances), gbd, gbs, caps, point.gm, point.region)
    return devices


def hand_capacitances(circuit: Circuit, hand: HandSolution) -> dict[str, GateCapacitances]:
    """The Meyer gate capacitances of each MOSFET whose card gives them, at the hand bias point
    (the hand model: LAMBDA = GAMMA = 0)."""
    found = {}
    for element in circuit.elements_of("mosfet"):
        try:
            instance = mosfet_instance(circuit, element)
        except InstanceError:
            continue
        if not card_gives_gate_capacitances(instance.card.params):
            continue
        model = hand_model(instance.model)
        point = evaluate(model, instance.geometry, *(hand.node_voltages[n] for n in element.nodes[:4]))
        found[element.name] = meyer_capacitances(instance.card.params, model, instance.geometry, point)
    return found


# --- the hand column ----------------------------------------------------------------------------


@record(frozen=True)
class LowBandTerm:
    """One capacitor's short-circuit time constant: the resistance it sees with the other
    capacitors shorted, and its pole 1/(2π·R·C) (0 when it sees an open circuit)."""

    capacitor: str
    capacitance: float
    resistance: float
    pole_hz: float


@record(frozen=True)
class HandColumn:
    """The hand small-signal column; a None value is one the hand model cannot give (with why)."""

    gain: float | None
    rin: float | None
    rout: float | None
    low_hz: float | None
    high_hz: float | None
    closed_form: str | None  # the topology whose closed form was used; None: solved numerically
    steps: tuple[Step, ...]
    low_terms: tuple[LowBandTerm, ...]
    notes: tuple[str, ...] = ()
    miller: tuple[float, float] | None = None  # (τin, τout) of the Miller estimate, s


def _q(value: float, unit: str) -> str:
    if math.isinf(value):
        return "∞"
    return engineering(value, unit)


def short_circuit_terms(network: SignalNetwork, left_open: Iterable[str] = ()) -> tuple[LowBandTerm, ...]:
    """Per capacitor of the netlist: the resistance it sees with every other capacitor shorted,
    the input source zeroed (hand small-signal model), and its pole."""
    capacitors = network.capacitors
    terms = []
    left_open = {name.lower() for name in left_open}
    capacitors = tuple(c for c in capacitors if c.name.lower() not in left_open)
    for cap in capacitors:
        others = [c.name for c in capacitors if c is not cap]
        a, b = cap.nodes[0], cap.nodes[1]
        try:
            voltages, _ = network.solve(0.0, shorted=others, removed=(cap.name,), inject=(a, b))
            resistance = abs((voltages[a] - voltages[b]).real)
        except SmallSignalError:
            resistance = math.inf
        capacitance = element_value(cap) * element_multiplier(cap)
        if math.isinf(resistance) or capacitance == 0.0:
            pole = 0.0
        elif resistance == 0.0:
            pole = math.inf
        else:
            pole = 1.0 / (2.0 * math.pi * resistance * capacitance)
        terms.append(LowBandTerm(cap.name, capacitance, resistance, pole))
    return tuple(terms)


def load_capacitors(network: SignalNetwork, setup: SignalSetup) -> dict[str, tuple[float, float]]:
    """The netlist's capacitors that are not coupling or bypass ones: those whose short lowers the
    hand network's gain (every other capacitor shorted, at DC otherwise), as a load or a feedback
    capacitance does; each with (|gain| shorted, |gain| open)."""
    capacitors = network.capacitors
    if not capacitors:
        return {}
    names = [c.name for c in capacitors]
    try:
        voltages, _ = network.solve(0.0, shorted=names)
        all_shorted = abs(voltages[setup.output_node] / network.input_voltage(voltages))
    except (SmallSignalError, ZeroDivisionError):
        return {}
    found = {}
    for cap in capacitors:
        try:
            voltages, _ = network.solve(0.0, shorted=[n for n in names if n != cap.name])
            opened = abs(voltages[setup.output_node] / network.input_voltage(voltages))
        except (SmallSignalError, ZeroDivisionError):
            continue
        if math.isfinite(opened) and all_shorted < opened * (1.0 - 1e-9):
            found[cap.name] = (all_shorted, opened)
    return found


def low_band_edge(terms: Iterable[LowBandTerm]) -> float | None:
    """The short-circuit time-constant estimate: f_L ≈ Σ 1/(2π·Rk·Ck); None without capacitors."""
    terms = tuple(terms)
    if not terms:
        return None
    return sum(t.pole_hz for t in terms)


def _terminal_resistance(network: SignalNetwork, node: str, shorted: tuple[str, ...],
                         removed: tuple[str, ...] = ()) -> tuple[float, dict[str, complex]]:  # fmt: skip
    """The resistance from `node` to AC ground of the network without the MOSFET (input zeroed),
    and the voltages 1 A into `node` gives (infinite when nothing resistive holds the node)."""
    try:
        voltages, _ = network.solve(0.0, shorted=shorted, removed=removed, inject=(node, GROUND))
    except SmallSignalError:
        return math.inf, {}
    return voltages[node].real, voltages


def _parallel_words(circuit: Circuit, network: SignalNetwork, terminal: str, shorted: tuple[str, ...],
                    exclude: tuple[str, ...] = ()) -> str | None:  # fmt: skip
    """`RD ∥ RL` with why each reaches AC ground, when the resistors at `terminal`'s midband node all
    go straight to AC ground; None when the network there is more than that."""
    roots = _Roots()
    roots.find(GROUND)
    for element in circuit.elements:
        if (element.kind == "vsource" and element is not network.source) or (
                element.kind == "capacitor" and element.name.lower() in {s.lower() for s in shorted}):
            roots.join(element.nodes[0], element.nodes[1])
    here = roots.find(terminal)
    if here == GROUND:
        return None
    parts = []
    for element in circuit.elements:
        if element.name in exclude or element is network.source or element.kind not in (
                "resistor", "vsource", "isource", "vcvs", "vccs",
                                                            "inductor"):
            continue
        ends = [roots.find(n) for n in element.nodes[:2]]
        if here not in ends:
            continue
        if element.kind == "isource" and element.name != network.source.name:
            continue  # a zeroed current source: open
        if element.kind != "resistor" or ends.count(here) != 1:
            return None
        near, far = (element.nodes[0], element.nodes[1]) if ends[0] == here else (element.nodes[1], element.nodes[0])
        if roots.find(far) != GROUND:
            return None
        if far == GROUND:
            why = "ground"
        elif far in _supply_nodes(circuit, network.source):
            why = f"{far} (a supply: AC ground)"
        else:
            why = f"{far} (AC ground through a capacitor, a short at midband)"
        through = "" if near == terminal else f", reached from {terminal} through a coupling capacitor"
        resistance = element_value(element) / element_multiplier(element)
        parts.append(f"{element.name} = {_q(resistance, 'Ω')} to {why}{through}")
    if not parts:
        return None
    return "; ".join(parts) + (", in parallel" if len(parts) > 1 else "")


def hand_column(circuit: Circuit, hand: HandSolution, setup: SignalSetup) -> HandColumn:
    """The hand small-signal column at the hand bias point `hand` (see the module docstring).

    A single MOSFET whose gate network is fed by the input alone and whose drain and source each
    see only resistance to AC ground gets the closed forms (common source, with its source
    resistance RS' dividing the gain by 1 + gm·RS'; source follower gm·R/(1 + gm·R)); anything
    else is the hand small-signal network solved numerically, and the steps say so.
    """
    devices = hand_devices(circuit, hand)
    network = SignalNetwork(circuit, devices, setup.input_source)
    loads = load_capacitors(network, setup)
    shorted = tuple(c.name for c in network.capacitors if c.name not in loads)
    notes: list[str] = []
    for name, (shorted_gain, open_gain) in loads.items():
        notes.append(f"{name}: shorting it lowers the hand gain (|Av| {abs(open_gain):.4g} open, "
                     f"{abs(shorted_gain):.4g} shorted): a load or feedback (low-pass) capacitance, not a coupling or "
                     "bypass one; the hand model keeps it as jωC at midband instead of a short, the low band edge "
                     "estimate leaves it out, and no hand estimate of the upper band edge includes it")  # fmt: skip
    numeric: tuple[float, float, float] | None = None
    try:
        gain_c, rin_c, rout_c = network.midband(setup.midband_hz, setup.output_node, setup.load, shorted)
        numeric = (signed(gain_c), signed(rin_c), signed(rout_c))
    except SmallSignalError as exc:
        notes.append(f"the hand small-signal network: {exc}")
    terms = short_circuit_terms(network, loads)
    low = low_band_edge(terms)
    steps: list[Step] = [Step("Hand small-signal model: gm = K·VOV at the hand bias point, ro infinite (λ = 0), "
                              "no body effect (γ = 0), every capacitor of the netlist a short at midband, "
                              "the supplies AC ground")]  # fmt: skip
    for name, (shorted_gain, open_gain) in loads.items():
        steps.append(Step(f"Except {name}: shorted it lowers the gain (|Av| {abs(open_gain):.4g} open, "
                          f"{abs(shorted_gain):.4g} shorted), so it is a load or feedback capacitance, kept as jωC"))
    closed = _closed_form(circuit, network, devices, setup, shorted, steps, numeric)
    label = None
    if closed is not None:
        gain, rin, rout, label = closed
    elif numeric is not None:
        gain, rin, rout = numeric
        steps.append(Step("No closed form used: the hand small-signal network (the model above) solved "
                          "numerically at the midband frequency",
                          f"Av = {gain:.4g}, Rin = {_q(rin, 'Ω')}, Rout = {_q(rout, 'Ω')}"))
    else:
        gain = rin = rout = None
    for term in terms:
        if term.pole_hz == 0.0:
            steps.append(Step(f"{term.capacitor} ({_q(term.capacitance, 'F')}) sees no resistive path with the "
                              "other capacitors shorted: no pole"))
        else:
            steps.append(Step(f"{term.capacitor} ({_q(term.capacitance, 'F')}) sees R = {_q(term.resistance, 'Ω')} "
                              "with the other capacitors shorted and the input zeroed",
                              f"1/(2π·R·C) = {_q(term.pole_hz, 'Hz')}", term.pole_hz, "Hz"))
    if low is not None and terms:
        steps.append(Step("Low band edge, short-circuit time constants: f_L ≈ Σ 1/(2π·Rk·Ck)",
                          f"f_L ≈ {_q(low, 'Hz')}", low, "Hz"))
    miller: list[tuple[float, float]] = []
    high = _miller(circuit, hand, network, setup, shorted, label if gain is not None else None, steps, miller)
    return HandColumn(gain, rin, rout, low, high, label, tuple(steps), terms, tuple(notes),
                      miller[0] if miller else None)


def _closed_form(circuit, network, devices, setup, shorted, steps, numeric):
    """The closed form of a recognised topology, its steps appended; None when none applies.

    Returns (gain, Rin, Rout, topology) — the gain and Rout equal to the numerical solve of the
    same model (checked to 1e-6), which stays the answer if they ever differ."""
    mosfets = circuit.elements_of("mosfet")
    if len(mosfets) != 1 or any(e.kind in ("vcvs", "vccs", "inductor") for e in circuit.elements):
        return None
    source = network.source
    if source.kind != "vsource":
        return None
    mosfet = mosfets[0]
    device = devices[mosfet.name]
    if device.region != "saturation" or device.gm <= 0.0:
        return None
    gm = device.gm
    bare = SignalNetwork(circuit, {mosfet.name: DeviceSignal((0.0, 0.0, 0.0, 0.0))}, source.name)
    try:
        driven, delivered = bare.solve(setup.midband_hz, shorted=shorted)
    except SmallSignalError:
        return None
    drain, gate, src = mosfet.nodes[0], mosfet.nodes[1], mosfet.nodes[2]
    vin = network.input_voltage(driven)
    alpha = (driven[gate] / vin).real
    if abs(driven[drain]) > 1e-12 or abs(driven[src]) > 1e-12:
        return None  # the input reaches the drain or source resistively
    rd, at_drain = _terminal_resistance(bare, drain, shorted)
    rs, at_source = _terminal_resistance(bare, src, shorted)
    for voltages, others in ((at_drain, (gate, src)), (at_source, (gate, drain))):
        if voltages and any(abs(voltages[n]) > 1e-9 * max(1.0, abs(max(voltages.values(), key=abs)))
                            for n in others if n != GROUND):  # fmt: skip
            return None  # drain, source and gate networks coupled: no textbook form
    output = setup.output_node
    same = _Roots()
    for element in circuit.elements:
        if (element.kind == "vsource" and element is not source) or (
                element.kind == "capacitor") or (element.kind == "resistor" and element_value(element) == 0.0):
            same.join(element.nodes[0], element.nodes[1])
    out_root, drain_root, source_root = same.find(output), same.find(drain), same.find(src)
    if out_root == drain_root and drain_root != GROUND:
        role = "drain"
    elif out_root == source_root and source_root != GROUND:
        role = "source"
    else:
        return None
    load = (setup.load,) if setup.load else ()
    rd_open = _terminal_resistance(bare, drain, shorted, load)[0] if role == "drain" else rd
    rs_open = _terminal_resistance(bare, src, shorted, load)[0] if role == "source" else rs
    polarity = "PMOS " if (circuit.model(mosfet.model or "") and circuit.model(mosfet.model).type == "pmos") else ""
    steps.append(Step(f"{mosfet.name}: gm = K·VOV at the hand bias point (device module)", f"gm = {_q(gm, 'S')}",
                      gm, "S"))
    gate_words = _parallel_words(circuit, network, gate, shorted)
    rin = signed(vin / delivered) if delivered else math.inf
    rsig = _series_resistance(circuit, source, gate, shorted)
    if alpha != 1.0 or rsig:
        steps.append(Step("Gate: no gate current, so the gate network divides the input",
                          f"vg/vin = {alpha:.6g}" + (f" (gate resistance {gate_words})" if gate_words else ""), alpha))
    steps.append(Step(f"Rin: the resistance {source.name} sees at its terminals"
                      + (f" — {rsig} in series with the gate resistance" if rsig else "")
                      + (f" ({gate_words})" if gate_words else ""),
                      f"Rin = {_q(rin, 'Ω')}", rin, "Ω"))
    drain_words = _parallel_words(circuit, network, drain, shorted)
    source_words = _parallel_words(circuit, network, src, shorted)
    if rs == 0.0:
        if src == GROUND:
            rs_text = "the source is grounded"
        elif src in _supply_nodes(circuit, source):
            rs_text = "the source is on a supply: AC ground"
        else:
            rs_text = "the source is at AC ground (bypassed: its capacitor is a short at midband)"
    elif math.isinf(rs):
        rs_text = "the source sees no resistance to AC ground (a current source: open)"
    else:
        rs_text = f"RS' = {_q(rs, 'Ω')}" + (f" ({source_words})" if source_words else
                                             " (the network at the source, reduced)")
    if role == "drain":
        label = f"{polarity}common source" + ("" if rs == 0.0 else ", unbypassed source resistance")
        if math.isinf(rd):
            steps.append(Step("Drain: nothing resistive to AC ground (a current-source load, ro infinite): the hand "
                              "model gives no finite gain"))
            return None, rin, None, label + ", current-source load"
        rd_text = f"RD' = {_q(rd, 'Ω')}" + (f" ({drain_words})" if drain_words else
                                             " (the network at the drain, reduced)")
        steps.append(Step(f"Drain: {rd_text}", value=rd, unit="Ω"))
        steps.append(Step(f"Source: {rs_text}"))
        if rs == 0.0:
            gain = -alpha * gm * rd
            steps.append(Step("Common source: Av = −(vg/vin)·gm·RD'", f"Av = −{alpha:.6g}·{_q(gm, 'S')}·"
                              f"{_q(rd, 'Ω')} = {gain:.4g}", gain))
        elif math.isinf(rs):
            gain = 0.0
            steps.append(Step("Nothing resistive at the source: its current cannot change, so Av = 0", "Av = 0",
                              gain))
        else:
            gain = -alpha * gm * rd / (1.0 + gm * rs)
            steps.append(Step("Unbypassed source resistance: Av = −(vg/vin)·gm·RD'/(1 + gm·RS')",
                              f"Av = −{alpha:.6g}·{_q(gm, 'S')}·{_q(rd, 'Ω')}/(1 + {gm * rs:.4g}) = {gain:.4g}",
                              gain))
        rout = rd_open
        steps.append(Step("Rout: the drain resistance with the load taken out (ro infinite)",
                          f"Rout = {_q(rout, 'Ω')}", rout, "Ω"))
    else:
        label = f"{polarity}source follower" if drain_root == GROUND else f"{polarity}source output"
        steps.append(Step(f"Source: {rs_text}"))
        if math.isinf(rs):
            gain = alpha
            steps.append(Step("Follower with nothing resistive at the source: Av = vg/vin", f"Av = {gain:.6g}", gain))
        else:
            gain = alpha * gm * rs / (1.0 + gm * rs)
            steps.append(Step("Follower: Av = (vg/vin)·gm·RS'/(1 + gm·RS')",
                              f"Av = {alpha:.6g}·{gm * rs:.4g}/(1 + {gm * rs:.4g}) = {gain:.4g}", gain))
        rout = 1.0 / (gm + (0.0 if math.isinf(rs_open) else 1.0 / rs_open)) if rs_open != 0.0 else 0.0
        steps.append(Step("Rout: 1/gm ∥ RS' with the load taken out", f"Rout = {_q(rout, 'Ω')}", rout, "Ω"))
    if numeric is not None:
        numeric_gain, _, numeric_rout = numeric
        if not math.isclose(gain, numeric_gain, rel_tol=1e-6, abs_tol=1e-12) or not (
                math.isinf(rout) and math.isinf(numeric_rout) or math.isclose(rout, numeric_rout, rel_tol=1e-6)):
            steps.append(Step(f"The closed form ({gain:.6g}) and the hand network solved numerically "
                              f"({numeric_gain:.6g}) differ: the numerical answer is kept"))
            return None
    return gain, rin, rout, label


def _supply_nodes(circuit: Circuit, source: Element) -> set[str]:
    """The nodes voltage sources other than the input hold from ground: AC ground at any frequency."""
    roots = _Roots()
    roots.find(GROUND)
    for element in circuit.elements:
        if element.kind == "vsource" and element is not source:
            roots.join(element.nodes[0], element.nodes[1])
    return {node for node in circuit.nodes() if roots.find(node) == GROUND}


def _series_resistance(circuit: Circuit, source: Element, gate: str, shorted: tuple[str, ...]) -> str | None:
    """`RSIG = 600 Ω` when one resistor lies between the input source's live terminal and the
    gate's midband node (through shorted capacitors); None otherwise."""
    roots = _Roots()
    roots.find(GROUND)
    for element in circuit.elements:
        if (element.kind == "vsource" and element is not source) or element.name in shorted:
            roots.join(element.nodes[0], element.nodes[1])
    live = source.nodes[0] if roots.find(source.nodes[1]) == GROUND else source.nodes[1]
    live_root, gate_root = roots.find(live), roots.find(gate)
    if live_root == gate_root:
        return None
    between = [e for e in circuit.elements if e.kind == "resistor"
               and {roots.find(e.nodes[0]), roots.find(e.nodes[1])} == {live_root, gate_root}]  # fmt: skip
    if len(between) != 1:
        return None
    return f"{between[0].name} = {_q(element_value(between[0]) / element_multiplier(between[0]), 'Ω')}"


def _miller(circuit, hand, network, setup, shorted, closed, steps, parts=None) -> float | None:
    """The upper band edge by the Miller estimate, where the card gives gate capacitances and a
    closed form holds: τin = R at the gate · (Cgs·(1 − Avs) + Cgd·(1 − Avd) + Cgb),
    τout = RD'·Cgd·(1 − 1/Avd) for a drain output; f_H ≈ 1/(2π·(τin + τout))."""
    caps = hand_capacitances(circuit, hand)
    if not caps:
        return None
    if closed is None:
        steps.append(Step("Upper band edge: no Miller estimate outside the closed forms"))
        return None
    mosfet = circuit.elements_of("mosfet")[0]
    c = caps[mosfet.name]
    drain, gate, src = mosfet.nodes[0], mosfet.nodes[1], mosfet.nodes[2]
    # Gains from the gate to drain and source, the gate driven through the hand network.
    try:
        at_gate, _ = network.solve(setup.midband_hz, shorted=shorted)
    except SmallSignalError:
        return None
    vg = at_gate[gate]
    if abs(vg) == 0.0:
        return None
    avd = (at_gate[drain] / vg).real
    avs = (at_gate[src] / vg).real
    r_gate = _terminal_resistance(network, gate, shorted)[0]
    if math.isinf(r_gate):
        return None
    c_in = c.cgs * (1.0 - avs) + c.cgd * (1.0 - avd) + c.cgb
    tau_in = r_gate * c_in
    tau_out = 0.0
    words = ""
    if abs(avd) > 1e-12:
        r_drain = _terminal_resistance(network, drain, shorted)[0]
        if not math.isinf(r_drain):
            tau_out = r_drain * c.cgd * (1.0 - 1.0 / avd)
            words = f", τout = RD'·Cgd·(1 − 1/Avd) = {_q(r_drain, 'Ω')}·{_q(c.cgd, 'F')}·{1.0 - 1.0 / avd:.4g}"
    high = 1.0 / (2.0 * math.pi * (tau_in + tau_out))
    steps.append(Step(f"{mosfet.name} gate capacitances at the hand bias point (ngspice's level-1 Meyer values)",
                      f"Cgs = {_q(c.cgs, 'F')}, Cgd = {_q(c.cgd, 'F')}, Cgb = {_q(c.cgb, 'F')}"))
    steps.append(Step("Upper band edge, Miller estimate: τin = R at the gate·(Cgs·(1 − Avs) + Cgd·(1 − Avd) + Cgb)"
                      + words,
                      f"R at the gate = {_q(r_gate, 'Ω')}, Avd = {avd:.4g}, Avs = {avs:.4g}, Cin = {_q(c_in, 'F')}; "
                      f"f_H ≈ 1/(2π·(τin + τout)) = {_q(high, 'Hz')}", high, "Hz"))
    if parts is not None:
        parts.append((tau_in, tau_out))
    return high


# --- the level-1 column --------------------------------------------------------------------------


@record(frozen=True)
class Level1Column:
    gain: float
    rin: float
    rout: float
    gain_complex: complex
    rin_complex: complex
    rout_complex: complex


def level1_column(circuit: Circuit, level1, setup: SignalSetup) -> Level1Column:
    """The level-1 column: the small-signal model linearised at the project's own level-1
    operating point, solved at the midband frequency with every capacitor as jωC."""
    network = SignalNetwork(circuit, level1_devices(circuit, level1), setup.input_source)
    gain, rin, rout = network.midband(setup.midband_hz, setup.output_node, setup.load)
    return Level1Column(signed(gain), signed(rin), signed(rout), gain, rin, rout)


def hand_gain_with(circuit: Circuit, hand: HandSolution, setup: SignalSetup, effect: str) -> float:
    """The hand midband gain with one effect switched on in the small-signal model ("lambda":
    gds = λ·ID; "gamma": gmbs), at the hand bias point, capacitors shorted."""
    network = SignalNetwork(circuit, hand_devices(circuit, hand, frozenset({effect})), setup.input_source)
    loads = load_capacitors(SignalNetwork(circuit, hand_devices(circuit, hand), setup.input_source), setup)
    shorted = tuple(c.name for c in network.capacitors if c.name not in loads)
    return signed(network.midband(setup.midband_hz, setup.output_node, setup.load, shorted)[0])
