"""One level-1 MOSFET instance from the Circuit: its model card at the device temperature, its
size (W, L, M with ngspice's defaults) and its bulk junctions (mos1set.c, mos1temp.c).

``mosfet_instance`` is the one place an analysis reads a MOSFET's model and size: the hand
analysis, the DC solver and the sweep all call it. The instance is also the device interface
what the solver's placed device (``placed.PlacedMosfet``) asks: evaluate, junctions, limit.
``junctions`` says whether it has its bulk junction diodes: the hand device (``without_junctions``)
has none, and limits only its gate and drain voltages.
"""

from __future__ import annotations

from collections.abc import Callable, MutableMapping
from dataclasses import replace
from functools import cached_property

from bridge.netlist.circuit import Circuit, Element, ModelCard
from bridge.records import with_fields

from ...records import record
from .convergence import limit, limit_channel, vcrit
from .load import DeviceConstants, Level1Geometry, Level1Point, beta, device_constants, evaluate_with, junction_current
from .model import Level1Model, card_model_of
from .params import CIRCUIT_TEMPERATURE_C, DEFAULT_JUNCTION_IS, DEFAULT_L, DEFAULT_W

ModelChoice = Callable[[ModelCard], Level1Model]


class InstanceError(ValueError):
    """A MOSFET instance that cannot be built; ``str()`` is the reason, without the element name."""


class NodeCountError(InstanceError):
    """The element does not have four nodes (d g s b)."""


class NoModelCard(InstanceError):
    """No NMOS/PMOS card of the element's model name."""


class NotLevel1(InstanceError):
    """The card asks for another LEVEL; ``card`` is it."""

    def __init__(self, card: ModelCard) -> None:
        super().__init__(f"model {card.name} is LEVEL={card.level}")
        self.card = card


class ModelValueError(InstanceError):
    """The card's values give no level-1 model (ngspice's derivation or temperature rules)."""

    def __init__(self, card: ModelCard, message: str) -> None:
        super().__init__(message)
        self.card = card


class SizeValueError(InstanceError):
    """W, L or M is not a positive number, or Leff = L − 2·LD is not positive."""


def default_size(circuit: Circuit) -> tuple[float, float]:
    """The W and L an instance without them takes: `.options defw/defl`, else ngspice's 100 µm."""
    options = circuit.options()
    width, length = (
        float(value) if isinstance(value := options.get(key), (int, float)) else fallback
        for key, fallback in (("defw", DEFAULT_W), ("defl", DEFAULT_L))
    )
    return width, length


def card_model(
    circuit: Circuit, card: ModelCard, element: Element, model_choice: ModelChoice | None = None,
    *, temperature: float | None = None,
) -> Level1Model:
    """The card's level-1 model at the element's device temperature (``.temp``, ``.options temp``,
    TEMP/DTEMP; `temperature` when the caller has it already), its TNOM defaulting to ``.options
    tnom``. `model_choice` builds the model from the card (with that TNOM written into it) in
    place of ``Level1Model.from_card``. Raises ValueError."""
    nominal = circuit.nominal_temperature()
    if model_choice is None:
        model = card_model_of(card.type, card.params, nominal)  # Level1Model.from_card, remembered
    else:
        if "tnom" not in card.params and nominal != CIRCUIT_TEMPERATURE_C:
            card = replace(card, params={**card.params, "tnom": nominal})
        model = model_choice(card)
    return model.at_temperature(circuit.device_temperature(element) if temperature is None else temperature)


