"""What `check` says about the circuit itself must be true for it: the body-effect cause line,
the effects listed as causes, supply currents and powers, the circuit-sanity findings of
`bridge/bias_rules.py` and a device wired with drain and source swapped.

Scenario: the sensor and actuator boards of a greenhouse controller. The outside reference is
ngspice 39 run directly (`ngspice -b`) on the same netlist with a `.control` block that prints
the vectors (biasbridge itself drops such blocks and never hands them to ngspice).
"""

from __future__ import annotations

import json
import re
import subprocess

import pytest

from bridge.bias_rules import bias_findings, supplies
from bridge.check import check_circuit
from bridge.netlist import parse_netlist
from bridge.report.check_view import check_json
from tests.check_support import HEATER
from tests.conftest import NGSPICE, needs_ngspice

SOIL_PROBE = """Greenhouse soil-probe buffer: NMOS common source, bulk tied to VDD
VDD vdd 0 5
R1 vdd g 200k
R2 g 0 100k
RD vdd d 10k
M1 d g 0 vdd NG W=20u L=2u
.model NG nmos (vto=0.7 kp=100u lambda=0.02 gamma=0.45 phi=0.7)
"""

VENT_MOTOR = """Greenhouse vent-motor sense: PMOS common source, bulk tied to ground
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 200k
RS vdd s 1k
RD d 0 4.7k
M1 d g s 0 PG W=40u L=2u
.model PG pmos (vto=-0.8 kp=40u lambda=0.02 gamma=0.4 phi=0.7)
"""

HUMIDITY = """Greenhouse humidity front end: divider written in milliohms
VDD vdd 0 5
R1 vdd g 2.2M
R2 g 0 1M
RD vdd d 10k
M1 d g 0 0 NG W=20u L=2u
.model NG nmos (vto=0.7 kp=100u lambda=0.02)
"""

FAN = """Greenhouse fan driver: PMOS wired upside down
VDD vdd 0 5
RD vdd d 2k
M1 d 0 0 vdd PG W=40u L=2u
.model PG pmos (vto=-0.8 kp=40u lambda=0.02 gamma=0.4 phi=0.7)
"""

LAMP = """Greenhouse grow-lamp driver: NMOS common source, bulk on its source, GAMMA given
VDD vdd 0 12
R1 vdd g 100k
R2 g 0 27k
RD vdd d 4.7k
M1 d g 0 0 NG W=20u L=2u
.model NG nmos (vto=0.7 kp=100u lambda=0.02 gamma=0.45 phi=0.7)
"""


@pytest.fixture(scope="module")
def session(required_ngspice_session):
    """The module's ngspice worker: tests that take it skip where the library is absent."""
    return required_ngspice_session


def check(text: str, name: str, session):
    return check_circuit(parse_netlist(text, name), session, tolerance=0.05)


def findings(result, code: str) -> list:
    return [f for f in result.findings if f.code == code]


def ngspice_prints(tmp_path, text: str, vectors: str) -> dict[str, float]:
    """`ngspice -b` on `text` with `.control op / print VECTORS`; `name = value` lines, by name."""
    path = tmp_path / "deck.cir"
    path.write_text(f"{text}.control\nop\nprint {vectors}\n.endc\n.end\n")
    completed = subprocess.run([NGSPICE, "-b", str(path)], capture_output=True, text=True, timeout=60)
    values = {
        match.group(1).lower(): float(match.group(2))
        for match in re.finditer(r"^(\S+) = ([-+0-9.e]+)$", completed.stdout, re.MULTILINE)
    }
    assert values, completed.stdout + completed.stderr
    return values


# --- item 1: the body-effect cause line from the sign of the body bias -------------------------


