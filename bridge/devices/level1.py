"""Level-1 (Shichman–Hodges) MOSFET, as ngspice's mos1 device computes it.

One place for the physics of the level-1 device: model card → derived values
(ngspice's mos1set.c / mos1temp.c) → drain current and conductances (mos1load.c).

Scope and assumptions, stated once:

* Temperature: ``Level1Model.from_card`` gives the card's values, which hold at
  TNOM (27 °C unless the card or ``.options tnom`` says otherwise; the NSUB
  derivations use TNOM, as ngspice does). ``Level1Model.at_temperature`` is
  ngspice's temperature phase (mos1temp.c): KP scaled by (T/TNOM)^−1.5, PHI and VTO
  moved through the band gap EG(T) = 1.16 − 7.02e-4·T²/(T + 1108) and kT/q, the
  bulk-junction IS/JS scaled by exp(EG(TNOM)/Vt(TNOM) − EG(T)/Vt(T)); GAMMA and
  LAMBDA do not change. The junction capacitances and potential (PB) it also scales
  play no part at DC and are left out.
* Only the channel current is modelled. ngspice also places bulk–source and
  bulk–drain junction diodes (IS = 1e-14 A by default) plus GMIN (1e-12 S) across
  them; with reverse-biased junctions they add picoamps, which is why ngspice
  reports a few pA of drain current in cutoff. Series resistances RD, RS and RSH
  are not modelled either; a card giving them is flagged in ``caveats``.
* Voltages and currents in the device's own polarity follow ngspice: for a PMOS
  every terminal voltage difference is multiplied by −1, so an enhancement PMOS
  has a positive threshold, overdrive and drain current when on.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Literal, NamedTuple

# Physical constants exactly as ngspice 39 uses them (const.h, and the literal
# permittivity written into mos1temp.c). Reproducing the derived KP/PHI/GAMMA/VTO
# to ngspice's printed 12 digits needs these values, not the CODATA 2018 ones.
CHARGE = 1.6021766208e-19  # C
BOLTZMANN = 1.38064852e-23  # J/K
K_OVER_Q = BOLTZMANN / CHARGE  # V/K
EPS0_MOS1 = 8.854214871e-12  # F/m, the value mos1temp.c hard-codes
EPS_OX = 3.9 * EPS0_MOS1  # F/m, SiO2
EPS_SI = 11.70 * EPS0_MOS1  # F/m, silicon
NI_SILICON = 1.45e16  # m⁻³ (1.45e10 cm⁻³), intrinsic carrier density
CELSIUS_TO_KELVIN = 273.15
CIRCUIT_TEMPERATURE_C = 27.0  # ngspice's default TEMP and TNOM
REFERENCE_TEMPERATURE_K = 300.15  # ngspice's REFTEMP (const.h), 27 °C
# The silicon band gap at REFTEMP as mos1temp.c writes it (1.1150877 eV in its `arg`).
BAND_GAP_AT_REFERENCE = 1.1150877  # eV

# ngspice's instance defaults (.options DEFW / DEFL).
DEFAULT_W = 100e-6
DEFAULT_L = 100e-6

# ngspice's model defaults (mos1set.c), in SI form as SPICE writes the card.
MODEL_DEFAULTS: Mapping[str, float] = {
    "vto": 0.0,
    "kp": 2e-5,
    "gamma": 0.0,
    "phi": 0.6,
    "lambda": 0.0,
    "ld": 0.0,
    "uo": 600.0,
    "tpg": 1.0,
    "nss": 0.0,
    "tnom": CIRCUIT_TEMPERATURE_C,
}

# The rule behind each value this module can derive, worded for a report.
DERIVATION_RULES: Mapping[str, str] = {
    "kp": "KP from UO·εox/TOX",
    "phi": "PHI from NSUB: 2·kT/q·ln(NSUB/ni)",
    "gamma": "GAMMA from NSUB and TOX: √(2·εsi·q·NSUB)/Cox",
    "vto": "VTO from NSUB, TOX, TPG, NSS: flat-band voltage + type·(GAMMA·√PHI + PHI)",
}

# Every parameter ngspice's mos1 accepts on a .model card (mos1.c), so that a
# misspelt name can be reported instead of vanishing.
_KNOWN_PARAMETERS = frozenset(
    {
        "level", "vto", "kp", "gamma", "phi", "lambda", "rd", "rs", "cbd", "cbs",
        "is", "pb", "cgso", "cgdo", "cgbo", "rsh", "cj", "mj", "cjsw", "mjsw",
        "js", "tox", "ld", "uo", "kf", "af", "fc", "nsub", "tpg", "nss", "tnom",
    }
)  # fmt: skip
_ALIASES: Mapping[str, str] = {"vt0": "vto", "u0": "uo"}

Region = Literal["cutoff", "triode", "saturation"]
MosType = Literal["nmos", "pmos"]


@dataclass(frozen=True)
class Level1Model:
    """Level-1 model card after ngspice's defaulting and derivations (at 27 °C).

    ``polarity`` is +1 for NMOS, −1 for PMOS. ``vto`` keeps the card's sign (negative
    for an enhancement PMOS); ``lambda_`` is the card's LAMBDA. ``given``, ``defaulted``
    and ``derived`` partition the parameter names this module uses; ``source_of``
    words the origin of one of them for a report.
    """

    polarity: int
    vto: float
    kp: float
    gamma: float
    phi: float
    lambda_: float
    ld: float
    uo: float
    tox: float | None
    nsub: float | None
    tpg: int
    nss: float
    tnom_celsius: float
    given: tuple[str, ...]
    defaulted: tuple[str, ...]
    derived: tuple[str, ...]
    unrecognised: tuple[str, ...] = ()
    caveats: tuple[str, ...] = ()
    # Set by at_temperature: the device temperature (°C) the values above hold at, and the
    # model as the card gives it (at TNOM). None for the card itself.
    temperature_celsius: float | None = None
    nominal: Level1Model | None = None

    @property
    def mos_type(self) -> MosType:
        """'nmos' or 'pmos'."""
        return "nmos" if self.polarity > 0 else "pmos"

    @property
    def at_nominal_temperature(self) -> bool:
        """True when TNOM is 27 °C, ngspice's default circuit temperature."""
        return math.isclose(self.tnom_celsius, CIRCUIT_TEMPERATURE_C, abs_tol=1e-9)

    @property
    def kelvin(self) -> float:
        """The device temperature in K: the one given to ``at_temperature``, else TNOM."""
        celsius = self.tnom_celsius if self.temperature_celsius is None else self.temperature_celsius
        return celsius + CELSIUS_TO_KELVIN

    @property
    def thermal_voltage(self) -> float:
        """kT/q at the device temperature: mos1load.c's `vt` for the bulk junctions."""
        return K_OVER_Q * self.kelvin

    @property
    def saturation_current_factor(self) -> float:
        """IS(T)/IS and JS(T)/JS of the bulk junctions: mos1temp.c's
        exp(−EG(T)/Vt(T) + EG(TNOM)/Vt(TNOM)); 1 at TNOM."""
        kelvin, tnom = self.kelvin, self.tnom_celsius + CELSIUS_TO_KELVIN
        if kelvin == tnom:
            return 1.0
        return math.exp(-band_gap(kelvin) / (K_OVER_Q * kelvin) + band_gap(tnom) / (K_OVER_Q * tnom))

    def at_temperature(self, celsius: float) -> Level1Model:
        """This card at a device temperature of `celsius` °C: ngspice's temperature phase.

        mos1temp.c (ngspice 39, MOS1temp), with T the device temperature and TNOM the card's:
        KP(T) = KP·(T/TNOM)^−1.5; PHI(T) = (T/REFTEMP)·PHIo + pbfact(T) with
        PHIo = (PHI − pbfact(TNOM))/(TNOM/REFTEMP); Vbi(T) = VTO − type·GAMMA·√PHI
        + (EG(TNOM) − EG(T))/2 + type·(PHI(T) − PHI)/2; VTO(T) = Vbi(T) + type·GAMMA·√PHI(T).
        GAMMA, LAMBDA and the rest keep the card's values. At T = TNOM the card's values
        stand as they are. The result keeps the card in ``nominal`` (a model already at a
        temperature is re-scaled from that card). Raises ValueError when PHI(T) ≤ 0.
        """
        card = self.nominal or self
        kelvin = celsius + CELSIUS_TO_KELVIN
        if not kelvin > 0.0:
            raise ValueError(f"temperature {celsius:g} °C is below absolute zero")
        tnom = card.tnom_celsius + CELSIUS_TO_KELVIN
        if not tnom > 0.0:
            raise ValueError(f"TNOM = {card.tnom_celsius:g} °C is below absolute zero")
        kp, phi, vto = card.kp, card.phi, card.vto
        if not math.isclose(kelvin, tnom, rel_tol=0.0, abs_tol=1e-9):
            ratio = kelvin / tnom
            kp = card.kp / (ratio * math.sqrt(ratio))
            phi_at_reference = (card.phi - _potential_shift(tnom)) / (tnom / REFERENCE_TEMPERATURE_K)
            phi = (kelvin / REFERENCE_TEMPERATURE_K) * phi_at_reference + _potential_shift(kelvin)
            if phi <= 0.0:
                raise ValueError(
                    f"PHI at {celsius:g} °C comes out as {phi:.4g} V (ngspice's level-1 temperature "
                    f"rules from PHI = {card.phi:g} V at TNOM = {card.tnom_celsius:g} °C); it must be positive"
                )
            built_in = (
                card.vto
                - card.polarity * card.gamma * math.sqrt(card.phi)
                + 0.5 * (band_gap(tnom) - band_gap(kelvin))
                + card.polarity * 0.5 * (phi - card.phi)
            )
            vto = built_in + card.polarity * card.gamma * math.sqrt(phi)
        model = object.__new__(type(self))
        vars(model).update(vars(self), kp=kp, phi=phi, vto=vto, temperature_celsius=float(celsius), nominal=card)
        return model

    def with_lambda_gamma(self, lambda_: float, gamma: float) -> Level1Model:
        """This model with LAMBDA and GAMMA replaced: ``dataclasses.replace(self, lambda_=...,
        gamma=...)``, without replace's walk over every field and the frozen ``__init__`` (the
        hand analysis makes three per checked stage). Nothing is derived from the two."""
        model = object.__new__(type(self))
        vars(model).update(vars(self), lambda_=lambda_, gamma=gamma)
        return model

    def source_of(self, name: str) -> str:
        """Where a parameter's value came from: 'given', 'default' or the derivation rule."""
        key = _ALIASES.get(name.lower(), name.lower())
        if key in self.derived:
            return DERIVATION_RULES[key]
        if key in self.given:
            return "given"
        if key in self.defaulted:
            return "default"
        raise KeyError(f"level-1 model has no parameter {name!r}")

    @classmethod
    def from_card(
        cls, mos_type: str, params: Mapping[str, float], nominal_celsius: float = CIRCUIT_TEMPERATURE_C
    ) -> Level1Model:
        """Build the model ngspice would use from a card's type and numeric parameters.

        `nominal_celsius` is the circuit's nominal temperature (`.options tnom`), the TNOM of
        a card that gives none. The values hold at TNOM; ``at_temperature`` moves them."""
        kind = mos_type.lower()
        if kind not in ("nmos", "pmos"):
            raise ValueError(f"level-1 device type must be 'nmos' or 'pmos', not {mos_type!r}")
        polarity = 1 if kind == "nmos" else -1

        card: dict[str, float] = {}
        for raw_name, value in params.items():
            card[_ALIASES.get(raw_name.lower(), raw_name.lower())] = float(value)
        level = card.get("level", 1.0)
        if level != 1.0:
            raise ValueError(f"this is the level-1 model; the card asks for LEVEL={level:g}")
        unrecognised = tuple(sorted(set(card) - _KNOWN_PARAMETERS))

        def value_of(name: str) -> float:
            return card.get(name, MODEL_DEFAULTS[name])

        derived: list[str] = []
        kp = value_of("kp")
        phi = value_of("phi")
        gamma = value_of("gamma")
        vto = value_of("vto")
        uo = value_of("uo")
        nss = value_of("nss")
        tnom_celsius = card.get("tnom", nominal_celsius)
        tnom_kelvin = tnom_celsius + CELSIUS_TO_KELVIN
        tpg_value = value_of("tpg")
        if tpg_value != int(tpg_value):
            # ngspice reads TPG as an integer; a fractional one is a card error.
            raise ValueError(f"TPG must be an integer (+1, 0 or -1), not {tpg_value:g}")
        tpg = int(tpg_value)
        tox = card.get("tox")
        nsub = card.get("nsub")
        caveats: list[str] = []

        # mos1temp.c derives anything only from a non-zero TOX: without it NSUB,
        # UO, TPG and NSS are inert and the plain defaults stand.
        if tox is not None and tox != 0.0:
            cox = EPS_OX / tox
            if "kp" not in card:
                kp = uo * cox * 1e-4  # UO is in cm²/V·s
                derived.append("kp")
            if nsub is not None:
                doping = nsub * 1e6  # cm⁻³ → m⁻³
                if doping <= NI_SILICON:
                    raise ValueError(
                        f"NSUB = {nsub:g} cm⁻³ is not above the intrinsic density "
                        "1.45e10 cm⁻³ (ngspice stops with 'Nsub < Ni')"
                    )
                # Fermi potentials and band gap at TNOM, as mos1temp.c does.
                thermal_voltage = K_OVER_Q * tnom_kelvin
                band_gap = 1.16 - (7.02e-4 * tnom_kelvin**2) / (tnom_kelvin + 1108.0)
                if "phi" not in card:
                    phi = max(0.1, 2.0 * thermal_voltage * math.log(doping / NI_SILICON))
                    derived.append("phi")
                if "gamma" not in card:
                    gamma = math.sqrt(2.0 * EPS_SI * CHARGE * doping) / cox
                    derived.append("gamma")
                if "vto" not in card:
                    fermi_substrate = polarity * 0.5 * phi
                    gate_work_function = 3.2  # aluminium gate (TPG = 0)
                    if tpg != 0:
                        fermi_gate = polarity * tpg * 0.5 * band_gap
                        gate_work_function = 3.25 + 0.5 * band_gap - fermi_gate
                    work_function_difference = gate_work_function - (3.25 + 0.5 * band_gap + fermi_substrate)
                    flat_band = work_function_difference - nss * 1e4 * CHARGE / cox
                    vto = flat_band + polarity * (gamma * math.sqrt(phi) + phi)
                    derived.append("vto")
        elif nsub is not None:
            caveats.append("NSUB given without TOX: ngspice derives nothing from it")

        if phi <= 0.0:
            raise ValueError(f"PHI must be positive, got {phi:g} V")
        for series in ("rd", "rs", "rsh"):
            if card.get(series, 0.0) != 0.0:
                caveats.append(f"{series.upper()} given: series resistance not modelled here")

        # TOX and NSUB have no default: absent, they simply switch the derivations off.
        given = tuple(name for name in (*MODEL_DEFAULTS, "tox", "nsub") if name in card)
        defaulted = tuple(name for name in MODEL_DEFAULTS if name not in card and name not in derived)
        return cls(
            polarity=polarity,
            vto=vto,
            kp=kp,
            gamma=gamma,
            phi=phi,
            lambda_=value_of("lambda"),
            ld=value_of("ld"),
            uo=uo,
            tox=tox,
            nsub=nsub,
            tpg=tpg,
            nss=nss,
            tnom_celsius=tnom_celsius,
            given=given,
            defaulted=defaulted,
            derived=tuple(derived),
            unrecognised=unrecognised,
            caveats=tuple(caveats),
        )


