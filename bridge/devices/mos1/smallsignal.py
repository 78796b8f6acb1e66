"""The level-1 MOSFET's small-signal values beyond the channel conductances of ``load.evaluate``:
the gate capacitances of ngspice's Meyer model (mos1load.c, devsup.c DEVqmeyer) and the second-
order conductances the hand model leaves out (channel-length modulation, body effect), as the
small-signal analyses ask for them.

Meyer capacitances, as ngspice 39 reports them in its `@m1[cgs]`, `@m1[cgd]`, `@m1[cgb]` vectors
at the operating point: the intrinsic part from Cox·W·Leff·M (Cox = 3.9·ε0/TOX; no TOX on the card
gives no intrinsic part) by the region, plus the overlaps CGSO·W·M, CGDO·W·M and CGBO·Leff·M
(checked against `ngspice -b` in tests/test_gain_devices.py). The bulk junction capacitances
(CBD, CBS, CJ, CJSW) are not modelled here.
"""

from __future__ import annotations

from typing import NamedTuple

from .load import Level1Geometry, Level1Point, body_root, leff
from .model import Level1Model
from .params import EPS0_MOS1

GATE_CAPACITANCE_PARAMETERS = ("tox", "cgso", "cgdo", "cgbo")
JUNCTION_CAPACITANCE_PARAMETERS = ("cbd", "cbs", "cj", "cjsw")


class GateCapacitances(NamedTuple):
    """Gate–source, gate–drain and gate–bulk capacitance (F) of one device at its bias point,
    terminal by terminal (a device running swapped has its drain-side value at the drain)."""

    cgs: float
    cgd: float
    cgb: float


def card_gives_gate_capacitances(params: dict) -> bool:
    """Whether a level-1 card gives any gate capacitance: a non-zero TOX, CGSO, CGDO or CGBO."""
    return any(_number(params.get(name)) != 0.0 for name in GATE_CAPACITANCE_PARAMETERS)


def card_gives_junction_capacitances(params: dict) -> bool:
    """Whether a level-1 card gives bulk junction capacitances (CBD, CBS, CJ, CJSW non-zero)."""
    return any(_number(params.get(name)) != 0.0 for name in JUNCTION_CAPACITANCE_PARAMETERS)


def _number(value: object) -> float:
    return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else 0.0


def meyer_capacitances(
    params: dict, model: Level1Model, geometry: Level1Geometry, point: Level1Point
) -> GateCapacitances:
    """ngspice's level-1 gate capacitances at `point` (the card's `params` for TOX and overlaps).

    DEVqmeyer gives half of each intrinsic capacitance; ngspice adds the present and the previous
    state's halves (equal at an operating point) and the overlap, so each is twice the half here.
    """
    tox = _number(params.get("tox"))
    length = leff(model, geometry)
    width, m = geometry.w, geometry.m
    oxide = (3.9 * EPS0_MOS1 / tox) * width * length * m if tox != 0.0 else 0.0
    # Seen from the terminal acting as source (ngspice's mode): vgs, vds of that view.
    if point.swapped:
        gate_drive, channel_bias = point.vgs - point.vds, -point.vds
    else:
        gate_drive, channel_bias = point.vgs, point.vds
    half_gs, half_gd, half_gb = _meyer_halves(gate_drive - point.vth, channel_bias, point.vdsat, model.phi, oxide)
    if point.swapped:
        half_gs, half_gd = half_gd, half_gs
    return GateCapacitances(
        2.0 * half_gs + _number(params.get("cgso")) * width * m,
        2.0 * half_gd + _number(params.get("cgdo")) * width * m,
        2.0 * half_gb + _number(params.get("cgbo")) * length * m,
    )


def _meyer_halves(vgst: float, vds: float, vdsat: float, phi: float, oxide: float) -> tuple[float, float, float]:
    """DEVqmeyer (devsup.c): half of Cgs, Cgd, Cgb by the gate drive above threshold `vgst`."""
    if vgst <= -phi:
        return 0.0, 0.0, oxide / 2.0
    if vgst <= -phi / 2.0:
        return 0.0, 0.0, -vgst * oxide / (2.0 * phi)
    if vgst <= 0.0:
        return vgst * oxide / (1.5 * phi) + oxide / 3.0, 0.0, -vgst * oxide / (2.0 * phi)
    if vdsat <= vds:
        return oxide / 3.0, 0.0, 0.0
    vddif = 2.0 * vdsat - vds
    vddif1 = vdsat - vds
    vddif2 = vddif * vddif
    return oxide * (1.0 - vddif1 * vddif1 / vddif2) / 3.0, oxide * (1.0 - vdsat * vdsat / vddif2) / 3.0, 0.0


def output_conductance(lambda_: float, current: float) -> float:
    """gds of a saturated device by channel-length modulation at drain current `current` (λ = 0
    otherwise): λ·ID, the textbook ro = 1/(λ·ID) (ngspice: λ·(β/2)·VOV², the same at λ·VDS ≪ 1)."""
    return lambda_ * abs(current)


def body_transconductance(model: Level1Model, gm: float, vbs: float) -> float:
    """gmbs = gm·GAMMA/(2·√(PHI − VBS)) (ngspice's, with its tangent under forward body bias)."""
    root, _ = body_root(model.phi, vbs)
    return gm * model.gamma / (2.0 * root) if root > 0.0 else 0.0
