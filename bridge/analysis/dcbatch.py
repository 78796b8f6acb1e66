"""Many operating points of one circuit at once: a batch of copies that differ in values, solved
by one vectorised Newton on numpy arrays.

    solve_dc_batch(circuit, BatchValues(count, sources=..., resistors=..., parameters=...,
                   temperature=...)) -> BatchArrays
    solve_dc_sweep_arrays(circuit, "VIN", values) -> SweepArrays      (one source varied)

What is solved, stated once:

* Row k is the circuit with row k's values: independent sources' DC values, resistances, level-1
  card parameters per MOSFET element (before the temperature phase, as the card would give
  them) and the circuit temperature (``.temp``: an instance's own TEMP stays, DTEMP adds).
  ``dcsolve.solve_operating_point`` on that circuit is the reference; the batch lands on the
  same operating points (tests/test_dcbatch.py: 1e-9 relative).
* The linear part is reduced as ``dcsolve._reduce`` reduces it (the same kept unknowns): once
  for all rows when only sources vary (the sweep's case) or no varied resistor touches an
  eliminated unknown, else per row, by Gaussian elimination over all rows at once in the pivot
  order of the circuit's own values (``_solve_entries``). Newton then solves the small kept
  system of every row at once (closed form up to 3 unknowns, numpy's batched LU beyond).
* The MOSFETs are ``devices.mos1``'s level-1 equations on arrays (``load.channel_arrays``,
  ``junction_current_arrays``), their card and temperature phase per row where the row changes
  them (``temperature.at_temperature_arrays``), and ngspice's limiting on arrays
  (``convergence.limit_arrays``) on the rows whose step is large enough for it to act: from far
  starts (the nominal solution, a hand point), then once more without it for the rows left (a
  forward-biased junction converges faster so); a sweep's passes from solved neighbours run
  without it.
* A row converges when one Newton step, not limited, moves no unknown by more than
  TIGHT_RELTOL of its size plus TIGHT_VNTOL (or TIGHT_ABSTOL): the scalar solver's tight
  criterion. A row that does not converge within the batch's iterations is solved by the scalar
  solver (its Newton, gmin and source stepping) and marked not ``vectorised``; a row that has no
  solution there either is not ``solved`` and its values are NaN.
* Circuits with diodes, or too large for a dense reduction, are solved row by row throughout.
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Mapping, Sequence
from dataclasses import field, replace
from typing import NamedTuple

import numpy as np

from bridge.analysis.dcsolve import (
    METHODS,
    TIGHT_RELTOL,
    TIGHT_VNTOL,
    ZERO_RESISTANCE,
    DcSolveError,
    NoConvergence,
    _build_network,
    _lookup,
    _Network,
    _resistance,
    _solve,
    _start,
    level1_model,
    solve_operating_point,
)
from bridge.devices.mos1.convergence import limit_arrays, limit_channel_arrays, needs_limiting, vcrit_arrays
from bridge.devices.mos1.load import (
    ArrayPoint,
    Level1Geometry,
    beta_arrays,
    channel_arrays,
    junction_current_arrays,
)
from bridge.devices.mos1.model import Level1Model
from bridge.devices.mos1.params import (
    CELSIUS_TO_KELVIN,
    DEFAULT_JUNCTION_IS,
    K_OVER_Q,
    KNOWN_PARAMETERS,
    canonical_name,
)
from bridge.devices.mos1.temperature import at_temperature_arrays, saturation_current_factor
from bridge.netlist.circuit import GROUND, Circuit
from bridge.netlist.variant import at_temperature as circuit_at_temperature
from bridge.netlist.variant import with_values
from bridge.records import record

__all__ = ["BatchArrays", "BatchValues", "SweepArrays", "solve_dc_batch", "solve_dc_sweep_arrays"]

BATCH_ITERATIONS = 8  # Newton iterations of one pass from neighbours before its stragglers start again
BATCH_FAR_ITERATIONS = 40  # iterations of a pass from far starts (the nominal solution, a hand point)
BATCH_STRIDES = (16,)  # a sweep without starts solves every 16th point first
BATCH_PASSES = 8  # passes from the nearest solved neighbours, before the scalar solver
# Card parameters a batch sets per row directly on the model (no derivation reads them); any other
# (TOX, NSUB, UO, NSS, TPG), or any on a card whose values are derived, rebuilds the card per row.
_DIRECT_PARAMETERS = frozenset({"vto", "kp", "gamma", "phi", "lambda", "ld", "is", "js", "tnom"})
_MODEL_FIELDS = {"vto": "vto", "kp": "kp", "gamma": "gamma", "phi": "phi", "lambda": "lambda_", "ld": "ld",
                 "tnom": "tnom_celsius"}  # fmt: skip


@record(frozen=True)
class BatchValues:
    """What changes from row to row of a batch (`count` rows); everything not named keeps the
    circuit's value. Arrays have one value per row (a scalar is taken for every row).

    ``sources``: independent V/I source name → DC value; ``resistors``: resistor name →
    resistance in Ω (as the card's value: M still divides it); ``parameters``: MOSFET element
    name → level-1 card parameter (``devices/mos1/params.py`` names and aliases: vto, kp,
    lambda, gamma, phi, is, ...) → card value, before the temperature phase; ``temperature``:
    the circuit temperature in °C (``.temp``), None for the circuit's own. Names match ignoring
    case; ``solve_dc_batch`` refuses a name the circuit does not have (ValueError naming it)."""

    count: int
    sources: Mapping[str, np.ndarray] = field(default_factory=dict)
    resistors: Mapping[str, np.ndarray] = field(default_factory=dict)
    parameters: Mapping[str, Mapping[str, np.ndarray]] = field(default_factory=dict)
    temperature: np.ndarray | None = None

    def __post_init__(self) -> None:
        if isinstance(self.count, bool) or not isinstance(self.count, (int, np.integer)) or self.count < 0:
            raise ValueError(f"count must be a whole number of rows, not {self.count!r}")

    def column(self, values: object, what: str) -> np.ndarray:
        """`values` as one float per row; ValueError naming `what` when it has another length."""
        array = np.asarray(values, dtype=float)
        if array.ndim == 0:
            return np.full(self.count, float(array))
        if array.shape != (self.count,):
            raise ValueError(f"{what}: {array.size} values for {self.count} rows")
        return array

    @property
    def sources_only(self) -> bool:
        return not self.resistors and not self.parameters and self.temperature is None


@record(frozen=True)
class BatchArrays:
    """Operating points of a batch, solved together: ``nodes`` each node's voltage per row
    (ground included); ``solved`` which rows have a solution (NaN elsewhere); ``vectorised``
    which of them the vectorised Newton gave (the rest came from the scalar solver); ``devices``
    each MOSFET's channel quantities per row; ``branches`` the branch currents (V sources,
    inductors, E and H sources) per row, SPICE's sign (n+ through the element to n−)."""

    nodes: dict[str, np.ndarray]
    solved: np.ndarray
    vectorised: np.ndarray
    caveats: tuple[str, ...]
    devices: dict[str, ArrayPoint] = field(default_factory=dict)
    branches: dict[str, np.ndarray] = field(default_factory=dict)
    source_values: dict[str, np.ndarray] = field(default_factory=dict)

    def device(self, name: str) -> ArrayPoint:
        """A MOSFET's channel quantities at every row, by element name ignoring case."""
        return self.devices[_lookup(self.devices, name)]

    def voltage(self, node: str) -> np.ndarray:
        """A node's voltages by name, ignoring case (``gnd`` is ground)."""
        key = node.lower()
        return self.nodes[GROUND if key == "gnd" else key]

    def node_voltages(self, k: int) -> dict[str, float]:
        """Row `k`'s node voltages, as ``OperatingPoint.node_voltages``."""
        return {node: float(values[k]) for node, values in self.nodes.items()}

    def source_current(self, name: str) -> np.ndarray:
        """An independent source's current per row, SPICE's sign: a V source's branch current
        (n+ through the source to n−), an I source's own value."""
        if any(key.lower() == name.lower() for key in self.branches):
            return self.branches[_lookup(self.branches, name)]
        return self.source_values[_lookup(self.source_values, name)]