def band_gap(kelvin: float) -> float:
    """Silicon band gap in eV at `kelvin`, as mos1temp.c computes it: 1.16 − 7.02e-4·T²/(T + 1108)."""
    return 1.16 - (7.02e-4 * kelvin * kelvin) / (kelvin + 1108.0)


def _potential_shift(kelvin: float) -> float:
    """mos1temp.c's pbfact: −2·Vt·(1.5·ln(T/REFTEMP) + q·(−EG(T)/(2kT) + 1.1150877/(2k·REFTEMP)))."""
    thermal_energy = BOLTZMANN * kelvin
    arg = -band_gap(kelvin) / (thermal_energy + thermal_energy) + BAND_GAP_AT_REFERENCE / (
        BOLTZMANN * (REFERENCE_TEMPERATURE_K + REFERENCE_TEMPERATURE_K)
    )
    return -2.0 * K_OVER_Q * kelvin * (1.5 * math.log(kelvin / REFERENCE_TEMPERATURE_K) + CHARGE * arg)


@dataclass(frozen=True)
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


def _body_root(phi: float, vbs: float) -> tuple[float, float]:
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
    root, _ = _body_root(model.phi, vbs)
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


def classify_region(vov: float, vds: float) -> Region:
    """Cutoff when vov ≤ 0, saturation when vds ≥ vov, otherwise triode (polarity-normalised)."""
    if vov <= 0.0:
        return "cutoff"
    if vov <= vds:
        return "saturation"
    return "triode"