@needs_ngspice
def test_forward_body_bias_lowers_the_threshold_and_the_junction_conducts(session, tmp_path):
    result = check(SOIL_PROBE, "soil.cir", session)
    # reference: ngspice -b, @m1[von] with vbs = +5 V (ngspice linearises the body term there)
    reference = ngspice_prints(tmp_path, SOIL_PROBE, "@m1[von] @m1[vbs]")
    assert reference["@m1[vbs]"] == pytest.approx(5.0)
    assert reference["@m1[von]"] < 0.7  # below VTO: the threshold went down
    cause = next(f.message for f in findings(result, "cause") if "body effect (GAMMA = 0.45" in f.message)
    assert f"lowers the threshold to {reference['@m1[von]'] * 1e3:.4g} mV" in cause
    assert "raises" not in cause
    assert "forward biased by 5 V" in cause and "vbs = +5 V" in cause
    assert "a forward-biased junction conducts" in cause
    # The junction current the level-1 solver puts through it is the VDD current ngspice reports.
    reference = ngspice_prints(tmp_path, SOIL_PROBE, "vdd#branch")
    assert result.supplies["VDD"].current.level1 == pytest.approx(-reference["vdd#branch"], rel=1e-3)


@needs_ngspice
def test_pmos_bulk_at_ground_is_forward_biased_and_lowers_the_threshold(session, tmp_path):
    result = check(VENT_MOTOR, "vent.cir", session)
    # reference: ngspice -b; von carries the PMOS sign, so the threshold is −von
    reference = ngspice_prints(tmp_path, VENT_MOTOR, "@m1[von] @m1[vbs] v(s)")
    threshold = -reference["@m1[von]"]
    assert threshold < 0.8
    cause = next(f.message for f in findings(result, "cause") if "body effect (GAMMA = 0.4" in f.message)
    assert f"lowers the threshold to {threshold * 1e3:.4g} mV" in cause
    assert f"forward biased by {reference['v(s)'] * 1e3:.4g} mV" in cause  # the junction clamps V(s)
    bulk = findings(result, "bulk-rail")
    assert len(bulk) == 1 and bulk[0].line == 7
    assert "tied to ground (0 V)" in bulk[0].message
    assert "most positive node, VDD's rail, node vdd (5 V), or at its source node s" in bulk[0].message


@needs_ngspice
def test_reverse_body_bias_still_raises_the_threshold(session, tmp_path):
    result = check(FAN, "fan.cir", session)
    # reference: ngspice -b; the PMOS runs swapped, its body bias is vbd = vbs − vds
    reference = ngspice_prints(tmp_path, FAN, "@m1[von] @m1[vbs] @m1[vds]")
    vbd = reference["@m1[vbs]"] - reference["@m1[vds]"]  # ngspice reports both in device polarity
    assert vbd < 0
    cause = next(f.message for f in findings(result, "cause") if "body effect (GAMMA = 0.4" in f.message)
    assert f"raises the threshold to {-reference['@m1[von]']:.4g} V" in cause
    assert f"bulk–drain junction reverse biased by {-vbd:.4g} V" in cause
    assert "conducts" not in cause


# --- item 11: only effects that can act ----------------------------------------------------------


def test_cause_line_lists_no_body_effect_with_bulk_on_the_source_or_no_gamma():
    for text, name in ((LAMP, "lamp.cir"), (HUMIDITY, "humidity.cir")):
        result = check(text, name, None)
        line = next(f.message for f in findings(result, "cause") if "each effect switched on alone" in f.message)
        assert "channel-length modulation (LAMBDA)" in line
        assert "GAMMA" not in line, line


def test_cause_line_lists_the_body_effect_where_it_acts():
    result = check(SOIL_PROBE, "soil.cir", None)
    line = next(f.message for f in findings(result, "cause") if "each effect switched on alone" in f.message)
    assert "body effect (GAMMA)" in line


# --- item 5: a current source wired backwards -----------------------------------------------------


