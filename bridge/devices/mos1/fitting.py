"""What a parameter fit asks of the level-1 device: a card from five numbers, its drain current
over many bias points, and the square law read backwards (√ID against VGS in saturation).

The equations stay in ``load.py``; this module only arranges calls to it for ``bridge.fit``.
"""

from __future__ import annotations

import numpy as np

from .load import Level1Geometry, evaluate_arrays
from .model import Level1Model


def fitted_card_model(mos_type: str, vto: float, kp: float, lambda_: float, gamma: float, phi: float) -> Level1Model:
    """The level-1 model of a card giving only VTO, KP, LAMBDA, GAMMA and PHI (``vto`` in the
    card's sign: negative for an enhancement PMOS)."""
    return Level1Model.from_card(mos_type, {"vto": vto, "kp": kp, "lambda": lambda_, "gamma": gamma, "phi": phi})


def drain_currents(
    model: Level1Model, geometry: Level1Geometry, vgs: np.ndarray, vds: np.ndarray, vbs: np.ndarray
) -> np.ndarray:
    """Channel current at bias points given in device polarity (a conducting PMOS: positive
    vgs, vds and current), source at 0 V; ``load.evaluate_arrays`` does the physics."""
    polarity = model.polarity
    vgs, vds, vbs = (np.asarray(v, dtype=float) for v in (vgs, vds, vbs))
    return evaluate_arrays(model, geometry, polarity * vds, polarity * vgs, np.zeros_like(vgs), polarity * vbs).id


def kp_from_root_slope(slope: float, geometry: Level1Geometry, ld: float = 0.0) -> float:
    """KP from the slope of √ID against VGS in saturation (λ = 0): √ID = √(β/2)·(VGS − VT), so
    β = 2·slope² and KP = β·Leff/(W·M)."""
    return 2.0 * slope * slope * (geometry.l - 2.0 * ld) / (geometry.w * geometry.m)
