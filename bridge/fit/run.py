"""`biasbridge fit`'s three ways in, each ending in one ``FitOutcome`` for the report:
bench data (``fit_measurements``), two datasheet points (``fit_datasheet``) and a model card
(``fit_card``). The fitted card is simulated back in ngspice when a session is at hand.
"""

from __future__ import annotations

import numpy as np

from ..devices.mos1.load import Level1Geometry
from ..netlist.circuit import ModelCard
from ..records import record
from ..sim.client import NgspiceSession, SimulatorError
from .card import GAMMA_NOT_FITTED, model_card_text
from .data import BiasData
from .datasheet import datasheet_fit
from .equivalent import HOLD, HoldingRange, card_equivalent, level1_card
from .estimate import Extraction
from .least_squares import Level1Values, PointError, fit_level1, model_currents

CURVE_POINTS = 121  # model curve resolution on the plot
MAX_CURVES = 12  # curves drawn per plot (the rest are left off, and the plot says how many)
SAME_BIAS_DIGITS = 6  # readings of one curve share VDS and VBS to the microvolt


@record(frozen=True)
class FitCurve:
    """One measured ID–VGS curve at fixed VDS and VBS and the fitted model along it (device polarity)."""

    vds: float
    vbs: float
    vgs: np.ndarray
    measured: np.ndarray
    model_vgs: np.ndarray
    model: np.ndarray


@record(frozen=True)
class FitOutcome:
    """Everything the fit's report shows; ``mode`` is 'data', 'datasheet' or 'card'."""

    mode: str
    source: str
    name: str
    mos_type: str
    geometry: Level1Geometry
    values: Level1Values
    uncertainty: Level1Values | None
    card_text: str
    rms_rel_error: float
    points_used: int
    points_dropped: int
    floor: float | None
    worst: tuple[PointError, ...]
    estimates: tuple[Extraction, ...]
    sim_rms_rel_error: float | None
    warnings: tuple[str, ...]
    curves: tuple[FitCurve, ...] = ()
    curves_left_off: int = 0
    holding: HoldingRange | None = None
    within_share: float | None = None
    around: tuple[float, float] | None = None
    vds_range: tuple[float, float] | None = None


def _curves(data: BiasData, values: Level1Values, geometry: Level1Geometry) -> tuple[tuple[FitCurve, ...], int]:
    """The data grouped into curves of one VDS and VBS, with the model along each."""
    body, drain = np.round(data.vbs, SAME_BIAS_DIGITS), np.round(data.vds, SAME_BIAS_DIGITS)
    keys = sorted(set(zip(body.tolist(), drain.tolist())))
    groups = [k for k in keys if np.sum((body == k[0]) & (drain == k[1])) >= 2]
    if len(groups) > MAX_CURVES:  # evenly chosen
        chosen = [groups[int(round(i))] for i in np.linspace(0, len(groups) - 1, MAX_CURVES)]
    else:
        chosen = groups
    curves = []
    for vbs, vds in chosen:
        pick = (body == vbs) & (drain == vds)
        order = np.argsort(data.vgs[pick])
        vgs = data.vgs[pick][order]
        line = np.linspace(float(vgs[0]), float(vgs[-1]), CURVE_POINTS)
        model = model_currents(values, geometry, line, np.full(line.size, vds), np.full(line.size, vbs))
        curves.append(FitCurve(vds, vbs, vgs, data.id[pick][order], line, model))
    return tuple(curves), len(groups) - len(chosen)


def _simulated_error(session: NgspiceSession | None, card: ModelCard, geometry: Level1Geometry, data: BiasData,
                     used: np.ndarray, timeout: float) -> tuple[float | None, str | None]:  # fmt: skip
    """RMS relative error of the fitted card simulated in ngspice over the points used, against the data."""
    if session is None:
        return None, None
    from ..sim.device_iv import simulate_bias_points

    try:
        simulated = simulate_bias_points(session, card, geometry.w, geometry.l, data.vgs[used], data.vds[used],
                                         data.vbs[used], timeout)  # fmt: skip
    except SimulatorError as exc:
        return None, f"ngspice did not simulate the fitted card: {exc}"
    return float(np.sqrt(np.mean((simulated / data.id[used] - 1.0) ** 2))), None


