"""The level-1 MOSFET's load: drain current and conductances (mos1load.c), and its bulk junctions.

Only the channel current and the two bulk junction diodes are modelled. ngspice places the
bulk–source and bulk–drain diodes (IS = 1e-14 A by default) plus GMIN (1e-12 S) across them;
with reverse-biased junctions they add picoamps, which is why ngspice reports a few pA of drain
current in cutoff. Voltages in the device's own polarity follow ngspice: for a PMOS every
terminal voltage difference is multiplied by −1, so an enhancement PMOS has a positive
threshold, overdrive and drain current when on.

``evaluate`` works on plain floats (one Newton iteration of one device); ``evaluate_arrays``
is its numpy twin over many bias points at once (sweeps, batches), equal to it to rounding.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from ...records import record
from .ask import Region, classify_region
from .model import Level1Model
from .params import DEFAULT_L, DEFAULT_W

MAX_EXP_ARG = 709.0  # ngspice's clamp on junction exponents (exp overflows past it)


@record(frozen=True)
class Level1Geometry:
    """Instance size: drawn width and length in metres, and the parallel multiplier M."""

    w: float = DEFAULT_W
    l: float = DEFAULT_L  # noqa: E741 - the trade's name for channel length
    m: float = 1.0

    def __post_init__(self) -> None:
        for name in ("w", "l", "m"):
            if not getattr(self, name) > 0.0:
                raise ValueError(f"MOSFET {name.upper()} must be positive, got {getattr(self, name)!r}")


def leff(model: Level1Model, geometry: Level1Geometry) -> float:
    """Effective channel length: Leff = L − 2·LD."""
    length = geometry.l - 2.0 * model.ld
    if length <= 0.0:
        raise ValueError(
            f"effective channel length L − 2·LD = {geometry.l:g} − 2·{model.ld:g} = "
            f"{length:g} m is not positive"
        )
    return length


def beta(model: Level1Model, geometry: Level1Geometry) -> float:
    """Gain factor β = KP·W·M/Leff in A/V²."""
    return model.kp * geometry.w * geometry.m / leff(model, geometry)


def body_root(phi: float, vbs: float) -> tuple[float, float]:
    """The body-effect root s(vbs) of mos1load.c and its decline −ds/dvbs (never negative)."""
    if vbs <= 0.0:
        root = math.sqrt(phi - vbs)
        return root, 0.5 / root
    # Forward body bias: ngspice replaces the root by its tangent at vbs = 0 and
    # clamps it at zero, which keeps it real and the threshold bounded.
    sqrt_phi = math.sqrt(phi)
    root = sqrt_phi - vbs / (2.0 * sqrt_phi)
    if root <= 0.0:
        return 0.0, 0.0
    return root, 0.5 / sqrt_phi


def threshold(model: Level1Model, vbs: float) -> float:
    """Threshold in device polarity: Vth = type·VTO + GAMMA·(s(vbs) − √PHI)."""
    root, _ = body_root(model.phi, vbs)
    return model.polarity * model.vto + model.gamma * (root - math.sqrt(model.phi))


class TerminalConductances(NamedTuple):
    """Partial derivatives of the drain-node current with respect to each terminal voltage.

    They sum to zero (only voltage differences matter), so a Newton solver can stamp
    them directly: drain row gets +g, source row −g, in each terminal's column.
    """

    wrt_drain: float
    wrt_gate: float
    wrt_source: float
    wrt_bulk: float


class Level1Point(NamedTuple):
    """Operating point of one level-1 device, normalised the way ngspice reports it.

    A named tuple rather than a dataclass: the solver makes one at every Newton iteration,
    and a tuple costs a fraction of a frozen dataclass to create.

    ``vgs``, ``vds``, ``vbs`` are the terminal differences in device polarity (×−1 for a
    PMOS), before any source/drain swap. When ``vds < 0`` the device conducts with its
    roles swapped (ngspice's mode = −1, ``swapped`` is True): ``vth``, ``vov``, ``vdsat``,
    ``gm``, ``gds``, ``gmbs`` and ``region`` then describe the device seen from the
    swapped source, and ``id`` is negative. ``id`` is ngspice's drain current without
    junction-diode and GMIN terms: positive into the drain of an on NMOS, positive out
    of the drain of an on PMOS. ``drain_current`` is the signed current into the drain
    node and ``conductances`` its partial derivatives — what an MNA solver stamps.

    ``gmbs`` is ngspice's value, GAMMA/(2s)·gm with the linearised s under forward body
    bias; the exact derivative used in ``conductances.wrt_bulk`` differs from it there
    (GAMMA/(2√PHI)·gm), and agrees everywhere else.
    """

    id: float
    vgs: float
    vds: float
    vbs: float
    vth: float
    vov: float
    vdsat: float
    gm: float
    gds: float
    gmbs: float
    region: Region
    swapped: bool
    drain_current: float
    conductances: TerminalConductances

    @property
    def mode(self) -> int:
        """ngspice's mode: +1 normal, −1 with source and drain swapped."""
        return -1 if self.swapped else 1



_new = tuple.__new__  # evaluate's way to make its named tuples (see there)


class DeviceConstants(NamedTuple):
    """What ``evaluate`` reads of a sized device's model, worked out once (``device_constants``):
    polarity, type·VTO, GAMMA, PHI, √PHI, LAMBDA and β = KP·W·M/Leff."""

    polarity: int
    signed_vto: float
    gamma: float
    phi: float
    sqrt_phi: float
    lambda_: float
    gain: float


def device_constants(model: Level1Model, geometry: Level1Geometry) -> DeviceConstants:
    """``DeviceConstants`` of a model and size; raises ValueError when Leff is not positive."""
    return _new(DeviceConstants, (
        model.polarity, model.polarity * model.vto, model.gamma, model.phi, math.sqrt(model.phi), model.lambda_,
        beta(model, geometry),
    ))  # fmt: skip


def evaluate(
    model: Level1Model, geometry: Level1Geometry, vd: float, vg: float, vs: float, vb: float
) -> Level1Point:
    """Square-law drain current and conductances at absolute terminal voltages (V)."""
    return evaluate_with(device_constants(model, geometry), vd, vg, vs, vb)


def evaluate_with(constants: DeviceConstants, vd: float, vg: float, vs: float, vb: float) -> Level1Point:
    """``evaluate`` with the model's values worked out once (``device_constants``): the same
    operations on the same numbers, for a solver that evaluates one device at every iteration."""
    polarity, signed_vto, gamma, phi, sqrt_phi, lambda_, gain = constants
    vgs = polarity * (vg - vs)
    vds = polarity * (vd - vs)
    vbs = polarity * (vb - vs)
    swapped = vds < 0.0
    if swapped:
        # mos1load.c mode = −1: the terminal at the lower potential (in device
        # polarity) acts as source, so the equations see vgd, vsd and vbd.
        gate_drive, channel_bias, body_bias = vgs - vds, -vds, vbs - vds
    else:
        gate_drive, channel_bias, body_bias = vgs, vds, vbs

    root, root_decline = body_root(phi, body_bias)
    vth = signed_vto + gamma * (root - sqrt_phi)
    vov = gate_drive - vth
    vdsat = max(vov, 0.0)
    # ngspice's body factor: zero when the linearised root has been clamped.
    body_factor = gamma / (2.0 * root) if root > 0.0 else 0.0
    exact_body_factor = gamma * root_decline  # = −∂vth/∂vbs

    region = classify_region(vov, channel_bias)
    current, gm, gds = channel(gain, lambda_, vov, channel_bias, region)
    gmbs = gm * body_factor
    gmbs_exact = gm * exact_body_factor

    # The named tuples are made by tuple.__new__ from their fields in order: their own __new__
    # is a Python function taking keywords, and the solvers evaluate at every Newton iteration.
    if swapped:
        # Current runs source→drain; the device's "source" is the drain terminal.
        # The polarity factors cancel in each derivative, so these hold for both types.
        drain_current = -polarity * current
        # (wrt_drain, wrt_gate, wrt_source, wrt_bulk)
        conductances = _new(TerminalConductances, (gm + gds + gmbs_exact, -gm, -gds, -gmbs_exact))
    else:
        drain_current = polarity * current
        conductances = _new(TerminalConductances, (gds, gm, -(gm + gds + gmbs_exact), gmbs_exact))
    return _new(Level1Point, (  # the fields, named alike but for id
        -current if swapped else current, vgs, vds, vbs, vth, vov, vdsat, gm, gds, gmbs, region, swapped,
        drain_current, conductances,
    ))  # fmt: skip


def channel(gain: float, lambda_: float, vov: float, vds: float, region: Region) -> tuple[float, float, float]:
    """The square law: channel current, gm and gds at overdrive `vov` and channel bias `vds` ≥ 0
    (device polarity, the acting source's view) in `region`, for β = `gain` and LAMBDA = `lambda_`.

    Saturation: ID = (β/2)·(1 + λ·VDS)·VOV²; triode: ID = β·(1 + λ·VDS)·VDS·(VOV − VDS/2).
    """
    clm = 1.0 + lambda_ * vds  # channel-length modulation
    if region == "cutoff":
        return 0.0, 0.0, 0.0
    if region == "saturation":
        return 0.5 * gain * clm * vov * vov, gain * clm * vov, 0.5 * lambda_ * gain * vov * vov
    return (
        gain * clm * vds * (vov - 0.5 * vds),
        gain * clm * vds,
        gain * clm * (vov - vds) + lambda_ * gain * vds * (vov - 0.5 * vds),
    )


def square_law(
    model: Level1Model, geometry: Level1Geometry, vov: float, vds: float, region: Region
) -> tuple[float, float, float]:
    """ID, gm and gds of a sized device at a given overdrive and VDS, in the region assumed
    (``channel`` with β = KP·W·M/Leff and the model's LAMBDA): what a closed form asks for."""
    return channel(beta(model, geometry), model.lambda_, vov, vds, region)


def saturation_overdrive(model: Level1Model, geometry: Level1Geometry, current: float) -> float:
    """The overdrive at which the device carries `current` in saturation, λ = 0: √(2·ID/β)."""
    return math.sqrt(2.0 * current / beta(model, geometry))


def triode_channel_bias(model: Level1Model, geometry: Level1Geometry, excess: float, current: float) -> float:
    """VDS at which the device carries `current` in triode (λ = 0) when VOV = VDS + `excess`:
    ID = β·(VDS²/2 + excess·VDS), the positive root √(excess² + 2·ID/β) − excess."""
    return math.sqrt(excess * excess + 2.0 * current / beta(model, geometry)) - excess


def saturation_overdrive_quadratic(
    model: Level1Model, geometry: Level1Geometry, u: float, rg: float
) -> tuple[float, float, float]:
    """(a, b, c) of a·VOV² + b·VOV + c = 0 for a saturated device (λ = 0) whose overdrive falls
    by `rg` volts per ampere of its current from `u` at zero current: VOV = u − rg·ID with
    ID = (β/2)·VOV², so (β·rg/2)·VOV² + VOV − u = 0."""
    return 0.5 * beta(model, geometry) * rg, 1.0, -u


def triode_current_quadratic(
    model: Level1Model, geometry: Level1Geometry, u: float, rg: float, w: float, rd: float
) -> tuple[float, float, float]:
    """(a, b, c) of a·ID² + b·ID + c = 0 for a device in triode (λ = 0) with VOV = u − rg·ID and
    VDS = w − rd·ID: ID = β·(VOV·VDS − VDS²/2) with both affine in ID."""
    gain = beta(model, geometry)
    return (
        gain * (rg * rd - 0.5 * rd * rd),
        gain * (w * rd - u * rd - rg * w) - 1.0,
        gain * (u * w - 0.5 * w * w),
    )


def resistor_loaded_edge_overdrive(gain: float, resistance: float, span: float) -> float:
    """The overdrive at the saturation–triode edge (VDS = VOV, λ = 0) of a device of gain β whose
    VDS is `span` less the drop of its current across `resistance`: VOV = span − R·(β/2)·VOV²,
    the positive root written as 2·span/(1 + √(1 + 2·β·R·span)) (no cancellation)."""
    return 2.0 * span / (1.0 + math.sqrt(1.0 + 2.0 * gain * resistance * span))


def junction_current(voltage: float, saturation_current: float, gmin: float, thermal: float) -> tuple[float, float]:
    """mos1load.c's bulk junction: current and conductance, GMIN included; `thermal` is kT/q
    at the device temperature."""
    if voltage <= -3.0 * thermal:
        return gmin * voltage - saturation_current, gmin
    growth = math.exp(min(MAX_EXP_ARG, voltage / thermal))
    return (
        saturation_current * (growth - 1.0) + gmin * voltage,
        saturation_current * growth / thermal + gmin,
    )


@record(frozen=True, eq=False)
class ArrayPoint:
    """``Level1Point`` over many bias points: each field an array (``region`` as codes of
    ``ask.REGIONS``); ``conductances`` are the four terminal derivatives, in order."""

    id: np.ndarray
    vgs: np.ndarray
    vds: np.ndarray
    vbs: np.ndarray
    vth: np.ndarray
    vov: np.ndarray
    vdsat: np.ndarray
    gm: np.ndarray
    gds: np.ndarray
    gmbs: np.ndarray
    region: np.ndarray
    swapped: np.ndarray
    drain_current: np.ndarray
    conductances: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]