@record(frozen=True)
class Mos1Instance:
    """A sized level-1 MOSFET at its temperature, with its bulk junctions (per M, times M)."""

    name: str
    card: ModelCard
    model: Level1Model
    geometry: Level1Geometry
    drain_saturation_current: float
    source_saturation_current: float
    drain_vcrit: float
    source_vcrit: float
    thermal_voltage: float  # kT/q at the device temperature, for its bulk junctions
    junctions: bool = True  # False: the hand device, no bulk diodes (nor their GMIN)

    @property
    def gain_factor(self) -> float:
        """β = KP·W·M/Leff (A/V²): the K of the hand analysis."""
        return beta(self.model, self.geometry)

    @cached_property
    def constants(self) -> DeviceConstants:
        """What the square law reads of the model and size, worked out once (``load.device_constants``)."""
        return device_constants(self.model, self.geometry)

    def evaluate(self, vd: float, vg: float, vs: float, vb: float) -> Level1Point:
        """The channel at absolute terminal voltages (``load.evaluate``)."""
        return evaluate_with(self.constants, vd, vg, vs, vb)

    def junction(self, voltage: float, drain_side: bool, gmin: float) -> tuple[float, float]:
        """Current and conductance of the bulk–drain (or bulk–source) junction at `voltage`
        (device polarity), GMIN included."""
        saturation = self.drain_saturation_current if drain_side else self.source_saturation_current
        return junction_current(voltage, saturation, gmin, self.thermal_voltage)

    def limit(self, state: list[float], vgs: float, vds: float, vbs: float) -> tuple[float, float, float, float, bool]:
        """mos1load.c's limiting of new device-polarity voltages against `state` (``convergence.limit``;
        without junctions ``convergence.limit_channel``: nothing to clip on the bulk side)."""
        if not self.junctions:
            return limit_channel(state, vgs, vds, vbs)
        return limit(state, vgs, vds, vbs, self.thermal_voltage, self.source_vcrit, self.drain_vcrit)

    def without_junctions(self, model: Level1Model) -> Mos1Instance:
        """The hand device: this instance with `model` (the hand model of its card) and no bulk
        junction diodes, so no GMIN either (the hand analysis makes one per device and solve); the
        constants worked out for this instance's model are not carried over."""
        return with_fields(self, drop=("constants",), model=model, junctions=False)

    def junction_start(self) -> list[float]:
        """ngspice's MODEINITJCT guess: vgs = type·VTO, vds = 0, vbs = −1 (and von = vgs)."""
        vgs = self.model.polarity * self.model.vto
        return [vgs, 0.0, -1.0, -1.0, vgs]


def _number(value: object, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise SizeValueError(f"{what} is not a number ({value!r})")
    return float(value)


def mosfet_instance(
    circuit: Circuit,
    element: Element,
    *,
    model_choice: ModelChoice | None = None,
    defaults: tuple[float, float] | None = None,
    models: MutableMapping[tuple[str, float], Level1Model] | None = None,
) -> Mos1Instance:
    """The MOSFET `element` of `circuit` as ngspice's mos1 would set it up.

    Model: the card at the device temperature (``card_model``); size: W and L from the instance,
    else `defaults` (``default_size``), and M; bulk junctions as mos1load.c: JS·area when JS and
    both areas are given, IS otherwise, both times M, at the device temperature. `models` caches
    models by card name and temperature across instances. Raises an ``InstanceError``.
    """
    if len(element.nodes) != 4:
        raise NodeCountError("a MOSFET needs 4 nodes (d g s b)")
    card = circuit.model(element.model or "")
    if card is None or card.type.lower() not in ("nmos", "pmos"):
        raise NoModelCard(f"no MOSFET model `{element.model}`")
    if card.level != 1:
        raise NotLevel1(card)
    temperature = circuit.device_temperature(element)
    key = (card.name.lower(), temperature)
    model = models.get(key) if models is not None else None
    if model is None:
        try:
            model = card_model(circuit, card, element, model_choice, temperature=temperature)
        except ValueError as exc:
            raise ModelValueError(card, str(exc)) from None
        if models is not None:
            models[key] = model
    params = element.params
    default_w, default_l = default_size(circuit) if defaults is None else defaults
    try:
        geometry = Level1Geometry(
            w=_number(params.get("w", default_w), "W"),
            l=_number(params.get("l", default_l), "L"),
            m=_number(params.get("m", 1.0), "M"),
        )
        beta(model, geometry)  # checks Leff > 0 once, not at every Newton iteration
    except SizeValueError:
        raise
    except ValueError as exc:
        raise SizeValueError(str(exc)) from None
    multiplier = geometry.m
    scale = model.saturation_current_factor
    density = card.params.get("js", 0.0) * scale
    drain_area = _number(params.get("ad", 0.0), "AD")
    source_area = _number(params.get("as", 0.0), "AS")
    if density == 0.0 or drain_area == 0.0 or source_area == 0.0:
        drain_current = source_current = card.params.get("is", DEFAULT_JUNCTION_IS) * scale * multiplier
    else:
        drain_current = density * drain_area * multiplier
        source_current = density * source_area * multiplier
    thermal = model.thermal_voltage
    return Mos1Instance(
        name=element.name,
        card=card,
        model=model,
        geometry=geometry,
        drain_saturation_current=drain_current,
        source_saturation_current=source_current,
        drain_vcrit=vcrit(thermal, drain_current),
        source_vcrit=vcrit(thermal, source_current),
        thermal_voltage=thermal,
    )