@needs_ngspice
def test_backwards_current_source_is_a_circuit_finding_not_a_solver_defect(session, tmp_path):
    result = check(HEATER, "heater.cir", session)
    # reference: ngspice -b puts the source node at 300 µA · 500 kΩ = 150 V, and its device
    # vectors are not its node voltages there
    reference = ngspice_prints(tmp_path, HEATER, "v(s) v(g)-v(s) @m1[vgs]")
    assert reference["v(s)"] == pytest.approx(150.0, rel=1e-3)
    assert abs(reference["@m1[vgs]"] - reference["v(g)-v(s)"]) > 1.0
    beyond = findings(result, "beyond-supplies")
    assert [f.severity for f in beyond] == ["error"] and beyond[0].line == 7
    assert "V(s) is 150 V in ngspice's solution, 145 V above every voltage supply" in beyond[0].message
    assert beyond[0].message.endswith("only a current or controlled source can hold a node there — here I1")
    backwards = findings(result, "current-source-backwards")
    assert len(backwards) == 1 and backwards[0].line == 7 and backwards[0].subject == "I1"
    assert "I1 forces 300 µA into M1's source node s" in backwards[0].message
    assert "`I1 s 0 …`" in backwards[0].message
    assert not findings(result, "solver-differs")
    vectors = findings(result, "sim-device-vectors")
    assert len(vectors) == 1
    assert f"@m1[vgs] = {reference['@m1[vgs]']:.4g} V but its node voltages give {reference['v(g)-v(s)']:.4g} V" \
        in vectors[0].message


def test_current_source_the_right_way_round_is_no_finding():
    fixed = HEATER.replace("I1 0 s 300u", "I1 s 0 300u").replace("RS s 0 500k", "RS s 0 5k")
    result = check(fixed, "heater.cir", None)
    assert not findings(result, "current-source-backwards")
    assert not findings(result, "beyond-supplies")


# --- item 7: supply currents, milliohm divider, bulk on the wrong rail ------------------------------


@needs_ngspice
def test_supply_current_and_power_in_every_column(session, tmp_path):
    text = LAMP
    result = check(text, "lamp.cir", session)
    # reference: ngspice -b, vdd#branch (into n+: the delivered current is its negative)
    reference = ngspice_prints(tmp_path, text, "vdd#branch")
    supply = result.supplies["VDD"]
    assert supply.current.sim == pytest.approx(-reference["vdd#branch"], rel=1e-5)  # printed to 6 digits
    assert supply.current.level1 == pytest.approx(-reference["vdd#branch"], rel=2e-3)
    assert supply.power.sim == pytest.approx(12 * supply.current.sim)
    # The hand column by Kirchhoff: the divider's current plus the hand drain current.
    hand_id = result.devices["M1"].quantities["id"].hand
    assert supply.current.hand == pytest.approx(12 / 127e3 + hand_id, rel=1e-9)
    shown = check_json(result)["supplies"]["VDD"]
    assert shown["current"]["sim"] == supply.current.sim and shown["power"]["hand"] == supply.power.hand
    json.dumps(check_json(result))


def test_supply_rows_follow_the_nodes_in_the_table():
    import io

    from rich.console import Console

    from bridge.report.check_view import check_renderable, print_check

    console = Console(width=100, color_system=None, force_terminal=False, file=io.StringIO())
    print_check(console, check_renderable(check(LAMP, "lamp.cir", None)))
    lines = console.file.getvalue().splitlines()
    labels = [line.split("│")[1].strip() for line in lines if line.startswith("│")]
    assert labels.index("I(VDD)") == labels.index("V(d)") + 1
    assert labels.index("P(VDD)") == labels.index("I(VDD)") + 1
    assert labels.index("M1 region (nmos)") == labels.index("P(VDD)") + 1


def test_milliohm_divider_is_found_with_the_current_it_draws():
    result = check(HUMIDITY, "humidity.cir", None)
    milli = findings(result, "milliohm-resistor")
    assert [(f.subject, f.line) for f in milli] == [("R1", 3), ("R2", 4)]
    # 5 V across 2.2 mΩ + 1 mΩ = 1.5625 kA
    assert "R1 is 2.2 mΩ and carries 1.563 kA in the level-1 solution" in milli[0].message
    assert "`2.2M` is 2.2 mΩ); mega is `MEG` — `2.2MEG` for 2.2 MΩ" in milli[0].message
    supply = findings(result, "supply-current")
    assert len(supply) == 1 and supply[0].line == 2
    assert "VDD delivers 1.563 kA (7.813 kW)" in supply[0].message
    assert result.supplies["VDD"].current.hand == pytest.approx(5 / 3.2e-3 + result.devices["M1"].quantities["id"].hand)
    assert not result.agree


