"""The level-1 device package: one instance function, one parameter table, floats and arrays alike.

The array form is checked against the scalar form (the reference, itself checked against ngspice
in test_level1_device.py) to 1e-12 relative; the instance against what each analysis read
before it (the same card, size and junction rules).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from bridge.analysis import dcsolve
from bridge.analysis.hand import HandAnalysisError, hand_analysis
from bridge.devices.mos1 import REGIONS, Level1Geometry, Level1Model, evaluate, evaluate_arrays, overdrive
from bridge.devices.mos1.instance import NotLevel1, SizeValueError, mosfet_instance
from bridge.devices.mos1.params import ALIASES, KNOWN_PARAMETERS, canonical_name
from bridge.netlist import parse_netlist

# A greenhouse soil-moisture probe: a PMOS heater switch and an NMOS sense stage, run warm.
GREENHOUSE = """greenhouse probe driver
.model nsense nmos (vt0=0.55 kp=90u gamma=0.45 phi=0.7 lambda=0.03 is=2e-15 js=1e-4)
.model pheat pmos (vto=-0.7 u0=230 tox=20n lambda=0.05)
.options defw=20u defl=3u tnom=30
.temp 45
vdd vdd 0 5
vg g 0 1.6
rd vdd d 12k
rs s 0 1k
m1 d g s 0 nsense w=40u ad=80p as=80p m=2
vgp gp 0 3.1
rh vh 0 2.2k
m2 vh gp vdd vdd pheat l=2u temp=60
.end
"""


def _circuit(text: str = GREENHOUSE):
    return parse_netlist(text, "greenhouse.cir")


def _close(a: float, b: float, rel: float = 1e-12) -> bool:
    return abs(a - b) <= rel * max(abs(a), abs(b)) + 1e-300


@pytest.mark.parametrize("mos_type, card", [
    ("nmos", {"vto": 0.6, "kp": 120e-6, "gamma": 0.5, "phi": 0.65, "lambda": 0.04}),
    ("pmos", {"vto": -0.8, "kp": 40e-6, "gamma": 0.3, "phi": 0.7, "lambda": 0.02}),
    ("nmos", {"vto": -1.2, "kp": 60e-6}),  # depletion, no body effect
])  # fmt: skip
def test_array_evaluation_equals_scalar_evaluation_in_every_region(mos_type: str, card: dict) -> None:
    model = Level1Model.from_card(mos_type, card)
    geometry = Level1Geometry(w=15e-6, l=2e-6, m=3.0)
    rng = np.random.default_rng(13)
    # Both signs of vds (swapped mode), forward body bias past the tangent's zero, cutoff.
    vd, vg, vs, vb = (rng.uniform(-4.0, 4.0, 600) for _ in range(4))
    arrays = evaluate_arrays(model, geometry, vd, vg, vs, vb)
    regions_seen = set()
    for k in range(vd.size):
        point = evaluate(model, geometry, vd[k], vg[k], vs[k], vb[k])
        regions_seen.add(point.region)
        assert REGIONS[arrays.region[k]] == point.region
        assert bool(arrays.swapped[k]) == point.swapped
        for name in ("id", "vth", "vov", "vdsat", "gm", "gds", "gmbs", "drain_current"):
            assert _close(float(getattr(arrays, name)[k]), getattr(point, name)), (name, k)
        for got, want in zip(arrays.conductances, point.conductances, strict=True):
            assert _close(float(got[k]), want)
    assert regions_seen == {"cutoff", "triode", "saturation"}


def test_overdrive_of_a_swapped_device_is_taken_from_the_drain_for_floats_and_arrays() -> None:
    assert overdrive(2.0, 1.0, 0.5) == 1.5
    assert overdrive(2.0, -1.0, 0.5) == 2.5  # vgd − vth with vgd = vgs − vds
    vector = overdrive(np.array([2.0, 2.0]), np.array([1.0, -1.0]), np.array([0.5, 0.5]))
    assert vector.tolist() == [1.5, 2.5]


def test_one_instance_gives_card_size_temperature_and_junctions() -> None:
    circuit = _circuit()
    sense = mosfet_instance(circuit, circuit.element("m1"))
    # The card read through the alias table (VT0), at 45 °C from TNOM 30 °C (.options tnom).
    card = Level1Model.from_card("nmos", {"vto": 0.55, "kp": 90e-6, "gamma": 0.45, "phi": 0.7,
                                          "lambda": 0.03, "is": 2e-15, "js": 1e-4}, 30.0)  # fmt: skip
    expected = card.at_temperature(45.0)
    assert sense.model.vto == expected.vto and sense.model.kp == expected.kp
    # W from the instance, L from .options defl, M = 2.
    assert (sense.geometry.w, sense.geometry.l, sense.geometry.m) == (40e-6, 3e-6, 2.0)
    # JS·area·M with both areas given, scaled to 45 °C (mos1temp.c's tSatCurDens).
    factor = expected.saturation_current_factor
    assert factor > 1.0
    assert _close(sense.drain_saturation_current, 1e-4 * factor * 80e-12 * 2.0)
    heater = mosfet_instance(circuit, circuit.element("m2"))
    assert heater.model.temperature_celsius == 60.0  # instance TEMP
    assert heater.geometry.w == 20e-6 and heater.geometry.l == 2e-6  # .options defw
    assert "kp" in heater.model.derived  # KP from U0 (alias) and TOX
    assert math.isclose(heater.drain_saturation_current, 1e-14 * heater.model.saturation_current_factor)


def test_the_solver_places_the_instance_the_device_package_gives() -> None:
    circuit = _circuit()
    network = dcsolve._build_network(circuit, dcsolve.level1_model)
    for placed in network.mosfets:
        device = mosfet_instance(circuit, circuit.element(placed.name))
        assert placed.model.kp == device.model.kp and placed.model.vto == device.model.vto
        assert placed.geometry == device.geometry
        assert placed.drain_saturation_current == device.drain_saturation_current


def test_instance_refusals_name_their_reason() -> None:
    other_level = GREENHOUSE.replace("nmos (vt0", "nmos (level=3 vt0")
    circuit = _circuit(other_level)
    with pytest.raises(NotLevel1):
        mosfet_instance(circuit, circuit.element("m1"))
    with pytest.raises(HandAnalysisError, match="LEVEL=3; the hand model reads level-1 cards"):
        hand_analysis(circuit)
    short = _circuit(GREENHOUSE.replace("w=40u", "w=40u l=0.2u").replace("vt0=0.55", "vt0=0.55 ld=0.1u"))
    with pytest.raises(SizeValueError, match="effective channel length"):
        mosfet_instance(short, short.element("m1"))


def test_front_end_reads_aliases_from_the_device_parameter_table() -> None:
    assert all(canonical_name(alias.upper()) == name for alias, name in ALIASES.items())
    assert set(ALIASES.values()) <= KNOWN_PARAMETERS
    card = _circuit().model("nsense")
    assert card.params["vto"] == 0.55 and "vt0" not in card.params
    assert _circuit().model("pheat").params["uo"] == 230.0


def test_no_module_outside_the_device_package_writes_the_square_law() -> None:
    """The patterns issue 13 names (½·K·VOV², gm = K·VOV, the inverse √(2·ID/K)) appear in
    bridge/devices/ only; the hand closed forms ask ``load.square_law`` and its inverses."""
    import re
    from pathlib import Path

    import bridge

    square_law = re.compile(
        r"0\.5 \* (k|gain|beta)\w* \* vov|\b(k|gain) \* vov \* vov|2\.0 \* current / (k|gain)\b|gm = k \* "
    )
    root = Path(bridge.__file__).parent
    writers = [
        f"{path.relative_to(root)}:{number}"
        for path in root.rglob("*.py")
        if "devices" not in path.relative_to(root).parts
        for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1)
        if square_law.search(line)
    ]
    assert writers == []


def test_square_law_and_its_inverses_agree_with_the_device_evaluation() -> None:
    from bridge.devices.mos1.load import saturation_overdrive, square_law, triode_channel_bias

    model = Level1Model.from_card("nmos", {"vto": 0.5, "kp": 100e-6})
    geometry = Level1Geometry(w=20e-6, l=1e-6)
    point = evaluate(model, geometry, 3.0, 1.3, 0.0, 0.0)  # saturation, VOV = 0.8 V
    current, gm, gds = square_law(model, geometry, point.vov, point.vds, "saturation")
    assert (current, gm, gds) == (point.id, point.gm, point.gds)
    assert _close(saturation_overdrive(model, geometry, current), point.vov, 1e-15)
    triode = evaluate(model, geometry, 0.2, 1.5, 0.0, 0.0)  # VOV = 1.0 V, VDS = 0.2 V
    assert square_law(model, geometry, triode.vov, triode.vds, "triode") == (triode.id, triode.gm, triode.gds)
    assert _close(triode_channel_bias(model, geometry, triode.vov - triode.vds, triode.id), 0.2, 1e-13)


@pytest.mark.parametrize("u, rg", [(0.8, 0.0), (0.8, 2.2e3), (2.4, 47e3), (0.05, 1e6)])
def test_the_saturation_quadratic_gives_the_overdrive_that_carries_its_own_current(u: float, rg: float) -> None:
    from bridge.devices.mos1.load import saturation_overdrive_quadratic, square_law

    model = Level1Model.from_card("nmos", {"vto": 0.6, "kp": 110e-6})
    geometry = Level1Geometry(w=24e-6, l=2e-6)
    a, b, c = saturation_overdrive_quadratic(model, geometry, u, rg)
    vov = -c / b if a == 0.0 else (-b + math.sqrt(b * b - 4.0 * a * c)) / (2.0 * a)
    current = square_law(model, geometry, vov, vov, "saturation")[0]
    assert _close(vov, u - rg * current, 1e-12)  # the source resistance's loss, self-consistent


@pytest.mark.parametrize("u, rg, w, rd", [(1.5, 1e3, 0.4, 4.7e3), (3.0, 0.0, 0.2, 10e3), (2.0, 500.0, 1.0, 0.0)])
def test_the_triode_quadratic_gives_the_current_its_terminal_voltages_carry(u, rg, w, rd) -> None:
    from bridge.devices.mos1.load import square_law, triode_current_quadratic

    model = Level1Model.from_card("pmos", {"vto": -0.7, "kp": 40e-6})
    geometry = Level1Geometry(w=50e-6, l=2e-6)
    a, b, c = triode_current_quadratic(model, geometry, u, rg, w, rd)
    roots = [(-b - math.sqrt(b * b - 4.0 * a * c)) / (2.0 * a), (-b + math.sqrt(b * b - 4.0 * a * c)) / (2.0 * a)] \
        if a else [-c / b]
    current = min(r for r in roots if r >= 0.0)
    vov, vds = u - rg * current, w - rd * current
    assert 0.0 < vds < vov  # triode
    assert _close(square_law(model, geometry, vov, vds, "triode")[0], current, 1e-12)


def test_the_analyses_write_no_square_law_coefficient() -> None:
    """No `0.5 *` in bridge/*.py or bridge/analysis/: the closed forms' quadratic coefficients
    (β·Rg/2, the triode's VDS²/2) are the device's too, asked of devices/mos1/load.py. The
    pattern test above missed the affine form's `0.5 * k * rg`. (The reports' midpoints,
    0.5·(lo + hi), are no square law: they are not scanned.)"""
    import re
    from pathlib import Path

    bridge = Path(__file__).resolve().parents[1] / "bridge"
    halves = re.compile(r"0\.5 ?\*")
    offenders = [
        f"{path.relative_to(bridge)}:{number}"
        for path in sorted([*bridge.glob("*.py"), *(bridge / "analysis").glob("*.py")])
        for number, line in enumerate(path.read_text().splitlines(), 1) if halves.search(line.split("#")[0])
    ]
    assert offenders == []


def test_the_resistor_loaded_edge_overdrive_puts_the_device_at_vds_equal_vov() -> None:
    """At the overdrive ``resistor_loaded_edge_overdrive`` gives, the drain current of the square
    law across the resistor leaves exactly VDS = VOV (the saturation–triode edge)."""
    from bridge.devices.mos1.load import beta, resistor_loaded_edge_overdrive, square_law

    model = Level1Model.from_card("nmos", {"vto": 0.6, "kp": 110e-6})
    geometry = Level1Geometry(w=20e-6, l=2e-6)
    gain = beta(model, geometry)
    for resistance, span in ((10e3, 3.0), (47e3, 4.3), (1e3, 0.4)):
        vov = resistor_loaded_edge_overdrive(gain, resistance, span)
        current = square_law(model, geometry, vov, vov, "saturation")[0]
        assert _close(span - resistance * current, vov, 1e-12)


def test_evaluate_is_the_load_helpers_to_the_bit() -> None:
    # reference: load.py's body_root, threshold and square_law, which evaluate writes out inline
    from bridge.devices.mos1.ask import classify_region
    from bridge.devices.mos1.load import body_root, square_law, threshold

    circuit = _circuit()
    rng = np.random.default_rng(7)
    for element in circuit.elements_of("mosfet"):
        instance = mosfet_instance(circuit, element)
        model = instance.model
        for vd, vg, vs, vb in rng.uniform(-4.0, 4.0, size=(400, 4)).tolist():
            point = instance.evaluate(vd, vg, vs, vb)
            assert repr(point) == repr(evaluate(model, instance.geometry, vd, vg, vs, vb))
            p = model.polarity
            vgs, vds, vbs = p * (vg - vs), p * (vd - vs), p * (vb - vs)
            drive, bias, body = (vgs - vds, -vds, vbs - vds) if vds < 0.0 else (vgs, vds, vbs)
            vth = threshold(model, body)
            region = classify_region(drive - vth, bias)
            current, gm, gds = square_law(model, instance.geometry, drive - vth, bias, region)
            root = body_root(model.phi, body)[0]
            assert (point.vth, point.vov, point.region, point.gm, point.gds) == (vth, drive - vth, region, gm, gds)
            assert point.id == (-current if vds < 0.0 else current)
            assert point.gmbs == gm * (model.gamma / (2.0 * root) if root > 0.0 else 0.0)


def test_hand_device_sees_its_own_model_not_the_instance_it_came_from() -> None:
    circuit = _circuit()
    element = circuit.elements_of("mosfet")[0]
    instance = mosfet_instance(circuit, element)
    instance.evaluate(3.0, 1.6, 0.2, 0.0)  # the instance's constants worked out
    hand_model = instance.model.with_lambda_gamma(0.0, 0.0)
    hand = instance.without_junctions(hand_model)
    assert hand.model is hand_model and not hand.junctions and instance.junctions
    assert hand == dataclasses.replace(instance, model=hand_model, junctions=False)
    assert hand.evaluate(3.0, 1.6, 0.2, 0.0) == evaluate(hand_model, hand.geometry, 3.0, 1.6, 0.2, 0.0)
    assert hand.evaluate(3.0, 1.6, 0.2, 0.0).id != instance.evaluate(3.0, 1.6, 0.2, 0.0).id


def test_a_remembered_card_model_is_the_card_model_of_that_very_card() -> None:
    from bridge.devices.mos1.model import card_model_of

    for k in range(200):  # dicts made and dropped: a freed dict's id may come back for another
        params = {"vto": 0.5 + k * 1e-3, "kp": 80e-6, "gamma": 0.4, "tox": 2e-8}
        ours = card_model_of("nmos", params, 30.0)
        assert ours == Level1Model.from_card("nmos", params, 30.0)
        assert card_model_of("nmos", params, 30.0) is ours  # asked again: remembered
        assert card_model_of("pmos", params, 30.0).polarity == -1
        assert card_model_of("nmos", dict(params), 30.0) == ours
        assert card_model_of("nmos", params, 20.0).tnom_celsius == 20.0
    with pytest.raises(ValueError, match="PHI must be positive"):
        card_model_of("nmos", {"phi": -1.0})


def test_cards_of_the_same_values_share_their_remembered_model() -> None:
    """Stages that include one library read its cards into mappings of their own: one model for
    all of them; a card with a zero value only for itself (−0.0 equals 0.0 but is another card)."""
    from bridge.devices.mos1.model import card_model_of

    params = {"vto": 0.7, "kp": 120e-6, "lambda": 0.02, "gamma": 0.4, "phi": 0.65}
    ours = card_model_of("nmos", params, 27.0)
    assert card_model_of("nmos", dict(params), 27.0) is ours
    assert card_model_of("nmos", {**params, "kp": 121e-6}, 27.0).kp == 121e-6
    assert card_model_of("nmos", dict(reversed(params.items())), 27.0) == ours  # another order: built again
    plus, minus = {"vto": 0.7, "lambda": 0.0}, {"vto": 0.7, "lambda": -0.0}
    assert math.copysign(1.0, card_model_of("nmos", plus).lambda_) == 1.0
    assert math.copysign(1.0, card_model_of("nmos", minus).lambda_) == -1.0
    assert card_model_of("nmos", dict(plus)) is not card_model_of("nmos", plus)
