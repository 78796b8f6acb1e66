"""The weighted least-squares fit of the level-1 device to measured drain currents.

The residual of a point is its relative error, model/measured − 1 (times its weight), so a
10 µA point counts as much as a 10 mA one; points whose measured current is below the floor
(weak inversion, where the level-1 square law says nothing useful) are left out and counted.
The model is ``bridge.devices.mos1`` itself (``fitting.drain_currents``). Parameters:
VTO, ln KP (KP stays positive and well scaled), LAMBDA, and GAMMA and PHI when VBS varies.
Uncertainties: one standard deviation from the covariance (JᵀJ)⁻¹·s², s² = Σr²/(m − n).
"""

from __future__ import annotations

import math

import numpy as np

from ..devices.mos1.fitting import drain_currents, fitted_card_model, kp_from_root_slope
from ..devices.mos1.load import Level1Geometry
from ..records import record
from .data import BiasData
from .estimate import Extraction, linear_extrapolation, root_extrapolation

FLOOR_FRACTION = 0.01  # default current floor: 1 % of the largest measured current (common practice, no source)
WORST_COUNT = 5
# Starting values and bounds where no measurement gives one (common practice, no source).
START_LAMBDA, START_GAMMA, START_PHI = 0.01, 0.4, 0.7
AT_BOUND = 1e-9  # a fitted LAMBDA, GAMMA or PHI this close to its lower bound is written as the bound
BOUNDS = {"vto": (-10.0, 10.0), "lambda": (0.0, 2.0), "gamma": (0.0, 5.0), "phi": (0.1, 2.0)}


class FitError(ValueError):
    """The data cannot give a fit (too few points above the floor, no conducting curve)."""


@record(frozen=True)
class Level1Values:
    """VTO (device polarity: positive for an enhancement device), KP, LAMBDA, GAMMA, PHI;
    GAMMA and PHI None when they were not fitted."""

    vto: float
    kp: float
    lambda_: float
    gamma: float | None = None
    phi: float | None = None


@record(frozen=True)
class PointError:
    """One point's misfit: its row in the file, its bias, measured and model currents."""

    row: int
    vgs: float
    vds: float
    vbs: float
    measured: float
    model: float

    @property
    def relative(self) -> float:
        return self.model / self.measured - 1.0


@record(frozen=True)
class Level1Fit:
    """The fitted values, their one-sigma uncertainties, and how well they fit."""

    mos_type: str
    geometry: Level1Geometry
    values: Level1Values
    uncertainty: Level1Values | None
    rms_rel_error: float
    points_used: int
    points_dropped: int
    floor: float
    worst: tuple[PointError, ...]
    estimates: tuple[Extraction, ...]
    relative_errors: np.ndarray  # per point of the data; NaN where dropped

    @property
    def gamma_fitted(self) -> bool:
        return self.values.gamma is not None


def model_currents(values: Level1Values, geometry: Level1Geometry, vgs, vds, vbs) -> np.ndarray:
    """The level-1 drain current at `values` (device polarity), GAMMA = 0 and PHI = 0.6 (ngspice's
    default) when they were not fitted."""
    model = fitted_card_model("nmos", values.vto, values.kp, values.lambda_, values.gamma or 0.0,
                              0.6 if values.phi is None else values.phi)  # fmt: skip
    return drain_currents(model, geometry, vgs, vds, vbs)


def first_estimates(data: BiasData, geometry: Level1Geometry) -> tuple[Extraction, ...]:
    """The published extractions that the data allows (see ``estimate``)."""
    return tuple(e for e in (linear_extrapolation(data), root_extrapolation(data, geometry)) if e is not None)


