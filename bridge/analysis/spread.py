"""`biasbridge spread`, numbers only: tolerance bands → corner rows and Monte-Carlo rows, each set
solved by the batch solver (``dcbatch.solve_dc_batch``) in one call per CHUNK_ROWS rows, then the
extremes with the point that gives each, the statistics, the yields and the sensitivities.
Imports no sim or report.

What is varied (``Band``): a resistor's or independent source's value, a level-1 card's VTO, KP or
LAMBDA, the temperature. A model's band is one draw per row for every MOSFET using that model
(one lot). Temperature reaches the MOSFETs through the level-1 temperature phase
(devices/mos1/temperature.py, ngspice's mos1temp.c) and resistors with TC1/TC2 through ngspice's
resistor rule R(T) = R·(1 + TC1·(T − TNOM) + TC2·(T − TNOM)²) (checked with `ngspice -b`).

The corners. With up to FULL_CORNER_LIMIT bands every combination of band ends (2^k) is solved,
with the nominal point and each band alone at its ends (the one-at-a-time points). Beyond, the
one-at-a-time points are solved first and, for each quantity and direction, the corner that their
signs point to (each band at the end that moved the quantity that way) is solved: the extremes
are then over that smaller set only, and ``CornerSet.how`` says so. An extreme is never called
more than "the extreme over the points searched": a quantity that is not monotone in a band can
peak inside it (``SpreadResult`` compares the Monte-Carlo extremes with the corners').

Monte Carlo: numpy's ``default_rng(seed)``; one draw matrix of shape (samples, bands), column j
for band j in ``bands`` order: ``rng.random`` for uniform (low + (high − low)·u), or
``rng.standard_normal`` for normal (the band read as ±3σ around its middle, then clipped to the
band: the 0.27 % of draws beyond ±3σ sit on its ends).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import field

import numpy as np

from ..netlist.circuit import Circuit
from ..records import record
from .dcsolve import solve_operating_point

FULL_CORNER_LIMIT = 12  # bands: up to 2^12 = 4096 corners are all solved
UNMOVED_ENUMERATED = 3  # beyond the limit: bands a quantity does not move at nominal, tried at both ends
SATURATION = 2  # region code of ask.REGIONS ("cutoff", "triode", "saturation")
CHUNK_ROWS = 100_000  # Monte-Carlo rows solved per call (bounds the solver's working memory)
PERCENTILES = (0.1, 99.9)


@record(frozen=True)
class Band:
    """One varied quantity: `label` as shown (`RD`, `NCH.kp`, `temperature`), `kind` resistor,
    source, model or temperature, `target` the element or model name, `parameter` vto/kp/lambda for
    a model, its nominal value and band ends (Ω, V or A, the card's unit, °C), `text` the tolerance
    as given (`±5 %`)."""

    label: str
    kind: str
    target: str
    parameter: str | None
    nominal: float
    low: float
    high: float
    text: str

    @property
    def middle(self) -> float:
        return (self.low + self.high) / 2.0

    def end_text(self, end: int) -> str:
        """This band at an end (−1 low, +1 high) in words: `RD +5 %`, `NCH.vto −0.05 V`, `125 °C`."""
        value = self.low if end < 0 else self.high
        if self.kind == "temperature":
            return f"{value:g} °C"
        sign = "+" if end > 0 else "−"
        if self.parameter == "vto":
            return f"{self.label} {sign}{abs(value - self.nominal):.4g} V"
        return f"{self.label} {sign}{self.text.lstrip('±')}"


def resistor_temperature_coefficients(circuit: Circuit) -> dict[str, tuple[float, float, float | None, float]]:
    """Resistor name → (TC1, TC2, own TEMP or None, DTEMP) for the resistors whose card gives TC1
    or TC2. Raises ValueError for a `tc` written in a form not handled here."""
    found: dict[str, tuple[float, float, float | None, float]] = {}
    for element in circuit.elements_of("resistor"):
        params = element.params
        if "tc" in params:
            raise ValueError(f"{element.name}: `tc=` is not handled by spread; write tc1= and tc2=")
        tc1, tc2 = params.get("tc1", 0.0), params.get("tc2", 0.0)
        if not isinstance(tc1, (int, float)) or not isinstance(tc2, (int, float)):
            raise ValueError(f"{element.name}: TC1/TC2 must be numbers")
        if tc1 or tc2:
            own = params.get("temp")
            offset = params.get("dtemp", 0.0)
            found[element.name] = (
                float(tc1), float(tc2), float(own) if isinstance(own, (int, float)) else None,
                float(offset) if isinstance(offset, (int, float)) else 0.0,
            )  # fmt: skip
    return found


@record(frozen=True)
class Points:
    """A set of rows: each band's value per row (``values[j]`` for band j) and, for corners, each
    row's ends (−1, 0, +1 per band) naming it."""

    values: np.ndarray  # (rows, bands)
    ends: np.ndarray | None = None  # (rows, bands) of −1/0/+1, None for Monte-Carlo samples

    @property
    def count(self) -> int:
        return int(self.values.shape[0])


def point_name(bands: Sequence[Band], ends: Sequence[int]) -> str:
    """A corner in words: its bands at their ends; `nominal` when none is; a one-at-a-time point
    says the others are nominal."""
    parts = [band.end_text(int(end)) for band, end in zip(bands, ends, strict=True) if end]
    if not parts:
        return "nominal"
    if len(parts) == 1 and len(bands) > 1:
        return f"{parts[0]} (others nominal)"
    return ", ".join(parts)


def _values_at(bands: Sequence[Band], ends: np.ndarray) -> np.ndarray:
    low = np.array([b.low for b in bands])
    high = np.array([b.high for b in bands])
    nominal = np.array([b.nominal for b in bands])
    return np.where(ends < 0, low, np.where(ends > 0, high, nominal))


def one_at_a_time(bands: Sequence[Band]) -> Points:
    """The nominal point, then each band alone at its low and its high end."""
    k = len(bands)
    ends = np.zeros((1 + 2 * k, k), dtype=int)
    for j in range(k):
        ends[1 + 2 * j, j] = -1
        ends[2 + 2 * j, j] = 1
    return Points(_values_at(bands, ends), ends)


def all_corners(bands: Sequence[Band]) -> Points:
    """Every combination of band ends (2^k rows), low before high, the first band slowest."""
    ends = np.array(list(itertools.product((-1, 1), repeat=len(bands))), dtype=int).reshape(-1, len(bands))
    return Points(_values_at(bands, ends), ends)


def directed_corners(bands: Sequence[Band], moves: Sequence[np.ndarray]) -> Points:
    """For each quantity's one-at-a-time moves (high-end value − low-end value per band), the
    corner that raises it (each band at the end that raised it) and the one that lowers it. A band
    that did not move the quantity from the nominal point (a supply with the device in saturation
    and λ = 0, say) may still move it elsewhere: up to UNMOVED_ENUMERATED such bands are put at
    both ends in every combination, more stay nominal. Duplicates dropped, in order."""
    seen: dict[tuple[int, ...], None] = {}
    for move in moves:
        values = np.nan_to_num(move)
        scale = float(np.max(np.abs(values))) if values.size else 0.0
        sign = np.where(np.abs(values) <= 1e-12 * scale, 0, np.sign(values)).astype(int)
        unmoved = np.flatnonzero(sign == 0)
        fills = itertools.product((-1, 1), repeat=unmoved.size) if unmoved.size <= UNMOVED_ENUMERATED else [()]
        for fill in fills:
            filled = sign.copy()
            if fill:
                filled[unmoved] = fill
            for direction in (1, -1):
                corner = direction * sign
                corner[unmoved] = filled[unmoved]
                seen.setdefault(tuple(int(s) for s in corner), None)
    ends = np.array(list(seen), dtype=int).reshape(-1, len(bands))
    return Points(_values_at(bands, ends), ends)


def monte_carlo(bands: Sequence[Band], count: int, seed: int, distribution: str) -> Points:
    """`count` samples of the bands (see the module's docstring for the draw)."""
    rng = np.random.default_rng(seed)
    low = np.array([b.low for b in bands])
    high = np.array([b.high for b in bands])
    if distribution == "uniform":
        values = low + (high - low) * rng.random((count, len(bands)))
    elif distribution == "normal":
        middle, sigma = (low + high) / 2.0, (high - low) / 6.0
        values = np.clip(middle + sigma * rng.standard_normal((count, len(bands))), low, high)
    else:
        raise ValueError(f"unknown distribution `{distribution}` (uniform or normal)")
    return Points(values)


# ---------------------------------------------------------------------------------------------
# Solving a set of rows


def batch_values(circuit: Circuit, bands: Sequence[Band], points: Points):  # -> dcbatch.BatchValues
    """The rows as the batch solver takes them: varied resistors (TC1/TC2 applied at the row's
    temperature) and sources, each model band copied to every MOSFET using that model, the
    temperature per row when it is varied."""
    from .dcbatch import BatchValues

    count = points.count
    column = {band.label: points.values[:, j] for j, band in enumerate(bands)}
    temperature = column.get("temperature")
    circuit_temperature = circuit.temperature()
    tnom = circuit.nominal_temperature()
    resistors: dict[str, np.ndarray] = {}
    sources: dict[str, np.ndarray] = {}
    for band in bands:
        if band.kind == "resistor":
            resistors[band.target] = column[band.label]
        elif band.kind == "source":
            sources[band.target] = column[band.label]
    for name, (tc1, tc2, own, offset) in resistor_temperature_coefficients(circuit).items():
        element = circuit.element(name)
        assert element is not None and element.value is not None
        if own is not None:
            celsius: np.ndarray | float = own
        elif temperature is not None:
            celsius = temperature + offset
        else:
            celsius = circuit_temperature + offset
        delta = np.asarray(celsius, dtype=float) - tnom
        value = resistors.get(element.name, np.full(count, element.value))
        resistors[element.name] = value * (1.0 + tc1 * delta + tc2 * delta * delta) * np.ones(count)
    parameters: dict[str, dict[str, np.ndarray]] = {}
    for band in bands:
        if band.kind != "model":
            continue
        for mosfet in circuit.elements_of("mosfet"):
            if (mosfet.model or "").lower() == band.target.lower():
                assert band.parameter is not None
                parameters.setdefault(mosfet.name, {})[band.parameter] = column[band.label]
    return BatchValues(
        count=count, sources=sources, resistors=resistors, parameters=parameters,
        temperature=None if temperature is None else np.asarray(temperature, dtype=float),
    )  # fmt: skip


@record(frozen=True)
class Solved:
    """A set of rows solved: per device drain current and saturation margin (vds − vov) and region
    code, per node the voltage; ``solved`` which rows have a solution (NaN elsewhere)."""

    solved: np.ndarray
    ids: dict[str, np.ndarray]
    margins: dict[str, np.ndarray]
    regions: dict[str, np.ndarray]
    nodes: dict[str, np.ndarray]
    caveats: tuple[str, ...] = ()


def solve_points(circuit: Circuit, bands: Sequence[Band], points: Points, start=None) -> Solved:
    """The rows solved by ``solve_dc_batch`` (one call per CHUNK_ROWS rows)."""
    from .dcbatch import solve_dc_batch

    parts: list[Solved] = []
    for first in range(0, max(points.count, 1), CHUNK_ROWS):
        chunk = Points(points.values[first:first + CHUNK_ROWS])
        arrays = solve_dc_batch(circuit, batch_values(circuit, bands, chunk), start=start)
        devices = {e.name: _device(arrays, e.name) for e in circuit.elements_of("mosfet")}
        solved = np.asarray(arrays.solved, dtype=bool)
        nan = np.where(solved, 1.0, math.nan)
        parts.append(Solved(
            solved=solved,
            ids={name: np.asarray(d.id, dtype=float) * nan for name, d in devices.items()},
            margins={name: (np.asarray(d.vds, dtype=float) - np.asarray(d.vov, dtype=float)) * nan
                     for name, d in devices.items()},
            regions={name: np.where(solved, np.asarray(d.region), -1).astype(np.int8) for name, d in devices.items()},
            nodes={node: np.asarray(v, dtype=float) * nan for node, v in arrays.nodes.items() if node != "0"},
            caveats=tuple(arrays.caveats),
        ))  # fmt: skip
    if len(parts) == 1:
        return parts[0]
    return Solved(
        solved=np.concatenate([p.solved for p in parts]),
        ids={k: np.concatenate([p.ids[k] for p in parts]) for k in parts[0].ids},
        margins={k: np.concatenate([p.margins[k] for p in parts]) for k in parts[0].margins},
        regions={k: np.concatenate([p.regions[k] for p in parts]) for k in parts[0].regions},
        nodes={k: np.concatenate([p.nodes[k] for p in parts]) for k in parts[0].nodes},
        caveats=tuple(dict.fromkeys(c for p in parts for c in p.caveats)),
    )  # fmt: skip


def _device(arrays, name: str):
    for key, point in arrays.devices.items():
        if key.lower() == name.lower():
            return point
    raise KeyError(name)


# ---------------------------------------------------------------------------------------------
# The result


@record(frozen=True)
class Extremes:
    """One quantity over the corners and the samples. `min_corner`/`max_corner` name the point
    searched that gives the extreme (its row in ``SpreadResult.corners``: `min_row`/`max_row`);
    `sample_min`/`sample_max` are the Monte-Carlo extremes."""

    nominal: float
    min: float
    max: float
    min_corner: str
    max_corner: str
    min_row: int
    max_row: int
    mean: float
    std: float
    p_low: float  # 0.1 percentile
    p_high: float  # 99.9 percentile
    sample_min: float
    sample_max: float
    min_named: str = ""  # the corners named by the tolerances that move this value only (``named_corner``)
    max_named: str = ""


@record(frozen=True)
class Sensitivity:
    """One band's one-at-a-time effect on a device: its drain current with the band at the low and
    at the high end (the others nominal), and the difference high − low."""

    band: str
    id_low: float
    id_high: float

    @property
    def delta(self) -> float:
        return self.id_high - self.id_low


@record(frozen=True)
class SpreadResult:
    bands: tuple[Band, ...]
    samples: int
    seed: int
    distribution: str
    corners: Points  # every point searched for the extremes (nominal first)
    corner_names: _Names  # the points' names, made when asked for (corner_names[row])
    how: str  # how the corners were chosen, in words
    corner_solution: Solved
    sample_points: Points
    sample_solution: Solved
    devices: dict[str, dict[str, Extremes]]  # device → "id" / "margin" → extremes
    nodes: dict[str, Extremes]
    saturation_yield: float
    margin_yield: float
    margin_threshold: float
    sensitivity: dict[str, tuple[Sensitivity, ...]]  # device → largest |delta| first
    unsolved_corners: tuple[str, ...] = ()
    unsolved_samples: int = 0
    caveats: tuple[str, ...] = field(default_factory=tuple)
    no_dc_current: tuple[str, ...] = ()  # varied resistors that carry no DC current (by connectivity)
    no_effect: tuple[str, ...] = ()  # other bands that move no value at any corner (all corners solved)


class _Names:
    """The points' names by row, each worded when first asked for (thousands of corners, a few named)."""

    def __init__(self, bands: Sequence[Band], ends: np.ndarray) -> None:
        self.bands, self.ends, self.made = tuple(bands), ends, {}

    def __getitem__(self, row: int) -> str:
        row = int(row)
        if row not in self.made:
            self.made[row] = point_name(self.bands, self.ends[row])
        return self.made[row]

    def __len__(self) -> int:
        return int(self.ends.shape[0])


def _extremes(nominal: float, corner_values: np.ndarray, names: _Names, samples: np.ndarray) -> Extremes:
    finite = np.isfinite(corner_values)
    if finite.any():
        low = int(np.nanargmin(np.where(finite, corner_values, np.inf)))
        high = int(np.nanargmax(np.where(finite, corner_values, -np.inf)))
        min_value, max_value = float(corner_values[low]), float(corner_values[high])
    else:
        low = high = -1
        min_value = max_value = math.nan
    good = samples[np.isfinite(samples)]
    if good.size:
        p_low, p_high = (float(v) for v in np.percentile(good, PERCENTILES))
        mean, std = float(np.mean(good)), float(np.std(good))
        sample_min, sample_max = float(good.min()), float(good.max())
    else:
        p_low = p_high = mean = std = sample_min = sample_max = math.nan
    return Extremes(
        nominal=nominal, min=min_value, max=max_value,
        min_corner=names[low] if low >= 0 else "", max_corner=names[high] if high >= 0 else "",
        min_row=low, max_row=high, mean=mean, std=std, p_low=p_low, p_high=p_high,
        sample_min=sample_min, sample_max=sample_max,
    )  # fmt: skip


def spread(
    circuit: Circuit,
    bands: Sequence[Band],
    *,
    samples: int,
    seed: int,
    distribution: str = "uniform",
    margin_threshold: float = 0.1,
    full_corner_limit: int = FULL_CORNER_LIMIT,
) -> SpreadResult:
    """Corners and Monte Carlo of `circuit` over `bands` (see the module's docstring)."""
    bands = tuple(bands)
    refuse_unusable_temperatures(circuit, bands)
    # The nominal circuit first, by the scalar solver: without an operating point of its own there
    # is nothing to spread, and every corner and sample would go through the scalar solver's whole
    # ladder in turn (minutes for 10,000 rows). Raises NoConvergence (a DcSolveError).
    solve_operating_point(circuit)
    k = len(bands)
    oat = one_at_a_time(bands)
    if k <= full_corner_limit:
        corners = all_corners(bands)
        points = Points(np.vstack([oat.values, corners.values]), np.vstack([oat.ends, corners.ends]))
        solution = solve_points(circuit, bands, points)
        how = (f"all {corners.count} corners of the {k} tolerance{'s' if k != 1 else ''} (each at its low "
               "and high end), the nominal point and each tolerance alone at its ends")  # fmt: skip
    else:
        first = solve_points(circuit, bands, oat)
        moves = [_moves(values) for values in (*first.ids.values(), *first.margins.values(), *first.nodes.values())]
        directed = directed_corners(bands, moves)
        second = solve_points(circuit, bands, directed)
        points = Points(np.vstack([oat.values, directed.values]), np.vstack([oat.ends, directed.ends]))
        solution = _joined(first, second)
        how = (f"{k} tolerances are more than {full_corner_limit}: not all {2 ** k} corners were solved, but "
               f"the nominal point, each tolerance alone at its ends, and the {directed.count} corners those "
               "one-at-a-time results point to (each tolerance at the end that moved a quantity that way; up to "
               f"{UNMOVED_ENUMERATED} tolerances that did not move it, at both ends); the extremes are over these "
               "points only")  # fmt: skip
    assert points.ends is not None
    names = _Names(bands, points.ends)
    sample_points = monte_carlo(bands, samples, seed, distribution)
    sampled = solve_points(circuit, bands, sample_points, start=_nominal_start(solution))
    devices = {
        name: {
            "id": _extremes(float(solution.ids[name][0]), solution.ids[name], names, sampled.ids[name]),
            "margin": _extremes(float(solution.margins[name][0]), solution.margins[name], names,
                                sampled.margins[name]),
        }
        for name in solution.ids
    }  # fmt: skip
    nodes = {
        node: _extremes(float(values[0]), values, names, sampled.nodes[node]) for node, values in solution.nodes.items()
    }
    in_saturation = np.ones(samples, dtype=bool)
    with_margin = np.ones(samples, dtype=bool)
    for name in sampled.regions:
        saturated = sampled.regions[name] == SATURATION
        in_saturation &= saturated
        with np.errstate(invalid="ignore"):
            with_margin &= saturated & (sampled.margins[name] >= margin_threshold)
    sensitivity = {}
    for name, ids in solution.ids.items():
        rows = [_sensitivity(band.label, float(ids[1 + 2 * j]), float(ids[2 + 2 * j])) for j, band in enumerate(bands)]
        rows.sort(key=lambda s: -abs(s.delta) if math.isfinite(s.delta) else 0.0)
        sensitivity[name] = tuple(rows)
    result = SpreadResult(
        bands=bands, samples=samples, seed=seed, distribution=distribution, corners=points, corner_names=names,
        how=how, corner_solution=solution, sample_points=sample_points, sample_solution=sampled, devices=devices,
        nodes=nodes, saturation_yield=float(in_saturation.mean()), margin_yield=float(with_margin.mean()),
        margin_threshold=margin_threshold, sensitivity=sensitivity,
        unsolved_corners=tuple(names[row] for row in np.flatnonzero(~solution.solved)),
        unsolved_samples=int((~sampled.solved).sum()),
        caveats=tuple(dict.fromkeys((*solution.caveats, *sampled.caveats))),
    )  # fmt: skip
    return with_named_corners(result, dc_dead_resistors(circuit))


def _moves(values: np.ndarray) -> np.ndarray:
    """One-at-a-time rows (nominal, then low/high per band) → high − low per band."""
    return values[2::2] - values[1::2]


def _joined(first: Solved, second: Solved) -> Solved:
    return Solved(
        solved=np.concatenate([first.solved, second.solved]),
        ids={k: np.concatenate([first.ids[k], second.ids[k]]) for k in first.ids},
        margins={k: np.concatenate([first.margins[k], second.margins[k]]) for k in first.margins},
        regions={k: np.concatenate([first.regions[k], second.regions[k]]) for k in first.regions},
        nodes={k: np.concatenate([first.nodes[k], second.nodes[k]]) for k in first.nodes},
        caveats=tuple(dict.fromkeys((*first.caveats, *second.caveats))),
    )  # fmt: skip


def _nominal_start(solution: Solved) -> Mapping[str, float] | None:
    """The nominal row's node voltages, the Monte-Carlo rows' start (None when it is not solved)."""
    if not solution.solved[0]:
        return None
    return {node: float(values[0]) for node, values in solution.nodes.items()}


# ---------------------------------------------------------------------------------------------
# What moves a value: the corners named by the tolerances that matter to it

SAME_RELATIVE = 1e-9  # two values within this fraction of the quantity's largest corner value are the same
SAME_FLOOR = 1e-15  # V or A: below this two values are the same whatever their scale
# The terminals through which an element can carry DC current (a MOSFET's gate carries none, a
# capacitor none, a controlled source's sensing pair none); an element not named here counts at
# every terminal, so it never lets a branch be called dead.
_CONDUCTING = {"resistor": (0, 1), "inductor": (0, 1), "vsource": (0, 1), "isource": (0, 1), "diode": (0, 1),
               "capacitor": (), "mosfet": (0, 2, 3), "vcvs": (0, 1), "vccs": (0, 1), "ccvs": (0, 1),
               "cccs": (0, 1)}  # fmt: skip
_DEAD_WHEN_LOOSE = ("resistor", "inductor", "vsource", "diode")  # two-terminal: no current when one end is loose


def dc_dead_resistors(circuit: Circuit) -> tuple[str, ...]:
    """The resistors that carry no DC current in any solution, by the circuit's connectivity alone:
    a node (not ground) that only one conducting terminal reaches (the rest capacitors and MOSFET
    gates) is a dead end, the two-terminal element there carries no current, and taking it away
    may make its other node a dead end too (a signal source's resistor behind a coupling
    capacitor, a load behind one). Their values enter no DC node voltage or current."""
    from ..netlist.circuit import GROUND

    touching: dict[str, list[int]] = {}
    for index, element in enumerate(circuit.elements):
        terminals = _CONDUCTING.get(element.kind, tuple(range(len(element.nodes))))
        for terminal in terminals:
            if terminal < len(element.nodes):
                touching.setdefault(element.nodes[terminal], []).append(index)
    dead: set[int] = set()
    loose = [node for node, seen in touching.items() if node != GROUND and len(seen) == 1]
    while loose:
        node = loose.pop()
        alive = [i for i in touching.get(node, []) if i not in dead]
        if len(alive) != 1 or circuit.elements[alive[0]].kind not in _DEAD_WHEN_LOOSE:
            continue
        dead.add(alive[0])
        for other in circuit.elements[alive[0]].nodes:
            left = [i for i in touching.get(other, []) if i not in dead]
            if other != GROUND and len(left) == 1:
                loose.append(other)
    return tuple(e.name for i, e in enumerate(circuit.elements) if i in dead and e.kind == "resistor")


def _same(values: np.ndarray, reference: float, scale: float) -> bool:
    """Every value equal to `reference` within SAME_RELATIVE of `scale` (NaN never is)."""
    return bool(np.all(np.abs(values - reference) <= SAME_RELATIVE * scale + SAME_FLOOR))


def _scale(values: np.ndarray) -> float:
    finite = np.abs(values[np.isfinite(values)])
    return float(finite.max()) if finite.size else 0.0


def corner_cube(result: SpreadResult, values: np.ndarray) -> np.ndarray | None:
    """A quantity's values at every corner as an array of shape (2,)·k (axis j: band j low, high),
    None when not every corner was solved for the extremes (more than the corner limit)."""
    k = len(result.bands)
    corners = result.corners.count - (1 + 2 * k)
    if corners != 2**k:
        return None
    return values[1 + 2 * k:].reshape((2,) * k)


def no_effect_bands(
    result: SpreadResult, dead_resistors: Sequence[str] = ()
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The bands that move no value: (by connectivity, the resistors of `dead_resistors` among the
    bands; by the numbers, every other band whose low and high end give the same value of every
    drain current, margin and node voltage at every corner, when all corners were solved)."""
    dead = {name.lower() for name in dead_resistors}
    by_connectivity = tuple(b.label for b in result.bands if b.kind == "resistor" and b.target.lower() in dead)
    solution = result.corner_solution
    quantities = [*solution.ids.values(), *solution.margins.values(), *solution.nodes.values()]
    cubes = [corner_cube(result, values) for values in quantities]
    if not cubes or cubes[0] is None:
        return by_connectivity, ()
    by_numbers = []
    for j, band in enumerate(result.bands):
        if band.label in by_connectivity:
            continue
        if all(_same(np.take(cube, 1, axis=j) - np.take(cube, 0, axis=j), 0.0, _scale(cube))
               for cube in cubes if cube is not None):  # fmt: skip
            by_numbers.append(band.label)
    return by_connectivity, tuple(by_numbers)


def named_corner(result: SpreadResult, values: np.ndarray, row: int, free: Sequence[str] = ()) -> str:
    """The point at `row` named by the bands that move `values` (one quantity over the points
    searched) there: a band is left out when the value stays the same whichever end it is at,
    every other band left out or not at its end (checked over all corners when all were solved);
    the bands in `free` (no DC effect at all) are always left out. A one-at-a-time point whose
    value is the nominal one is called nominal."""
    if row < 0:
        return ""
    bands = result.bands
    ends = result.corners.ends
    assert ends is not None
    scale = _scale(values)
    cube = corner_cube(result, values)
    if np.any(ends[row] == 0) and cube is not None:
        row = _corner_alike(result, values, row, scale)
    if np.any(ends[row] == 0):
        if _same(values[row:row + 1], float(values[0]), scale):
            return "nominal"
        return result.corner_names[row]
    left_out = np.array([b.label in free for b in bands])
    if cube is not None:
        index = tuple(int(e > 0) for e in ends[row])
        reference = float(values[row])
        for j in range(len(bands)):
            if left_out[j]:
                continue
            trial = left_out.copy()
            trial[j] = True
            part = cube[tuple(slice(None) if trial[i] else index[i] for i in range(len(bands)))]
            if _same(np.asarray(part), reference, scale):
                left_out = trial
    parts = [band.end_text(int(end)) for band, end, out in zip(bands, ends[row], left_out, strict=True)
             if not out]  # fmt: skip
    return ", ".join(parts) if parts else "every corner (no tolerance moves it)"


def with_named_corners(result: SpreadResult, dead_resistors: Sequence[str]) -> SpreadResult:
    """`result` with the bands that move nothing (``no_effect_bands``) and each extreme's corner
    named by the tolerances that move its value (``named_corner``)."""
    import dataclasses

    by_connectivity, by_numbers = no_effect_bands(result, dead_resistors)
    free = (*by_connectivity, *by_numbers)
    solution = result.corner_solution

    def named(extremes: Extremes, values: np.ndarray) -> Extremes:
        return dataclasses.replace(extremes, min_named=named_corner(result, values, extremes.min_row, free),
                                   max_named=named_corner(result, values, extremes.max_row, free))  # fmt: skip

    devices = {
        name: {
            quantity: named(extremes, (solution.ids if quantity == "id" else solution.margins)[name])
            for quantity, extremes in quantities.items()
        }
        for name, quantities in result.devices.items()
    }
    nodes = {node: named(extremes, solution.nodes[node]) for node, extremes in result.nodes.items()}
    return dataclasses.replace(result, devices=devices, nodes=nodes, no_dc_current=by_connectivity,
                               no_effect=by_numbers)  # fmt: skip


def unmoved_nodes(result: SpreadResult) -> tuple[str, ...]:
    """The nodes whose voltage is the nominal one (within SAME_RELATIVE) at every point searched
    and every sample: a supply not varied, a signal source's 0 V, a node behind a capacitor."""
    unmoved = []
    for node, values in result.corner_solution.nodes.items():
        samples = result.sample_solution.nodes[node]
        every = np.concatenate([values, samples])
        if _same(every, float(values[0]), _scale(every)):
            unmoved.append(node)
    return tuple(unmoved)



def refuse_unusable_temperatures(circuit: Circuit, bands: Sequence[Band]) -> None:
    """Raise ValueError when the temperature band reaches a device temperature where a MOSFET's
    card has PHI(T) ≤ 0 under ngspice's level-1 temperature rules (mos1temp.c, as
    ``at_temperature``): there the card means nothing and every row would be unsolved. The message
    names the device, the end, PHI there, and the part of the range where the card holds (on a
    grid of 4001 temperatures)."""
    from ..devices.mos1.model import Level1Model
    from ..devices.mos1.params import CELSIUS_TO_KELVIN
    from ..devices.mos1.temperature import at_temperature_arrays, temperature_values

    band = next((b for b in bands if b.kind == "temperature"), None)
    if band is None:
        return
    grid = np.linspace(band.low, band.high, 4001)
    for element in circuit.elements_of("mosfet"):
        card = circuit.model(element.model or "")
        if card is None or isinstance(element.params.get("temp"), (int, float)):
            continue  # an instance TEMP is not moved by the circuit's temperature
        offset = element.params.get("dtemp", 0.0)
        offset = float(offset) if isinstance(offset, (int, float)) else 0.0
        model = Level1Model.from_card(card.type, card.params, circuit.nominal_temperature())
        usable = np.isfinite(np.asarray(at_temperature_arrays(model, grid + offset).phi, dtype=float))
        if usable.all():
            continue
        end = (band.high if not usable[-1] else band.low) + offset
        kelvin, tnom = end + CELSIUS_TO_KELVIN, model.tnom_celsius + CELSIUS_TO_KELVIN
        _, phi, _ = temperature_values(model.kp, model.phi, model.vto, model.gamma, model.polarity, tnom, kelvin, math)
        inside = (math.ceil(grid[usable].min() * 10.0) / 10.0, math.floor(grid[usable].max() * 10.0) / 10.0) if \
            usable.any() else (0.0, 0.0)  # fmt: skip
        holds = (f"; it holds from {inside[0]:.1f} to {inside[1]:.1f} °C of the range"
                 if usable.any() else "; it holds nowhere in the range")  # fmt: skip
        raise ValueError(
            f"{element.name} (model {card.name}, line {card.origin.line}): PHI at {end:g} °C comes out as "
            f"{phi:.4g} V (ngspice's level-1 temperature rules from PHI = {model.phi:g} V at TNOM = "
            f"{model.tnom_celsius:g} °C); it must be positive{holds}"
        )


def _sensitivity(label: str, low: float, high: float) -> Sensitivity:
    """One band's effect on a drain current, where both ends give the same current within
    SAME_RELATIVE (a solver's last digits, not an effect: a resistor beyond a gate) as exactly none."""
    if math.isfinite(low) and math.isfinite(high) and abs(high - low) <= SAME_RELATIVE * max(abs(low), abs(high)) \
            + SAME_FLOOR:  # fmt: skip
        high = low
    return Sensitivity(label, low, high)


def _corner_alike(result: SpreadResult, values: np.ndarray, row: int, scale: float) -> int:
    """For a one-at-a-time point (or the nominal one) that gives an extreme, the first corner with
    the same bands at the same ends that gives the same value (within SAME_RELATIVE), or `row`
    when there is none: a supply's node is at its extreme whatever the other tolerances do, and
    is then named by the corner."""
    ends = result.corners.ends
    assert ends is not None
    first = 1 + 2 * len(result.bands)
    fixed = ends[row] != 0
    agree = np.all(ends[first:][:, fixed] == ends[row][fixed], axis=1)
    with np.errstate(invalid="ignore"):
        alike = agree & (np.abs(values[first:] - values[row]) <= SAME_RELATIVE * scale + SAME_FLOOR)
    found = np.flatnonzero(alike)
    return int(found[0]) + first if found.size else row
