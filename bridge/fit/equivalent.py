"""The level-1 equivalent of any MOSFET card ngspice runs: its I–V grid simulated by ngspice in one
`.dc` (``bridge.sim.device_iv``), fitted as bench data would be, and the range where it holds.

Weighting: every point above the current floor (strong inversion) alike; with an operating point
(VGS0, VDS0) the weights fall off as a Gaussian of AROUND_VGS and AROUND_VDS volts from it
(common practice, no source). The range is a box of grid points grown one row or column at a
time while every point above the floor in it stays within HOLD of ngspice: from the operating
point, or without one the largest grown from up to BOX_STARTS strong-inversion points.
"""

from __future__ import annotations

import numpy as np

from ..devices.mos1.load import Level1Geometry
from ..netlist.circuit import ModelCard, Origin
from ..records import record
from ..sim.client import NgspiceSession
from ..sim.device_iv import simulate_grid
from .card import card_value
from .data import BiasData
from .least_squares import Level1Fit, Level1Values, fit_level1, model_currents

VGS_POINTS, VDS_POINTS = 41, 31  # grid of 1,271 points
HOLD = 0.05
AROUND_VGS, AROUND_VDS = 0.25, 0.5  # V, the Gaussian widths around an operating point
BOX_STARTS = 64  # strong-inversion points a box is grown from, without an operating point


@record(frozen=True)
class HoldingRange:
    """The box of the grid where the equivalent is within HOLD of ngspice at every point above the floor."""

    vgs: tuple[float, float]
    vds: tuple[float, float]


@record(frozen=True)
class CardEquivalent:
    data: BiasData  # the card's grid as ngspice simulated it
    fit: Level1Fit
    card: ModelCard
    vgs_axis: np.ndarray
    vds_axis: np.ndarray
    around: tuple[float, float] | None
    holding: HoldingRange | None
    within_share: float  # of the points above the floor, the share within HOLD
    sim_rms_rel_error: float | None  # the fitted level-1 card simulated back over the grid, vs the card


def level1_card(name: str, mos_type: str, values: Level1Values) -> ModelCard:
    """The fitted values as a level-1 ModelCard (as the card text writes them), for ngspice."""
    sign = -1.0 if mos_type == "pmos" else 1.0
    params: dict[str, float | str] = {"vto": float(card_value(sign * values.vto)), "kp": float(card_value(values.kp)),
                                      "lambda": float(card_value(values.lambda_))}  # fmt: skip
    if values.gamma is not None and values.phi is not None:
        params.update(gamma=float(card_value(values.gamma)), phi=float(card_value(values.phi)))
    return ModelCard(name, mos_type, 1, params, Origin("<fitted>", 0))