def evaluate_arrays(
    model: Level1Model, geometry: Level1Geometry, vd: np.ndarray, vg: np.ndarray, vs: np.ndarray, vb: np.ndarray
) -> ArrayPoint:
    """``evaluate`` over arrays of absolute terminal voltages: the same equations, branch by
    branch with ``np.where``, in the same order of operations. The model's VTO, KP, GAMMA, PHI,
    LAMBDA and LD (and the geometry's W, L, M) may be arrays too, one value per point
    (broadcasting); a point whose Leff = L − 2·LD is not positive gets NaN."""
    polarity = model.polarity
    vd, vg, vs, vb = (np.asarray(v, dtype=float) for v in (vd, vg, vs, vb))
    vgs = polarity * (vg - vs)
    vds = polarity * (vd - vs)
    vbs = polarity * (vb - vs)
    return channel_arrays(
        polarity, model.vto, model.gamma, model.phi, model.lambda_, beta_arrays(model, geometry), vgs, vds, vbs
    )


def beta_arrays(model: Level1Model, geometry: Level1Geometry):
    """β = KP·W·M/Leff where any of them may be arrays: ``beta`` without its ValueError (a point
    whose Leff is not positive gets NaN). Plain floats give ``beta``'s float."""
    length = geometry.l - 2.0 * model.ld
    if not isinstance(length, np.ndarray) and not any(isinstance(v, np.ndarray) for v in (model.kp, geometry.w)):
        return model.kp * geometry.w * geometry.m / length if length > 0.0 else math.nan
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(length > 0.0, model.kp * geometry.w * geometry.m / length, math.nan)