def fit_measurements(data: BiasData, geometry: Level1Geometry, name: str, floor: float | None,
                     session: NgspiceSession | None, timeout: float = 30.0) -> FitOutcome:  # fmt: skip
    """Fit bench data; simulate the card back over the points used."""
    fit = fit_level1(data, geometry, floor=floor)
    notes = [f"level-1 card fitted by biasbridge to {fit.points_used} points of {data.file} "
             f"({fit.points_dropped} below the floor of {fit.floor:.3g} A left out), "
             f"RMS relative error {100 * fit.rms_rel_error:.2g} %",
             f"KP for W={geometry.w:g} m, L={geometry.l:g} m as given to the fit"]  # fmt: skip
    if not fit.gamma_fitted:
        notes.append(GAMMA_NOT_FITTED)
    text = model_card_text(name, data.mos_type, fit.values, tuple(notes))
    warnings: list[str] = []
    if data.flipped:
        warnings.append("PMOS data with negative signs: those columns negated (device polarity: positive when on)")
    used = ~np.isnan(fit.relative_errors)
    sim_error, problem = _simulated_error(session, level1_card(name, data.mos_type, fit.values), geometry, data,
                                          used, timeout)  # fmt: skip
    if problem:
        warnings.append(problem)
    curves, left_off = _curves(data, fit.values, geometry)
    return FitOutcome(
        "data", data.file, name, data.mos_type, geometry, fit.values, fit.uncertainty, text, fit.rms_rel_error,
        fit.points_used, fit.points_dropped, fit.floor, fit.worst, fit.estimates, sim_error, tuple(warnings),
        curves, left_off,
    )  # fmt: skip


def fit_datasheet(points: tuple[tuple[float, float], tuple[float, float]], geometry: Level1Geometry, name: str,
                  mos_type: str, vds: float | None) -> FitOutcome:  # fmt: skip
    """VTO and KP through two saturation points, LAMBDA = 0."""
    fit = datasheet_fit(points, geometry, vds)
    notes = [f"level-1 card from two datasheet points (VGS, ID) = ({fit.points[0][0]:g} V, {fit.points[0][1]:g} A) "
             f"and ({fit.points[1][0]:g} V, {fit.points[1][1]:g} A); LAMBDA set to 0",
             f"KP for W={geometry.w:g} m, L={geometry.l:g} m as given to the fit",
             "GAMMA and PHI not fitted: two points pin only VTO and KP (ngspice's defaults GAMMA=0, PHI=0.6 apply)"]
    text = model_card_text(name, mos_type, fit.values, tuple(notes))
    return FitOutcome("datasheet", "datasheet points", name, mos_type, geometry, fit.values, None, text, 0.0, 2, 0,
                      None, (), (), None, fit.warnings)  # fmt: skip


def fit_card(session: NgspiceSession, card: ModelCard, source: str, geometry: Level1Geometry, name: str,
             vds_range: tuple[float, float], around: tuple[float, float] | None, timeout: float = 30.0) -> FitOutcome:
    """The level-1 equivalent of a card, from its grid simulated by ngspice."""
    found = card_equivalent(session, card, geometry, vds_range, around, source, timeout)
    fit = found.fit
    where = (f"weighted around VGS = {around[0]:g} V, VDS = {around[1]:g} V" if around is not None
             else "every strong-inversion point weighted alike")
    notes = [f"level-1 equivalent of {card.name} (level {card.level}) from {source}, fitted by biasbridge to "
             f"{fit.points_used} ngspice grid points at W={geometry.w:g} m, L={geometry.l:g} m ({where})",
             f"RMS relative error {100 * fit.rms_rel_error:.2g} % over those points; VBS = 0 only",
             GAMMA_NOT_FITTED.replace("in the data", "in the grid")]  # fmt: skip
    if found.holding is not None:
        notes.insert(2, f"within {100 * HOLD:g} % of ngspice at every grid point above the floor for "
                        f"VGS {found.holding.vgs[0]:g}..{found.holding.vgs[1]:g} V, "
                        f"VDS {found.holding.vds[0]:g}..{found.holding.vds[1]:g} V (device polarity)")
    text = model_card_text(name, card.type, fit.values, tuple(notes))
    curves, left_off = _curves(found.data, fit.values, geometry)
    warnings = []
    if found.holding is None:
        warnings.append(f"the equivalent is not within {100 * HOLD:g} % of ngspice even at the centre of the range")
    return FitOutcome(
        "card", source, name, card.type, geometry, fit.values, fit.uncertainty, text, fit.rms_rel_error,
        fit.points_used, fit.points_dropped, fit.floor, fit.worst, fit.estimates, found.sim_rms_rel_error,
        tuple(warnings), curves, left_off, found.holding, found.within_share, around, vds_range,
    )  # fmt: skip