def fit_level1(
    data: BiasData,
    geometry: Level1Geometry,
    floor: float | None = None,
    weights: np.ndarray | None = None,
    fit_body: bool | None = None,
) -> Level1Fit:
    """Fit VTO, KP, LAMBDA (GAMMA, PHI when VBS varies, or as `fit_body` says) to `data`."""
    from scipy.optimize import least_squares

    largest = float(np.max(data.id))
    floor = FLOOR_FRACTION * largest if floor is None else floor
    used = data.id >= floor
    if weights is not None:
        used &= weights > 0.0
    body = data.vbs_varies if fit_body is None else fit_body
    count = 5 if body else 3
    if int(used.sum()) <= count:
        raise FitError(f"{int(used.sum())} points carry at least the floor of {floor:.3g} A: "
                       f"fitting {count} parameters needs more than {count}")
    vgs, vds, vbs, measured = data.vgs[used], data.vds[used], data.vbs[used], data.id[used]
    weight = np.ones(measured.size) if weights is None else weights[used]

    estimates = first_estimates(data, geometry)
    root = next((e for e in estimates if e.kp is not None), None)
    vto0 = root.vto if root is not None else (estimates[0].vto if estimates else float(np.min(vgs)))
    if root is not None and root.kp > 0.0:
        kp0 = root.kp
    else:  # no saturation curve: the line from (VTO, 0) to the largest current, in √ID against VGS
        k = int(np.argmax(measured))
        kp0 = max(1e-12, kp_from_root_slope(math.sqrt(measured[k]) / max(vgs[k] - vto0, 0.1), geometry))

    def values_of(x: np.ndarray) -> Level1Values:
        return Level1Values(float(x[0]), math.exp(x[1]), float(x[2]), *(map(float, x[3:5]) if body else (None, None)))

    def residuals(x: np.ndarray) -> np.ndarray:
        return weight * (model_currents(values_of(x), geometry, vgs, vds, vbs) / measured - 1.0)

    x0 = [vto0, math.log(kp0), START_LAMBDA] + ([START_GAMMA, START_PHI] if body else [])
    lower = [BOUNDS["vto"][0], -60.0, BOUNDS["lambda"][0]] + ([BOUNDS["gamma"][0], BOUNDS["phi"][0]] if body else [])
    upper = [BOUNDS["vto"][1], 10.0, BOUNDS["lambda"][1]] + ([BOUNDS["gamma"][1], BOUNDS["phi"][1]] if body else [])
    x0 = np.clip(x0, np.asarray(lower) + 1e-9, np.asarray(upper) - 1e-9)
    solution = least_squares(residuals, x0, bounds=(lower, upper), method="trf", x_scale="jac")
    x = solution.x.copy()
    x[2:] = np.where(np.abs(x[2:] - np.asarray(lower[2:])) < AT_BOUND, lower[2:], x[2:])  # 1e-22 is a 0
    values = values_of(x)

    dof = measured.size - count
    sigma = _uncertainty(solution.jac, solution.fun, dof)
    uncertainty = None
    if sigma is not None:
        uncertainty = Level1Values(sigma[0], values.kp * sigma[1], sigma[2],
                                   *(sigma[3:5] if body else (None, None)))  # fmt: skip

    model = model_currents(values, geometry, data.vgs, data.vds, data.vbs)
    relative = np.full(data.id.size, np.nan)
    relative[used] = model[used] / data.id[used] - 1.0
    order = np.argsort(-np.abs(np.where(used, relative, 0.0)))[: min(WORST_COUNT, int(used.sum()))]
    worst = tuple(
        PointError(int(data.rows[k]), float(data.vgs[k]), float(data.vds[k]), float(data.vbs[k]),
                   float(data.id[k]), float(model[k]))
        for k in order.tolist()
    )  # fmt: skip
    return Level1Fit(
        data.mos_type, geometry, values, uncertainty,
        float(np.sqrt(np.mean(relative[used] ** 2))), int(used.sum()), int((~used).sum()), floor,
        worst, estimates, relative,
    )  # fmt: skip


def _uncertainty(jacobian: np.ndarray, residual: np.ndarray, dof: int) -> np.ndarray | None:
    """One-sigma uncertainties √diag((JᵀJ)⁻¹·s²); None when JᵀJ is singular."""
    if dof <= 0:
        return None
    variance = float(residual @ residual) / dof
    try:
        covariance = np.linalg.inv(jacobian.T @ jacobian) * variance
    except np.linalg.LinAlgError:
        return None
    diagonal = np.diag(covariance)
    if not np.all(np.isfinite(diagonal)) or np.any(diagonal < 0.0):
        return None
    return np.sqrt(diagonal)