def test_megohm_divider_draws_microamps_and_is_no_finding():
    result = check(HUMIDITY.replace("2.2M", "2.2MEG").replace("1M", "1MEG"), "humidity.cir", None)
    assert not findings(result, "milliohm-resistor") and not findings(result, "supply-current")


def test_nmos_bulk_on_vdd_is_found_with_the_rail_it_belongs_to():
    result = check(SOIL_PROBE, "soil.cir", None)
    bulk = findings(result, "bulk-rail")
    assert len(bulk) == 1 and bulk[0].line == 6 and bulk[0].subject == "M1"
    message = bulk[0].message
    assert "M1's bulk is tied to VDD's rail, node vdd (5 V)" in message
    assert "an NMOS bulk belongs at its source, ground (0 V), the most negative node" in message
    assert "bulk–source junction is forward biased by 5 V" in message and "conducts" in message


def test_bulk_on_its_source_or_the_right_rail_is_no_finding():
    on_source = SOIL_PROBE.replace("M1 d g 0 vdd", "M1 d g 0 0")
    on_vdd = VENT_MOTOR.replace("M1 d g s 0", "M1 d g s vdd")
    for text in (LAMP, on_source, on_vdd):
        assert not findings(check(text, "ok.cir", None), "bulk-rail")


def test_rules_read_only_the_circuit_and_its_solutions():
    """The rules run on any column, without ngspice (for the coming `lint`)."""
    from bridge.analysis.dcsolve import solve_operating_point
    from bridge.analysis.hand import HandModel

    circuit = parse_netlist(HUMIDITY, "humidity.cir")
    hand = HandModel(circuit).solve()
    table = supplies(circuit, hand, None, None)
    assert table["VDD"].current.level1 is None and table["VDD"].current.hand > 1e3
    assert {f.code for f in bias_findings(circuit, hand, None, None)} == {"milliohm-resistor", "supply-current"}
    level1 = solve_operating_point(circuit)
    assert {f.code for f in bias_findings(circuit, None, level1, None)} == {"milliohm-resistor", "supply-current"}


# --- item 12: a PMOS wired upside down ----------------------------------------------------------------


@needs_ngspice
def test_upside_down_pmos_rows_add_up_or_are_empty_with_a_reason(session, tmp_path):
    result = check(FAN, "fan.cir", session)
    # reference: ngspice -b reports the terminal vgs and vds (vds < 0: mode −1) and von, vdsat of
    # the swapped device: its overdrive is −vdsat (PMOS sign), not vgs − vth
    reference = ngspice_prints(tmp_path, FAN, "@m1[vgs] @m1[vds] @m1[von] @m1[vdsat]")
    assert reference["@m1[vds]"] < 0
    assert -reference["@m1[vdsat]"] != pytest.approx(reference["@m1[vgs]"] + reference["@m1[von]"], abs=0.1)
    quantities = result.devices["M1"].quantities
    assert quantities["vgs"].sim == pytest.approx(reference["@m1[vgs]"], abs=1e-6)
    assert quantities["vth"].sim == pytest.approx(-reference["@m1[von]"], rel=1e-6)
    assert (quantities["vov"].hand, quantities["vov"].level1, quantities["vov"].sim) == (None, None, None)
    swapped = findings(result, "swapped-terminals")
    assert len(swapped) == 1 and swapped[0].line == 4
    assert "its drain node d is above its source node 0" in swapped[0].message
    assert f"vgd − vth (device polarity) = {-reference['@m1[vdsat]']:.4g} V" in swapped[0].message
    assert check_json(result)["devices"]["M1"]["vov"] == {"hand": None, "level1": None, "sim": None}


def test_every_row_adds_up_in_every_column(session):
    for text, name in ((SOIL_PROBE, "soil"), (VENT_MOTOR, "vent"), (FAN, "fan"), (LAMP, "lamp"), (HEATER, "heat")):
        result = check(text, name, session)
        for device in result.devices.values():
            q = device.quantities
            for column in ("hand", "level1", "sim"):
                vov, vgs, vth = q["vov"].get(column), q["vgs"].get(column), q["vth"].get(column)
                if vov is not None and vgs is not None and vth is not None:
                    assert vov == pytest.approx(vgs - vth, abs=1e-9), (name, column)