def grid_axes(vds_range: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """VGS from 0 to the largest |VDS| of the range, VDS over the range (device polarity)."""
    low, high = sorted(abs(v) for v in vds_range)
    return np.linspace(0.0, high, VGS_POINTS), np.linspace(low, high, VDS_POINTS)


def card_equivalent(
    session: NgspiceSession, card: ModelCard, geometry: Level1Geometry, vds_range: tuple[float, float],
    around: tuple[float, float] | None = None, source: str = "<card>", timeout: float = 30.0,
) -> CardEquivalent:  # fmt: skip
    """Simulate `card`'s grid, fit the level-1 equivalent, validate it in ngspice, find its range."""
    vgs_axis, vds_axis = grid_axes(vds_range)
    grid = simulate_grid(session, card, geometry.w, geometry.l, vgs_axis, vds_axis, (0.0,), timeout)
    data = BiasData(source, card.type, grid.vgs, grid.vds, grid.vbs, grid.id, np.arange(1, grid.id.size + 1))
    weights = None
    if around is not None:
        vgs0, vds0 = abs(around[0]), abs(around[1])
        weights = np.exp(-0.5 * (((grid.vgs - vgs0) / AROUND_VGS) ** 2 + ((grid.vds - vds0) / AROUND_VDS) ** 2))
    fit = fit_level1(data, geometry, weights=weights, fit_body=False)
    fitted = level1_card(card.name + "_l1", card.type, fit.values)
    back = simulate_grid(session, fitted, geometry.w, geometry.l, vgs_axis, vds_axis, (0.0,), timeout)
    used = ~np.isnan(fit.relative_errors)
    sim_error = float(np.sqrt(np.mean((back.id[used] / grid.id[used] - 1.0) ** 2)))
    # Whether the fit holds is judged on every point above the floor, weighted or not.
    above = grid.id >= fit.floor
    model_error = np.abs(_relative_all(fit, data))
    good = ~above | (model_error <= HOLD)
    shape = (vds_axis.size, vgs_axis.size)  # the .dc sweeps VGS inside VDS
    holding = _holding_box(good.reshape(shape), above.reshape(shape), vgs_axis, vds_axis, around)
    within = float(np.mean(model_error[above] <= HOLD))
    return CardEquivalent(data, fit, fitted, vgs_axis, vds_axis, around, holding, within, sim_error)


def _relative_all(fit: Level1Fit, data: BiasData) -> np.ndarray:
    from .least_squares import model_currents

    model = model_currents(fit.values, fit.geometry, data.vgs, data.vds, data.vbs)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(data.id > 0.0, model / data.id - 1.0, np.inf)


def _holding_box(good: np.ndarray, above: np.ndarray, vgs_axis: np.ndarray, vds_axis: np.ndarray,
                 around: tuple[float, float] | None) -> HoldingRange | None:  # fmt: skip
    """The box grown from the operating point, or without one the largest grown from any of up to
    BOX_STARTS strong-inversion points where the equivalent holds (rows VDS, columns VGS)."""
    if around is not None:
        row = int(np.argmin(np.abs(vds_axis - abs(around[1]))))
        starts = [(row, int(np.argmin(np.abs(vgs_axis - abs(around[0])))))]
    else:
        rows, cols = np.nonzero(above & good)
        pick = np.unique(np.linspace(0, rows.size - 1, min(BOX_STARTS, rows.size)).astype(int)) if rows.size else []
        starts = [(int(rows[k]), int(cols[k])) for k in pick]
    best: tuple[int, tuple[int, int, int, int]] | None = None
    bad = _summed(~good)
    for row, col in starts:
        if not (above[row, col] and good[row, col]):
            continue
        box = _grown(bad, row, col)
        r0, r1, c0, c1 = box
        count = int(above[r0:r1 + 1, c0:c1 + 1].sum())
        if best is None or count > best[0]:
            best = (count, box)
    if best is None:
        return None
    r0, r1, c0, c1 = best[1]
    # Said only of points that count: the box shrunk to the points above the floor inside it.
    rows, cols = np.nonzero(above[r0:r1 + 1, c0:c1 + 1])
    c0, c1, r0, r1 = c0 + int(cols.min()), c0 + int(cols.max()), r0 + int(rows.min()), r0 + int(rows.max())
    return HoldingRange((float(vgs_axis[c0]), float(vgs_axis[c1])), (float(vds_axis[r0]), float(vds_axis[r1])))


def _summed(flags: np.ndarray) -> np.ndarray:
    """The summed-area table of `flags`: entry [r, c] counts the flags above and left of (r, c)."""
    table = np.zeros((flags.shape[0] + 1, flags.shape[1] + 1), dtype=np.int64)
    table[1:, 1:] = np.cumsum(np.cumsum(flags, axis=0), axis=1)
    return table


def _grown(bad: np.ndarray, row: int, col: int) -> tuple[int, int, int, int]:
    """Grow a box of grid indices from (row, col) one side at a time while no point in it is bad
    (`bad`: the summed-area table of the points that are not)."""
    rows, cols = bad.shape[0] - 1, bad.shape[1] - 1

    def clean(r0: int, r1: int, c0: int, c1: int) -> bool:
        return int(bad[r1 + 1, c1 + 1] - bad[r0, c1 + 1] - bad[r1 + 1, c0] + bad[r0, c0]) == 0

    r0, r1, c0, c1 = row, row, col, col
    grown = True
    while grown:
        grown = False
        if c1 + 1 < cols and clean(r0, r1, c1 + 1, c1 + 1):
            c1, grown = c1 + 1, True
        if c0 > 0 and clean(r0, r1, c0 - 1, c0 - 1):
            c0, grown = c0 - 1, True
        if r1 + 1 < rows and clean(r1 + 1, r1 + 1, c0, c1):
            r1, grown = r1 + 1, True
        if r0 > 0 and clean(r0 - 1, r0 - 1, c0, c1):
            r0, grown = r0 - 1, True
    return r0, r1, c0, c1


@record(frozen=True)
class OperatingPointEquivalent:
    """A card's level-1 equivalent for one device of a circuit, fitted around ngspice's operating
    point of that device: at its W/L, its temperature (the card's TNOM set to it, so that the
    level-1 model at that temperature has the fitted VTO and KP) and its body bias (GAMMA not fitted:
    VTO is the threshold at that VBS)."""

    card: ModelCard  # the equivalent, level 1
    values: Level1Values
    geometry: Level1Geometry  # W, L; M = 1 (the circuit's M multiplies the equivalent as it does the card)
    around: tuple[float, float]  # ngspice's (vgs, vds) of the device, device polarity
    vbs: float
    temperature: float  # °C
    rms_around: float  # RMS relative error, each grid point weighted as in the fit
    at_point: float  # relative error of the equivalent at ngspice's own bias point of the device
    points_used: int
    below_floor: bool  # ngspice's current at the operating point is below the fit's floor (weak inversion)

    @property
    def error(self) -> float:
        """The equivalent's error around the operating point: the larger of the two; below the
        floor the square law says nothing (no weak inversion), so the fitted region's alone."""
        return self.rms_around if self.below_floor else max(self.rms_around, abs(self.at_point))


def equivalent_at_operating_point(
    session: NgspiceSession, card: ModelCard, name: str, geometry: Level1Geometry, around: tuple[float, float],
    vbs: float, drain_current: float, span: float, temperature: float, directives=(),
    instance: dict[str, float] | None = None, timeout: float = 30.0,
) -> OperatingPointEquivalent:  # fmt: skip
    """The level-1 equivalent of `card` around one device's operating point (`around`: ngspice's
    vgs, vds; `vbs`; `drain_current` per unit of M), from one `.dc` grid over 0..`span` at that VBS,
    weighted as ``card_equivalent`` weights around a point. Raises FitError or SimulatorError."""
    vgs_axis, vds_axis = grid_axes((0.0, span))
    grid = simulate_grid(session, card, geometry.w, geometry.l, vgs_axis, vds_axis, (vbs,), timeout,
                         directives, instance)  # fmt: skip
    data = BiasData("<grid>", card.type, grid.vgs, grid.vds, grid.vbs, grid.id, np.arange(1, grid.id.size + 1))
    vgs0, vds0 = abs(around[0]), abs(around[1])
    weights = np.exp(-0.5 * (((grid.vgs - vgs0) / AROUND_VGS) ** 2 + ((grid.vds - vds0) / AROUND_VDS) ** 2))
    fit = fit_level1(data, geometry, weights=weights, fit_body=False)
    equivalent = level1_card(name, card.type, fit.values)
    equivalent = ModelCard(name, card.type, 1, {**equivalent.params, "tnom": float(temperature)}, equivalent.origin)
    # The values as the card writes them (five digits): those are what the columns use.
    sign = -1.0 if card.type == "pmos" else 1.0
    values = Level1Values(sign * float(equivalent.params["vto"]), float(equivalent.params["kp"]),
                          float(equivalent.params["lambda"]))  # fmt: skip
    used = ~np.isnan(fit.relative_errors)
    share = weights[used]
    rms = float(np.sqrt(np.sum(share * fit.relative_errors[used] ** 2) / np.sum(share)))
    model = model_currents(values, geometry, np.array([vgs0]), np.array([vds0]), np.array([vbs]))
    at_point = float(model[0] / drain_current - 1.0) if drain_current > 0.0 else float("inf")
    return OperatingPointEquivalent(equivalent, values, geometry, (vgs0, vds0), vbs, temperature, rms, at_point,
                                    fit.points_used, drain_current < fit.floor)  # fmt: skip