@record(frozen=True)
class SweepArrays(BatchArrays):
    """A batch that is a sweep: ``x`` the swept source's values, one per row."""

    x: np.ndarray = field(default_factory=lambda: np.zeros(0))


# --- the batch compiled ----------------------------------------------------------------------


class _RowMosfet(NamedTuple):
    """One MOSFET's values for the batch's rows: each a float (the same for every row) or an
    array with one value per row. Terminals as full-vector indices and kept positions."""

    name: str
    terminals: tuple[int, int, int, int]  # drain, gate, source, bulk in the full vector
    places: tuple[int, int, int, int]  # the same in the kept system (−1: ground)
    polarity: int
    vto: object
    gamma: object
    phi: object
    lambda_: object
    gain: object
    drain_saturation_current: object
    source_saturation_current: object
    thermal_voltage: object
    drain_vcrit: object
    source_vcrit: object
    junctions: bool
    model: Level1Model
    geometry: Level1Geometry

    def take(self, rows: np.ndarray) -> _RowMosfet:
        """These values for a subset of rows."""
        return self._replace(**{name: _take(getattr(self, name), rows) for name in _PER_ROW})


_PER_ROW = ("vto", "gamma", "phi", "lambda_", "gain", "drain_saturation_current", "source_saturation_current",
            "thermal_voltage", "drain_vcrit", "source_vcrit")  # fmt: skip


def _take(value: object, rows: np.ndarray) -> object:
    return value[rows] if isinstance(value, np.ndarray) and value.ndim else value


class _Linear(NamedTuple):
    """The reduced linear system for the batch's rows: ``matrix`` (k, k) shared or (rows, k, k);
    ``rhs`` (rows, k) the sources' part; eliminated unknowns = ``recover_base`` − kept ·
    ``recover_kept`` (shared (e, k) or per row (rows, e, k))."""

    matrix: np.ndarray
    rhs: np.ndarray
    recover_base: np.ndarray
    recover_kept: np.ndarray

    def take(self, rows: np.ndarray) -> _Linear:
        per_row = self.matrix.ndim == 3
        return _Linear(
            self.matrix[rows] if per_row else self.matrix,
            self.rhs[rows],
            self.recover_base[rows],
            self.recover_kept[rows] if per_row else self.recover_kept,
        )


class _Batch(NamedTuple):
    circuit: Circuit
    net: _Network
    values: BatchValues
    sources: np.ndarray  # (rows, sources): every independent source's value per row
    kept: np.ndarray
    eliminated: np.ndarray
    linear: _Linear | None  # None: the network is solved row by row (diodes, no dense reduction)
    mosfets: tuple[_RowMosfet, ...]
    floor: np.ndarray  # the tight absolute tolerance of each unknown (ground first)

    @property
    def count(self) -> int:
        return self.values.count