_new = tuple.__new__  # evaluate's way to make its named tuples (see there)


def evaluate(
    model: Level1Model, geometry: Level1Geometry, vd: float, vg: float, vs: float, vb: float
) -> Level1Point:
    """Square-law drain current and conductances at absolute terminal voltages (V)."""
    polarity = model.polarity
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

    root, root_decline = _body_root(model.phi, body_bias)
    vth = polarity * model.vto + model.gamma * (root - math.sqrt(model.phi))
    vov = gate_drive - vth
    vdsat = max(vov, 0.0)
    # ngspice's body factor: zero when the linearised root has been clamped.
    body_factor = model.gamma / (2.0 * root) if root > 0.0 else 0.0
    exact_body_factor = model.gamma * root_decline  # = −∂vth/∂vbs

    gain = beta(model, geometry)
    clm = 1.0 + model.lambda_ * channel_bias  # channel-length modulation
    region = classify_region(vov, channel_bias)
    if region == "cutoff":
        current = gm = gds = 0.0
    elif region == "saturation":
        current = 0.5 * gain * clm * vov * vov
        gm = gain * clm * vov
        gds = 0.5 * model.lambda_ * gain * vov * vov
    else:
        current = gain * clm * channel_bias * (vov - 0.5 * channel_bias)
        gm = gain * clm * channel_bias
        gds = gain * clm * (vov - channel_bias) + model.lambda_ * gain * channel_bias * (
            vov - 0.5 * channel_bias
        )
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
