"""The level-1 model card after ngspice's defaulting and derivations (mos1set.c, mos1temp.c at TNOM).

Scope, stated once: ``Level1Model.from_card`` gives the card's values, which hold at TNOM
(27 °C unless the card or ``.options tnom`` says otherwise; the NSUB derivations use TNOM, as
ngspice does). ``Level1Model.at_temperature`` is the temperature phase (``temperature.py``).
Series resistances RD, RS and RSH are not modelled; a card giving them is flagged in ``caveats``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from functools import lru_cache
from typing import Literal

from ...records import record
from .params import (
    CELSIUS_TO_KELVIN,
    CHARGE,
    CIRCUIT_TEMPERATURE_C,
    DERIVATION_RULES,
    EPS_OX,
    EPS_SI,
    K_OVER_Q,
    KNOWN_PARAMETERS,
    MODEL_DEFAULTS,
    NI_SILICON,
    canonical_name,
)
from .temperature import at_temperature, saturation_current_factor

Region = Literal["cutoff", "triode", "saturation"]
MosType = Literal["nmos", "pmos"]


@record(frozen=True)
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
        """IS(T)/IS and JS(T)/JS of the bulk junctions (``temperature.saturation_current_factor``)."""
        return saturation_current_factor(self.kelvin, self.tnom_celsius + CELSIUS_TO_KELVIN)

    def at_temperature(self, celsius: float) -> Level1Model:
        """This card at a device temperature of `celsius` °C: ngspice's temperature phase
        (``temperature.at_temperature``)."""
        return at_temperature(self, celsius)

    def with_lambda_gamma(self, lambda_: float, gamma: float) -> Level1Model:
        """This model with LAMBDA and GAMMA replaced: ``dataclasses.replace(self, lambda_=...,
        gamma=...)``, without replace's walk over every field and the frozen ``__init__`` (the
        hand analysis makes three per checked stage). Nothing is derived from the two."""
        model = object.__new__(type(self))
        vars(model).update(vars(self), lambda_=lambda_, gamma=gamma)
        return model

    def source_of(self, name: str) -> str:
        """Where a parameter's value came from: 'given', 'default' or the derivation rule."""
        key = canonical_name(name)
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
            card[canonical_name(raw_name)] = float(value)
        level = card.get("level", 1.0)
        if level != 1.0:
            raise ValueError(f"this is the level-1 model; the card asks for LEVEL={level:g}")
        unrecognised = tuple(sorted(set(card) - KNOWN_PARAMETERS))

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



def card_model_of(
    mos_type: str, params: Mapping[str, float], nominal_celsius: float = CIRCUIT_TEMPERATURE_C
) -> Level1Model:
    """``Level1Model.from_card``, remembered for the last cards asked (a check asks for each card
    from its hand column, its level-1 solver and its comparison; the stages of a batch share their
    library's cards): the same model for a parameter mapping with the same names and values in the
    same order (cards are not changed once read) and nominal temperature; a mapping holding a zero
    (which may be −0.0, equal to 0.0 but not the same card) only for that very mapping.
    Raises ValueError as from_card does (a refusal is not remembered)."""
    key = _Same(params) if 0 in params.values() else _SameValues(params)
    return _remembered_model(mos_type, key, nominal_celsius)


class _Same:
    """A key equal only to a key of the very same object (a dict is not hashable; the cache holds
    the object, so its id is not reused while the entry lives)."""

    __slots__ = ("value",)

    def __init__(self, value: object) -> None:
        self.value = value

    def __hash__(self) -> int:
        return id(self.value)

    def __eq__(self, other: object) -> bool:
        return isinstance(other, _Same) and other.value is self.value


class _SameValues:
    """A key equal to a key of a mapping with the same items in the same order (the mapping it
    was made from is kept for ``from_card``)."""

    __slots__ = ("value", "items", "hashed")

    def __init__(self, value: Mapping[str, float]) -> None:
        self.value = value
        self.items = tuple(value.items())
        self.hashed = hash(self.items)

    def __hash__(self) -> int:
        return self.hashed

    def __eq__(self, other: object) -> bool:
        return isinstance(other, _SameValues) and other.items == self.items


@lru_cache(maxsize=16, typed=True)
def _remembered_model(mos_type: str, params: _Same | _SameValues, nominal_celsius: float) -> Level1Model:
    return Level1Model.from_card(mos_type, params.value, nominal_celsius)