def _prepare(circuit: Circuit, values: BatchValues) -> _Batch:
    """Compile the circuit once and the batch's values onto it. ValueError for a name the
    circuit does not have, or a column of the wrong length."""
    net = _build_network(circuit, level1_model)
    count = values.count
    sources = np.tile(net.source_defaults, (count, 1))
    for name, column in values.sources.items():
        k = next((k for k, source in enumerate(net.source_names) if source.lower() == name.lower()), None)
        if k is None:
            raise ValueError(f"`{name}` is not an independent source of this circuit")
        sources[:, k] = values.column(column, name)
    resistors = {}
    for name, column in values.resistors.items():
        element = circuit.element(name)
        if element is None or element.kind != "resistor":
            raise ValueError(f"`{name}` is not a resistor of this circuit")
        resistors[element.name] = values.column(column, name)
    by_element = {mos.name.lower(): mos for mos in net.mosfets}
    parameters: dict[str, dict[str, np.ndarray]] = {}
    for name, changes in values.parameters.items():
        if name.lower() not in by_element:
            raise ValueError(f"`{name}` is not a MOSFET of this circuit")
        row: dict[str, np.ndarray] = {}
        for key, column in changes.items():
            canonical = canonical_name(key)
            if canonical not in KNOWN_PARAMETERS or canonical == "level":
                raise ValueError(f"`{key}` is not a level-1 card parameter this batch can vary (MOSFET `{name}`)")
            row[canonical] = values.column(column, f"{name} {key}")
        parameters[by_element[name.lower()].name] = row
    temperature = None if values.temperature is None else values.column(values.temperature, "temperature")

    reduction = net.plain_reduction
    dense = isinstance(net.linear, np.ndarray) and all(isinstance(row, tuple) for row in reduction.matrix)
    kept = np.array(reduction.kept, dtype=int)
    eliminated = np.array(reduction.eliminated, dtype=int)
    linear = None
    if count and dense and not net.diodes:
        linear = _linear_rows(circuit, net, sources, resistors) if resistors else _shared_linear(net, sources)
    position = reduction.position
    mosfets = tuple(
        _row_mosfet(circuit, mos, position, count, parameters.get(mos.name, {}), temperature)
        for mos in net.mosfets
    )
    _, tight_floor = net.newton_floors
    return _Batch(circuit, net, values, sources, kept, eliminated, linear, mosfets, np.array(tight_floor))


def _shared_linear(net: _Network, sources: np.ndarray) -> _Linear:
    """Only sources vary: the network's own reduction, its right-hand side per row."""
    reduction = net.plain_reduction
    size = len(reduction.kept)
    matrix = np.array(reduction.matrix, dtype=float).reshape(size, size)
    recover_kept = np.array(reduction.recover_kept, dtype=float).reshape(len(reduction.eliminated), size)
    recover_base = sources @ reduction.recover_sources.T if reduction.eliminated else np.zeros((len(sources), 0))
    return _Linear(matrix, sources @ reduction.source_map.T, recover_base, recover_kept)