def channel_arrays(polarity: int, vto, gamma, phi, lambda_, gain, vgs, vds, vbs) -> ArrayPoint:
    """The square law and its conductances over arrays of device-polarity voltages (vgs, vds, vbs:
    the differences ``evaluate`` forms), for card values VTO, GAMMA, PHI, LAMBDA and β = `gain`
    that are floats or arrays of the same length: ``evaluate``'s equations, bit for bit.

    Written for few array operations (a Newton iteration of a batch calls it per device): with
    vde = min(VDS, max(VOV, 0)) the three regions are one expression, ID = β·clm·vde·(max(VOV, 0)
    − vde/2), gm = β·clm·vde, gds = β·clm·(max(VOV, 0) − vde) + λ·β·vde·(max(VOV, 0) − vde/2),
    which in saturation (vde = VOV) is ``channel``'s form exactly (a halving is exact in binary
    floating point), in triode (vde = VDS) the same, and in cutoff 0. Swapped points (vds < 0)
    see vgd, −vds and vbd: vgs − min(vds, 0) and so on, no ``np.where`` when none is swapped."""
    swapped = vds < 0.0
    any_swapped = bool(swapped.any())
    if any_swapped:
        toward = np.minimum(vds, 0.0)
        gate_drive, channel_bias, body_bias = vgs - toward, np.abs(vds), vbs - toward
    else:
        gate_drive, channel_bias, body_bias = vgs, vds, vbs

    sqrt_phi = np.sqrt(phi)
    reverse = body_bias <= 0.0
    with np.errstate(invalid="ignore", divide="ignore"):
        if reverse.all():  # no forward body bias: the plain root, never zero where PHI > 0
            root = np.sqrt(phi - body_bias)
            root_decline = 0.5 / root
            body_factor = gamma / (2.0 * root)
        else:
            reverse_root = np.sqrt(np.where(reverse, phi - body_bias, phi))
            tangent = sqrt_phi - body_bias / (2.0 * sqrt_phi)
            root = np.where(reverse, reverse_root, np.where(tangent <= 0.0, 0.0, tangent))
            root_decline = np.where(reverse, 0.5 / reverse_root, np.where(tangent <= 0.0, 0.0, 0.5 / sqrt_phi))
            body_factor = np.where(root > 0.0, gamma / (2.0 * np.where(root > 0.0, root, 1.0)), 0.0)
    vth = polarity * vto + gamma * (root - sqrt_phi)
    vov = gate_drive - vth
    vdsat = np.maximum(vov, 0.0)
    exact_body_factor = gamma * root_decline

    gain_clm = gain * (1.0 + lambda_ * channel_bias)
    effective = np.minimum(channel_bias, vdsat)  # vde: VDS in triode, VOV in saturation, 0 in cutoff
    gm = gain_clm * effective
    half = vdsat - 0.5 * effective
    current = gm * half
    gds = gain_clm * (vdsat - effective) + lambda_ * gain * effective * half
    region = (vov > 0.0) * ((vov <= channel_bias) + 1)  # ask.region_codes: 0 cutoff, 1 triode, 2 saturation
    gmbs = gm * body_factor
    gmbs_exact = gm * exact_body_factor
    if any_swapped:
        signed = np.where(swapped, -current, current)
        conductances = (
            np.where(swapped, gm + gds + gmbs_exact, gds),
            np.where(swapped, -gm, gm),
            np.where(swapped, -gds, -(gm + gds + gmbs_exact)),
            np.where(swapped, -gmbs_exact, gmbs_exact),
        )
    else:
        signed = current
        conductances = (gds, gm, -(gm + gds + gmbs_exact), gmbs_exact)
    return ArrayPoint(
        signed, vgs, vds, vbs, vth, vov, vdsat, gm, gds, gmbs, region, swapped, polarity * signed, conductances,
    )  # fmt: skip


def junction_current_arrays(
    voltage: np.ndarray, saturation_current, gmin: float, thermal
) -> tuple[np.ndarray, np.ndarray]:
    """``junction_current`` over an array of junction voltages; the saturation current and kT/q
    may be arrays too (one value per point: a batch at several temperatures)."""
    reverse = voltage <= -3.0 * thermal
    if reverse.all():  # every junction reverse-biased (the usual case): no exponential
        return gmin * voltage - saturation_current, np.full(voltage.shape, gmin)
    growth = np.exp(np.minimum(MAX_EXP_ARG, np.where(reverse, 0.0, voltage) / thermal))
    current = np.where(reverse, gmin * voltage - saturation_current,
                       saturation_current * (growth - 1.0) + gmin * voltage)  # fmt: skip
    conductance = np.where(reverse, gmin, saturation_current * growth / thermal + gmin)
    return current, conductance