def _linear_rows(circuit: Circuit, net: _Network, sources: np.ndarray, resistors: Mapping[str, np.ndarray]) -> _Linear:
    """Resistors vary: each row's MNA matrix (the network's, each varied resistor's conductance
    moved to the row's), reduced on the same kept unknowns as the network's own reduction. When
    no varied resistor touches an eliminated unknown, only the kept block changes and the
    network's reduction is shared; else every row's eliminated block is factored, all rows at
    once (``_solve_entries``)."""
    count = sources.shape[0]
    reduction = net.plain_reduction
    kept = np.array(reduction.kept, dtype=int)
    rest = np.array(reduction.eliminated, dtype=int)
    size = kept.size
    order = np.concatenate((kept, rest))
    place = {int(index): k for k, index in enumerate(order)}  # ground has no place
    nominal = net.linear[np.ix_(order, order)]
    full = np.broadcast_to(nominal, (count, *nominal.shape)).copy()
    index = {GROUND: 0, **{node: k + 1 for k, node in enumerate(net.nodes)}}
    touches_rest = False
    for name, resistance in resistors.items():
        element = circuit.element(name)
        multiplier = float(element.params.get("m", 1.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            resistance = np.where(resistance == 0.0, ZERO_RESISTANCE, resistance)
            change = 1.0 / (resistance / multiplier) - 1.0 / _nominal_resistance(element)
        a, c = (place.get(index[node]) for node in element.nodes[:2])
        touches_rest = touches_rest or any(end is not None and end >= size for end in (a, c))
        for i, j, sign in ((a, a, 1.0), (c, c, 1.0), (a, c, -1.0), (c, a, -1.0)):
            if i is not None and j is not None:
                full[:, i, j] += sign * change
    columns = net.source_columns
    kk = full[:, :size, :size]
    recover_sources = np.asarray(reduction.recover_sources).reshape(rest.size, columns.shape[1])
    if not touches_rest:  # the eliminated part is the network's: its reduction, the kept block moved
        base_matrix = np.array(reduction.matrix, dtype=float).reshape(size, size)
        matrix = base_matrix + (kk - nominal[:size, :size])
        recover_kept = np.array(reduction.recover_kept, dtype=float).reshape(rest.size, size)
        recover_base = sources @ recover_sources.T if rest.size else np.zeros((count, 0))
        return _Linear(matrix, sources @ reduction.source_map.T, recover_base,
                       np.broadcast_to(recover_kept, (count, rest.size, size)))  # fmt: skip
    # Every entry of the reordered matrix as a float (the same in every row) or an array per row.
    varied = np.zeros(nominal.shape, dtype=bool)
    for name in resistors:
        ends = [place.get(index[node]) for node in circuit.element(name).nodes[:2]]
        for i in ends:
            for j in ends:
                if i is not None and j is not None:
                    varied[i, j] = True
    entries = [[full[:, i, j].copy() if varied[i, j] else float(nominal[i, j]) for j in range(nominal.shape[1])]
               for i in range(nominal.shape[0])]  # fmt: skip
    source_rest = columns[rest]
    right = [[entries[size + i][j] for j in range(size)] + [float(v) for v in source_rest[i]] for i in range(rest.size)]
    weights = _solve_entries([line[size:] for line in entries[size:]], right, nominal[size:, size:], count)
    on_kept = [line[:size] for line in weights]
    on_sources = [line[size:] for line in weights]
    kr = [line[size:] for line in entries[:size]]
    matrix = np.empty((count, size, size))
    for i in range(size):
        for j in range(size):
            matrix[:, i, j] = _difference(entries[i][j], _dot(kr[i], [on_kept[r][j] for r in range(rest.size)]))
    source_count = columns.shape[1]
    source_map = [[_difference(float(columns[kept[i], s]), _dot(kr[i], [on_sources[r][s] for r in range(rest.size)]))
                   for s in range(source_count)] for i in range(size)]  # fmt: skip
    rhs = np.stack([_combine(source_map[i], sources) for i in range(size)], axis=1)
    recover_base = np.stack([_combine(on_sources[r], sources) for r in range(rest.size)], axis=1)
    recover_kept = np.empty((count, rest.size, size))
    for r in range(rest.size):
        for j in range(size):
            recover_kept[:, r, j] = on_kept[r][j]
    return _Linear(matrix, rhs, recover_base, recover_kept)


def _dot(left: list, right: list):
    """Σ left·right over entries that are floats or arrays, skipping exact zeros."""
    total = 0.0
    for a, b in zip(left, right, strict=True):
        if isinstance(a, float) and a == 0.0 or isinstance(b, float) and b == 0.0:
            continue
        total = total + a * b
    return total


def _difference(a, b):
    return a if isinstance(b, float) and b == 0.0 else a - b


def _combine(weights: list, sources: np.ndarray) -> np.ndarray:
    """Σ weights[s]·sources[:, s] per row (a weight a float or an array per row)."""
    total = np.zeros(sources.shape[0])
    for s, weight in enumerate(weights):
        if not (isinstance(weight, float) and weight == 0.0):
            total = total + weight * sources[:, s]
    return total


def _solve_entries(matrix: list, right: list, nominal: np.ndarray, count: int) -> list:
    """Solve every row's system (entries floats, the same in every row, or arrays per row) by
    Gaussian elimination in the pivot order partial pivoting picks for the circuit's own values
    (`nominal`), skipping the zeros the structure gives; each step over all rows at once.
    A row whose pivot falls below 1e-3 of the nominal one (its order would not be partial
    pivoting's) gives NaN: the batch leaves it to the scalar solver. Returns the solution's
    entries (rows of the unknowns, columns of the right-hand sides)."""
    size = len(matrix)
    work = nominal.astype(float).copy()
    order = list(range(size))
    for j in range(size):  # partial pivoting on the nominal values: the row order
        best = j + int(np.argmax(np.abs(work[order[j:], j])))
        order[j], order[best] = order[best], order[j]
        pivot = work[order[j], j]
        if pivot != 0.0:
            for i in order[j + 1 :]:
                work[i] -= work[i, j] / pivot * work[order[j]]
    a = [list(matrix[i]) for i in order]
    b = [list(right[i]) for i in order]
    reference = [abs(float(work[order[j], j])) for j in range(size)]
    bad = np.zeros(count, dtype=bool)
    with np.errstate(all="ignore"):
        for j in range(size):
            pivot = a[j][j]
            if isinstance(pivot, np.ndarray):
                bad |= ~(np.abs(pivot) >= 1e-3 * reference[j])
            for i in range(j + 1, size):
                if isinstance(a[i][j], float) and a[i][j] == 0.0:
                    continue
                factor = a[i][j] / pivot
                for c in range(j + 1, size):
                    if not (isinstance(a[j][c], float) and a[j][c] == 0.0):
                        a[i][c] = a[i][c] - factor * a[j][c]
                b[i] = [_difference(value, _dot([factor], [pivot_value])) for value, pivot_value in zip(b[i], b[j])]
                a[i][j] = 0.0
        x: list = [None] * size
        for j in range(size - 1, -1, -1):
            row = []
            for m in range(len(b[j])):
                known = _difference(b[j][m], _dot(a[j][j + 1 :], [x[r][m] for r in range(j + 1, size)]))
                row.append(known / a[j][j])
            x[j] = row
    if bad.any():
        x = [[np.where(bad, math.nan, np.broadcast_to(value, (count,))) for value in line] for line in x]
    return x


def _nominal_resistance(element) -> float:
    resistance = _resistance(element)
    return ZERO_RESISTANCE if resistance == 0.0 else resistance


def _row_mosfet(
    circuit: Circuit, mos, position: Sequence[int], count: int, changes: Mapping[str, np.ndarray],
    temperature: np.ndarray | None,
) -> _RowMosfet:
    """One MOSFET's values per row: the placed instance's where the row changes nothing of it,
    else its card with the row's parameters, at the row's device temperature (mos1temp.c on
    arrays), with its bulk junctions' IS and kT/q there (as ``instance.mosfet_instance``)."""
    device = mos.device
    model, geometry = device.model, device.geometry
    element = circuit.element(mos.name)
    terminals = (mos.drain, mos.gate, mos.source, mos.bulk)
    places = tuple(position[t] for t in terminals)
    if not changes and temperature is None:
        return _RowMosfet(
            mos.name, terminals, places, model.polarity, model.vto, model.gamma, model.phi, model.lambda_,
            beta_arrays(model, geometry), device.drain_saturation_current, device.source_saturation_current,
            device.thermal_voltage, device.drain_vcrit, device.source_vcrit, device.junctions, model, geometry,
        )  # fmt: skip
    card = model.nominal or model
    nominal_celsius = circuit.nominal_temperature()
    if changes and (card.derived or not set(changes) <= _DIRECT_PARAMETERS):
        card = _card_rows(device.card, changes, count, nominal_celsius)
    elif changes:
        fields = {_MODEL_FIELDS[key]: column for key, column in changes.items() if key in _MODEL_FIELDS}
        card = replace(card, **fields) if fields else card
    if temperature is None:
        celsius = np.full(count, circuit.device_temperature(element))
    else:
        own = element.params.get("temp")
        offset = element.params.get("dtemp", 0.0)
        celsius = (np.full(count, float(own)) if isinstance(own, (int, float))
                   else temperature + (float(offset) if isinstance(offset, (int, float)) else 0.0))  # fmt: skip
    moved = at_temperature_arrays(card, celsius)
    kelvin = celsius + CELSIUS_TO_KELVIN
    scale = saturation_current_factor(kelvin, np.asarray(card.tnom_celsius, dtype=float) + CELSIUS_TO_KELVIN)
    params = device.card.params
    density = changes.get("js", params.get("js", 0.0)) * scale
    saturation = changes.get("is", params.get("is", DEFAULT_JUNCTION_IS)) * scale * geometry.m
    drain_area, source_area = (float(element.params.get(key, 0.0)) for key in ("ad", "as"))
    if drain_area == 0.0 or source_area == 0.0:
        drain_current = source_current = saturation
    else:
        drain_current = np.where(density == 0.0, saturation, density * drain_area * geometry.m)
        source_current = np.where(density == 0.0, saturation, density * source_area * geometry.m)
    drain_current, source_current = (
        np.broadcast_to(np.asarray(c, float), (count,)) for c in (drain_current, source_current)
    )
    thermal = K_OVER_Q * kelvin
    return _RowMosfet(
        mos.name, terminals, places, moved.polarity, moved.vto, moved.gamma, moved.phi, moved.lambda_,
        beta_arrays(moved, geometry), drain_current, source_current, thermal,
        vcrit_arrays(thermal, drain_current), vcrit_arrays(thermal, source_current), device.junctions, moved, geometry,
    )  # fmt: skip


def _card_rows(card, changes: Mapping[str, np.ndarray], count: int, nominal_celsius: float) -> Level1Model:
    """The card rebuilt per row (``Level1Model.from_card``: derivations from TOX, NSUB, UO...),
    its values stacked into one model with array fields; a row the card refuses gets NaN."""
    fields = {name: np.full(count, math.nan) for name in ("vto", "kp", "gamma", "phi", "lambda_", "ld", "tnom_celsius")}
    last = None
    for k in range(count):
        params = {**card.params, **{key: float(column[k]) for key, column in changes.items()}}
        try:
            model = Level1Model.from_card(card.type, params, nominal_celsius)
        except ValueError:
            continue
        last = model
        for name, column in fields.items():
            column[k] = getattr(model, name)
    if last is None:
        last = Level1Model.from_card(card.type, {**card.params}, nominal_celsius)
    return replace(last, **fields)


# --- Newton on many rows ---------------------------------------------------------------------


def _newton_rows(
    batch: _Batch, rows: np.ndarray, start: np.ndarray, iterations: int, limiting: bool
) -> tuple[np.ndarray, np.ndarray]:
    """``_newton_arrays`` with floating-point warnings off: a diverging row overflows on its way
    out of the batch (it is then left to the next pass or the scalar solver)."""
    with np.errstate(all="ignore"):
        return _newton_arrays(batch, rows, start, iterations, limiting)


def _newton_arrays(
    batch: _Batch, rows: np.ndarray, start: np.ndarray, iterations: int, limiting: bool
) -> tuple[np.ndarray, np.ndarray]:
    """Newton on the reduced system for the batch's `rows`, each from its row of `start` (full
    solution vectors), with ngspice's limiting when `limiting` (for far starts: from a neighbour
    it only slows a forward-biased junction down, pnjlim sending a step down back to vcrit).
    Returns the solution vectors and which rows converged (a step not limited that moved every
    unknown by less than TIGHT_RELTOL of its size plus its tight floor).

    The iteration works on the kept unknowns, one array per unknown (all rows); the eliminated
    ones are recovered for the convergence test of the rows whose kept unknowns have settled."""
    count = rows.size
    result = start.copy()
    converged = np.zeros(count, dtype=bool)
    if not count:
        return result, converged
    linear = batch.linear.take(rows)
    mosfets = [mos.take(rows) for mos in batch.mosfets]
    kept, eliminated, floor = batch.kept, batch.eliminated, batch.floor
    size = kept.size
    gmin = batch.net.gmin
    shared = linear.matrix.ndim == 2
    base = [[float(v) for v in line] for line in linear.matrix] if shared else None
    per_row_matrix = None if shared else [
        [np.ascontiguousarray(linear.matrix[:, i, j]) for j in range(size)] for i in range(size)
    ]
    rhs_base = [np.ascontiguousarray(linear.rhs[:, i]) for i in range(size)]
    recover_base, recover_kept = linear.recover_base, linear.recover_kept
    kept_floor = [float(floor[i]) for i in kept]
    # Where each terminal sits among the kept columns (−1: ground, which is never eliminated).
    place_of = {int(index): place for place, index in enumerate(kept)}
    active = np.arange(count)
    columns = [np.ascontiguousarray(start[:, i]) for i in kept]
    states: list[tuple[np.ndarray, ...] | None] = [None] * len(mosfets)
    for _ in range(iterations):
        rows_now = active.size
        ground = np.zeros(rows_now)
        entries = [line[:] for line in (base if base is not None else per_row_matrix)]
        rhs = rhs_base[:]
        limited = None
        for m, mos in enumerate(mosfets):
            polarity = mos.polarity
            vd, vg, vs, vb = (columns[place_of[t]] if t else ground for t in mos.terminals)
            vgs, vds, vbs = polarity * (vg - vs), polarity * (vd - vs), polarity * (vb - vs)
            vbd = vbs - vds
            state = states[m]
            if state is not None and limiting:
                far = needs_limiting(state, vgs, vds, vbs, mos.source_vcrit, mos.drain_vcrit)
                if far.any():
                    at = np.flatnonzero(far)
                    old = tuple(column[at] for column in state)
                    if mos.junctions:
                        new = limit_arrays(old, vgs[at], vds[at], vbs[at], _take(mos.thermal_voltage, at),
                                           _take(mos.source_vcrit, at), _take(mos.drain_vcrit, at))  # fmt: skip
                    else:
                        new = limit_channel_arrays(old, vgs[at], vds[at], vbs[at])
                    # Limited: a junction step clipped, or a voltage moved.
                    changed = new[4] | _moved(new[0], vgs[at]) | _moved(new[1], vds[at]) | _moved(new[2], vbs[at])
                    vgs, vds, vbs, vbd = vgs.copy(), vds.copy(), vbs.copy(), vbd.copy()
                    vgs[at], vds[at], vbs[at], vbd[at] = new[0], new[1], new[2], new[3]
                    if limited is None:
                        limited = np.zeros(rows_now, dtype=bool)
                    limited[at] |= changed
            point = channel_arrays(polarity, mos.vto, mos.gamma, mos.phi, mos.lambda_, mos.gain, vgs, vds, vbs)
            states[m] = (vgs, vds, vbs, vbd, point.vth)
            gd, gg, gs, gb = point.conductances
            offset = point.drain_current - polarity * (gd * vds + gg * vgs + gb * vbs)
            pd, pg, ps, pb = mos.places
            for row, sign in ((pd, 1.0), (ps, -1.0)):
                if row < 0:
                    continue
                line = entries[row]
                for column, conductance in ((pd, gd), (pg, gg), (ps, gs), (pb, gb)):
                    if column >= 0:
                        line[column] = line[column] + conductance if sign > 0 else line[column] - conductance
                rhs[row] = rhs[row] - offset if sign > 0 else rhs[row] + offset
            if mos.junctions:
                for far_place, voltage, saturation in ((pd, vbd, mos.drain_saturation_current),
                                                       (ps, vbs, mos.source_saturation_current)):  # fmt: skip
                    if pb < 0 and far_place < 0:
                        continue
                    current, conductance = junction_current_arrays(voltage, saturation, gmin, mos.thermal_voltage)
                    _stamp_pair(entries, rhs, pb, far_place, conductance,
                                polarity * (current - conductance * voltage))  # fmt: skip
        solution = _solve_small(entries, rhs, size, rows_now)
        # The kept unknowns' test first; the eliminated ones only for the rows that pass it.
        finite = np.ones(rows_now, dtype=bool)
        settled = np.ones(rows_now, dtype=bool) if limited is None else ~limited
        for new_value, old_value, tolerance in zip(solution, columns, kept_floor):
            finite &= np.isfinite(new_value)
            size_of = np.maximum(np.abs(new_value), np.abs(old_value))
            settled &= np.abs(new_value - old_value) <= TIGHT_RELTOL * size_of + tolerance
        settled &= finite
        if eliminated.size and settled.any():
            at = np.flatnonzero(settled)
            new_kept = np.stack([value[at] for value in solution], axis=1)
            old_kept = np.stack([value[at] for value in columns], axis=1)
            if shared:
                new_rest = recover_base[at] - new_kept @ recover_kept.T
                old_rest = recover_base[at] - old_kept @ recover_kept.T
            else:
                new_rest = recover_base[at] - np.einsum("nij,nj->ni", recover_kept[at], new_kept)
                old_rest = recover_base[at] - np.einsum("nij,nj->ni", recover_kept[at], old_kept)
            rest_ok = (np.abs(new_rest - old_rest) <= TIGHT_RELTOL * np.maximum(np.abs(new_rest), np.abs(old_rest))
                       + floor[eliminated]).all(axis=1) & np.isfinite(new_rest).all(axis=1)  # fmt: skip
            settled[at] = rest_ok
            done = active[at[rest_ok]]
            result[done[:, None], kept] = new_kept[rest_ok]
            result[done[:, None], eliminated] = new_rest[rest_ok]
            converged[done] = True
        elif settled.any():
            done = active[settled]
            result[done[:, None], kept] = np.stack([value[settled] for value in solution], axis=1)
            converged[done] = True
        going = finite & ~settled
        if not going.any():
            break
        if going.all():
            columns = solution
            continue
        active = active[going]
        columns = [value[going] for value in solution]
        states = [tuple(column[going] for column in state) for state in states]
        if not shared or any(isinstance(getattr(mos, name), np.ndarray) for mos in mosfets for name in _PER_ROW):
            at = np.flatnonzero(going)
            mosfets = [mos.take(at) for mos in mosfets]
            if not shared:
                per_row_matrix = [[value[at] for value in line] for line in per_row_matrix]
                recover_kept = recover_kept[at]
        rhs_base = [value[going] for value in rhs_base]
        recover_base = recover_base[going]
    return result, converged


def _moved(limited: np.ndarray, given: np.ndarray) -> np.ndarray:
    """Where limiting moved a voltage by more than TIGHT_VNTOL (the limiters' own rounding, as
    vds through vgs − vgd, is far below it): an evaluation that did not sit at the node voltages."""
    return np.abs(limited - given) > TIGHT_VNTOL


def _stamp_pair(entries: list, rhs: list, a: int, c: int, g: np.ndarray, offset: np.ndarray) -> None:
    """A two-terminal linearised element (conductance `g`, current offset) between kept places
    `a` and `c` (−1: ground), as ``interface.stamp_pair`` on rows of systems."""
    if a >= 0:
        entries[a][a] = entries[a][a] + g
        rhs[a] = rhs[a] - offset
        if c >= 0:
            entries[a][c] = entries[a][c] - g
            entries[c][a] = entries[c][a] - g
    if c >= 0:
        entries[c][c] = entries[c][c] + g
        rhs[c] = rhs[c] + offset


def _rows(value, rows: int) -> np.ndarray:
    """`value` as one float per row (an array already, but for a system without any array)."""
    return value if isinstance(value, np.ndarray) and value.shape == (rows,) else np.full(rows, value, dtype=float)


def _solve_small(entries: list, rhs: list, size: int, rows: int) -> list[np.ndarray]:
    """Every row's kept system, as one array per unknown: by Cramer's rule up to 3 unknowns (a
    handful of array operations), numpy's batched LU beyond. A singular row gives inf or NaN
    (it then leaves the batch)."""
    if size == 1:
        return [_rows(rhs[0] / entries[0][0], rows)]
    if size == 2:
        (a, b), (c, d) = entries
        e, f = rhs
        det = a * d - b * c
        return [_rows((e * d - b * f) / det, rows), _rows((a * f - e * c) / det, rows)]
    if size == 3:
        (a, b, c), (d, e, f), (g, h, i) = entries
        r0, r1, r2 = rhs
        m0, m1, m2 = e * i - f * h, d * i - f * g, d * h - e * g
        det = a * m0 - b * m1 + c * m2
        n0, n1, n2 = r1 * i - f * r2, d * r2 - r1 * g, e * r2 - r1 * h
        return [
            _rows((r0 * m0 - b * n0 + c * (r1 * h - e * r2)) / det, rows),
            _rows((a * n0 - r0 * m1 + c * n1) / det, rows),
            _rows((a * n2 - b * n1 + r0 * m2) / det, rows),
        ]
    matrix = np.empty((rows, size, size))
    for i, line in enumerate(entries):
        for j, value in enumerate(line):
            matrix[:, i, j] = value
    vector = np.stack(np.broadcast_arrays(*rhs), axis=1)
    try:
        solution = np.linalg.solve(matrix, vector[..., None])[..., 0]
    except np.linalg.LinAlgError:  # one singular row: the rows one at a time, the singular ones NaN
        solution = np.full((rows, size), math.nan)
        for k in range(rows):
            with contextlib.suppress(np.linalg.LinAlgError):
                solution[k] = np.linalg.solve(matrix[k], vector[k])
    return [np.ascontiguousarray(solution[:, i]) for i in range(size)]


# --- the scalar solver for the rows the batch leaves -----------------------------------------


def _row_circuit(batch: _Batch, k: int) -> Circuit:
    """Row `k` as a Circuit of its own: its values written in (each MOSFET whose card values
    change gets a card of its own), for the scalar solver."""
    circuit, values = batch.circuit, batch.values
    changes = {name: float(batch.sources[k, j]) for j, name in enumerate(batch.net.source_names)}
    changes.update({name: float(values.column(column, name)[k]) for name, column in values.resistors.items()})
    circuit = with_values(circuit, changes)
    if values.temperature is not None:
        circuit = circuit_at_temperature(circuit, float(values.column(values.temperature, "temperature")[k]))
    if values.parameters:
        models = dict(circuit.models)
        elements = list(circuit.elements)
        for name, params in values.parameters.items():
            at = next(i for i, e in enumerate(elements) if e.name.lower() == name.lower())
            element = elements[at]
            card = circuit.model(element.model or "")
            own = f"{card.name}.{element.name}"
            row = {canonical_name(key): float(values.column(column, name)[k]) for key, column in params.items()}
            models[own.lower()] = replace(card, name=own, params={**card.params, **row})
            elements[at] = replace(element, model=own)
        circuit = replace(circuit, models=models, elements=tuple(elements))
    return circuit


def _scalar_row(batch: _Batch, k: int, guess: np.ndarray | None) -> np.ndarray | None:
    """Row `k` by the scalar solver (from `guess`, a full solution vector, then afresh): its
    solution vector, or None when it has none."""
    net = batch.net
    initial = None
    if guess is not None and np.isfinite(guess).all():
        initial = {node: float(guess[i + 1]) for i, node in enumerate(net.nodes)}
    if batch.values.sources_only:
        for begin in (initial, None) if initial is not None else (None,):
            try:
                state, fresh = _start(net, begin)
                return _solve(net, batch.sources[k], state, fresh, METHODS).state.x
            except NoConvergence:
                continue
        return None
    try:
        circuit = _row_circuit(batch, k)
    except ValueError:
        return None
    for begin in (initial, None) if initial is not None else (None,):
        try:
            point = solve_operating_point(circuit, initial=begin)
        except DcSolveError:
            continue
        except ValueError:  # the row's card or temperature gives no model (PHI(T) ≤ 0, ...)
            return None
        x = np.zeros(net.size)
        for i, node in enumerate(net.nodes):
            x[i + 1] = point.node_voltages[node]
        for j, name in enumerate(net.branch_names):
            x[1 + len(net.nodes) + j] = point.branch_currents[name]
        return x
    return None


def _nominal_start(batch: _Batch) -> np.ndarray:
    """The circuit's own operating point (the scalar solver), every row's start; zeros if it has none."""
    net = batch.net
    try:
        state, fresh = _start(net, None)
        return _solve(net, net.source_defaults, state, fresh, METHODS).state.x
    except NoConvergence:
        return np.zeros(net.size)


def _starts(batch: _Batch, start: np.ndarray | Mapping[str, float] | None) -> np.ndarray:
    """Each row's starting solution vector: `start` as (rows, nodes) node voltages in
    ``circuit.nodes()`` order, or node → value(s), the rest from the circuit's own solution."""
    net, count = batch.net, batch.count
    if isinstance(start, np.ndarray):
        array = np.asarray(start, dtype=float)
        if array.shape != (count, len(net.nodes)):
            raise ValueError(
                f"start: expected {count} rows of {len(net.nodes)} node voltages, got shape {array.shape}"
            )
        starts = np.zeros((count, net.size))
        starts[:, 1 : 1 + len(net.nodes)] = array
        return starts
    starts = np.tile(_nominal_start(batch), (count, 1))
    for node, value in (start or {}).items():
        key = node.lower()
        if key not in net.nodes:
            raise ValueError(f"start names node `{node}`, which is not in the circuit")
        starts[:, 1 + net.nodes.index(key)] = batch.values.column(value, f"start {node}")
    return starts


# --- the results -----------------------------------------------------------------------------


def _arrays(batch: _Batch, solutions: np.ndarray, solved: np.ndarray, vectorised: np.ndarray) -> dict:
    net = batch.net
    nodes = {GROUND: np.where(solved, 0.0, math.nan)}
    for i, node in enumerate(net.nodes):
        nodes[node] = solutions[:, i + 1]
    branches = {name: solutions[:, 1 + len(net.nodes) + j] for j, name in enumerate(net.branch_names)}
    devices = {}
    with np.errstate(invalid="ignore"):  # unsolved rows are NaN
        for mos in batch.mosfets:
            d, g, s, b = (solutions[:, t] for t in mos.terminals)
            polarity = mos.polarity
            devices[mos.name] = channel_arrays(
                polarity, mos.vto, mos.gamma, mos.phi, mos.lambda_, mos.gain,
                polarity * (g - s), polarity * (d - s), polarity * (b - s),
            )  # fmt: skip
    source_values = {name: batch.sources[:, j] for j, name in enumerate(net.source_names)}
    return dict(nodes=nodes, solved=solved, vectorised=vectorised, caveats=net.caveats, devices=devices,
                branches=branches, source_values=source_values)  # fmt: skip


def _far_pass(
    batch: _Batch, rows: np.ndarray, starts: np.ndarray, solutions: np.ndarray, solved: np.ndarray,
    vectorised: np.ndarray,
) -> None:
    """`rows` from their far `starts`: a pass with limiting, then the rows it left from the same
    starts without (a forward-biased junction converges faster so); solved rows written in."""
    for limiting, iterations in ((True, BATCH_FAR_ITERATIONS), (False, 2 * BATCH_ITERATIONS)):
        left = ~solved[rows]
        rows, starts = rows[left], starts[left]
        if not rows.size:
            return
        found, converged = _newton_rows(batch, rows, starts, iterations, limiting)
        solutions[rows[converged]] = found[converged]
        solved[rows[converged]] = True
        vectorised[rows[converged]] = True


def solve_dc_batch(
    circuit: Circuit, values: BatchValues, *, start: np.ndarray | Mapping[str, float] | None = None
) -> BatchArrays:
    """Every row of `values` solved at once: one vectorised Newton with ngspice's limiting, every
    row from `start` (node voltages: an array of rows in ``circuit.nodes()`` order, or node →
    value) or else from the circuit's own operating point; rows it leaves, by the scalar solver.

    Raises ValueError for a name the circuit does not have; UnsupportedElement, InvalidElement or
    SingularCircuit as solve_operating_point (they hold for every row).
    """
    batch = _prepare(circuit, values)
    count = values.count
    starts = _starts(batch, start)
    solutions = np.full((count, batch.net.size), math.nan)
    solved = np.zeros(count, dtype=bool)
    vectorised = np.zeros(count, dtype=bool)
    if batch.linear is not None:
        _far_pass(batch, np.arange(count), starts, solutions, solved, vectorised)
    for k in np.flatnonzero(~solved).tolist():
        x = _scalar_row(batch, k, starts[k])
        if x is not None:
            solutions[k], solved[k] = x, True
    return BatchArrays(**_arrays(batch, solutions, solved, vectorised))


def _neighbour_starts(x: np.ndarray, solutions: np.ndarray, solved: np.ndarray, todo: np.ndarray) -> np.ndarray:
    """Starts for the sweep points `todo` from the solved ones: on the line through the solved
    neighbours on either side (by the swept value), else the nearest solved point's solution."""
    done = np.flatnonzero(solved)
    after = np.searchsorted(done, todo).clip(max=done.size - 1)
    above, below = done[after], done[(after - 1).clip(min=0)]
    starts = solutions[np.where(np.abs(below - todo) < np.abs(above - todo), below, above)]
    between = (below < todo) & (todo < above)
    if between.any():
        b, a, t = below[between], above[between], todo[between]
        weight = ((x[t] - x[b]) / (x[a] - x[b]))[:, None]
        line = solutions[b] + weight * (solutions[a] - solutions[b])
        starts[between] = np.where(np.isfinite(line), line, starts[between])
    return starts


def solve_dc_sweep_arrays(
    circuit: Circuit,
    source: str,
    values: Sequence[float],
    *,
    start: Mapping[str, float] | np.ndarray | None = None,
) -> SweepArrays:
    """The operating points of `source` stepped through `values`, solved all at once.

    `start` is a guess for the first point (node → voltage), or an array of rows, one per point,
    of node voltages in ``circuit.nodes()`` order (the hand column's points; a row with NaN has
    none). Points with a start are solved first in one vectorised Newton with limiting; without
    any, the first point is solved by the scalar solver and every 16th from it. Then every point
    left starts from its nearest solved neighbour, in vectorised passes, and what is left is
    solved one by one by the scalar solver from a neighbour. Networks without a dense reduction
    or with diodes are solved one by one throughout.
    Raises ValueError for an unknown source; UnsupportedElement, InvalidElement or
    SingularCircuit, as solve_operating_point.
    """
    x_values = np.asarray(values, dtype=float)
    count = x_values.size
    batch = _prepare(circuit, BatchValues(count, sources={source: x_values}))
    net = batch.net
    solutions = np.full((count, net.size), math.nan)
    solved = np.zeros(count, dtype=bool)
    vectorised = np.zeros(count, dtype=bool)
    hand = isinstance(start, np.ndarray)
    first = None if hand else start

    def scalar(k: int, guess: np.ndarray | None) -> bool:
        if guess is None and first:
            guess = _start(net, first)[0].x  # ValueError for a node the circuit does not have
        x = _scalar_row(batch, k, guess)
        if x is None:
            return False
        solutions[k] = x
        return True

    if batch.linear is not None:
        strides: tuple[int, ...] = (1,) * BATCH_PASSES
        if hand:
            starts = _starts(batch, np.asarray(start, dtype=float))
            rows = np.flatnonzero(np.isfinite(starts).all(axis=1))
            _far_pass(batch, rows, starts[rows], solutions, solved, vectorised)
        if not solved.any():
            solved[0] = scalar(0, None)
            strides = (*BATCH_STRIDES, *strides)
        for pass_number, stride in enumerate(strides if solved.any() else ()):
            todo = np.flatnonzero(~solved[::stride]) * stride
            if not todo.size:
                if stride == 1:
                    break
                continue
            starts = _neighbour_starts(x_values, solutions, solved, todo)
            if pass_number == 0 and stride > 1:  # from point 0 alone: far, limited
                _far_pass(batch, todo, starts, solutions, solved, vectorised)
                continue
            found, converged = _newton_rows(batch, todo, starts, BATCH_ITERATIONS, False)
            solutions[todo[converged]] = found[converged]
            solved[todo[converged]] = True
            vectorised[todo[converged]] = True
            if stride == 1 and not converged.any():
                break
    for k in np.flatnonzero(~solved).tolist():
        previous = np.flatnonzero(solved[:k])
        solved[k] = scalar(k, solutions[previous[-1]] if previous.size else None)
    return SweepArrays(**_arrays(batch, solutions, solved, vectorised), x=x_values)
