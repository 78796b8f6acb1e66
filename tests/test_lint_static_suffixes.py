"""Lint, scale family: suffix traps and implausible values, each at the value as written."""

from __future__ import annotations

import math
import subprocess

import pytest
from conftest import NGSPICE, needs_ngspice, ngspice_batch_op

from bridge.lint import suffixes
from bridge.lint.rule import LintContext, LintSettings
from bridge.netlist import parse_netlist
from bridge.netlist.numbers import parse_number


def lint(text: str, rule) -> list:
    return rule(LintContext(parse_netlist(text, "stage.cir"), LintSettings()))


# A bicycle dynamo light's ambient-light sensor stage: NMOS common source, divider bias.
DYNAMO = """\
Dynamo light ambient sensor: NMOS common source, divider bias
VDD vdd 0 6
R1 vdd g {r1}
R2 g 0 {r2}
RD vdd d 15k
M1 d g 0 0 NDYN W=20u L=2u
.model NDYN nmos (vto=0.7 kp=100u lambda=0.02)
.op
.end
"""


def dynamo(r1: str = "2MEG", r2: str = "1MEG") -> str:
    return DYNAMO.replace("{r1}", r1).replace("{r2}", r2)


def test_milli_on_a_divider_resistor_is_reported_at_its_value_with_meg_as_fix() -> None:
    findings = lint(dynamo(r1="2M"), suffixes.milli_meant_meg)
    assert len(findings) == 1
    finding = findings[0]
    assert (finding.code, finding.severity, finding.subject) == ("scale-milli-meant-meg", "warning", "R1")
    assert (finding.line, finding.column) == (3, "R1 vdd g 2M".index("2M") + 1)
    assert finding.message.startswith("`2M` is 2 mΩ in SPICE (`M` is milli)")
    assert finding.fix == "write `2MEG` for 2 MΩ"


def test_milli_written_as_mohm_on_a_gate_resistor_is_reported() -> None:
    # `1MOhm`: the first letter is the scale, milli; `Ohm` is ignored.
    text = dynamo().replace("R2 g 0 1MEG", "R2 g 0 1MEG\nRG g gx 1MOhm\nCG gx 0 1n")
    findings = lint(text, suffixes.milli_meant_meg)
    assert [(f.subject, f.line, f.column) for f in findings] == [("RG", 5, 9)]
    assert findings[0].fix == "write `1MEG` for 1 MΩ"


def test_milli_on_a_supply_shunt_carrying_the_stage_current_is_not_reported() -> None:
    # A real 1 mΩ current shunt in the supply path: the drain current flows through it.
    text = dynamo().replace("RD vdd d 15k", "RSENSE vdd vsense 1m\nRD vsense d 15k")
    assert lint(text, suffixes.milli_meant_meg) == []
    assert lint(text, suffixes.resistor_range) == []


def test_milli_reaches_a_divider_behind_a_gate_resistor_and_drain_feedback() -> None:
    # The divider node b feeds the gate through RG; RF is the drain-to-gate feedback.
    text = dynamo().replace("R1 vdd g 2MEG\nR2 g 0 1MEG", "R1 vdd b 3M\nR2 b 0 1MEG\nRG b g 100k\nRF d g 4.7M")
    assert sorted(f.subject for f in lint(text, suffixes.milli_meant_meg)) == ["R1", "RF"]


def test_a_capital_m_on_a_drain_or_source_load_is_reported_as_milli() -> None:
    # `RD vdd d 1M`: the drain resistor of a micro-power stage, meant as 1 MΩ, read as 1 mΩ.
    findings = lint(dynamo().replace("RD vdd d 15k", "RD vdd d 1M"), suffixes.milli_meant_meg)
    assert [(f.code, f.subject, f.line, f.column) for f in findings] == [("scale-milli-meant-meg", "RD", 5, 10)]
    assert findings[0].message == (
        "`1M` is 1 mΩ in SPICE (`M` is milli): RD, the one resistor on the drain of M1, drops 1 mV per "
        "ampere there: at a stage's currents the drain sits at its rail and cannot swing; mega is `MEG`")
    assert findings[0].fix == "write `1MEG` for 1 MΩ"
    # A source resistor to ground, with its bypass capacitor beside it: the same slip.
    source = dynamo().replace("M1 d g 0 0", "M1 d g s 0")
    source = source.replace("RD vdd d 15k", "RD vdd d 15k\nRS s 0 2.2M\nCS s 0 10u")
    findings = lint(source, suffixes.milli_meant_meg)
    assert [f.subject for f in findings] == ["RS"]
    assert "RS, the one resistor on the source of M1, drops 2.2 mV per ampere" in findings[0].message
    assert "neither the bias current nor any degeneration" in findings[0].message


def test_a_small_m_on_a_load_or_a_capital_m_off_a_load_is_not_taken_for_mega() -> None:
    # `10m` on the source: a deliberate milliohm shunt.
    shunt = dynamo().replace("M1 d g 0 0", "M1 d g s 0").replace("RD vdd d 15k", "RD vdd d 15k\nRSENSE s 0 10m")
    assert lint(shunt, suffixes.milli_meant_meg) == []
    # Two resistors on the drain node (a load and a probe): no one load resistor, nothing said.
    two = dynamo().replace("RD vdd d 15k", "RD vdd d 1M\nRP d 0 100k")
    assert lint(two, suffixes.milli_meant_meg) == []
    # A capital `M` in series with the supply (not on a drain or source): left to the range rule.
    series = dynamo().replace("RD vdd d 15k", "RSUP vdd v2 1M\nRD v2 d 15k")
    assert lint(series, suffixes.milli_meant_meg) == []


def test_meg_mil_and_kilo_are_not_milli() -> None:
    for value in ("1MEG", "1Meg", "1k", "470k", "2.2MEGohm"):
        assert lint(dynamo(r2=value), suffixes.milli_meant_meg) == [], value


def test_farad_unit_alone_on_a_capacitor_is_read_as_femto() -> None:
    text = dynamo().replace("RD vdd d 15k", "RD vdd d 15k\nCOUT d out 10F\nRL out 0 100k")
    findings = lint(text, suffixes.farad_read_as_femto)
    assert len(findings) == 1
    finding = findings[0]
    assert (finding.code, finding.subject, finding.line, finding.column) == ("scale-farad-read-as-femto", "COUT", 6, 12)
    assert finding.message.startswith("`10F` is 10 fF in SPICE: the `F` is read as the femto scale")
    assert "ngspice 39 reads 1e-14" in finding.message
    assert finding.fix.startswith("write the scale before the unit: `10uF` for 10 µF")


@pytest.mark.parametrize("value", ["10uF", "10u", "10f", "10fF", "4.7nF", "1e-6"])
def test_capacitor_values_with_a_scale_are_not_reported(value: str) -> None:
    text = dynamo().replace("RD vdd d 15k", f"RD vdd d 15k\nCOUT d out {value}\nRL out 0 100k")
    assert lint(text, suffixes.farad_read_as_femto) == []


def test_mosfet_width_without_a_suffix_is_metres() -> None:
    findings = lint(dynamo().replace("W=20u", "W=20"), suffixes.mosfet_size)
    assert len(findings) == 1
    finding = findings[0]
    assert (finding.code, finding.subject, finding.line, finding.column) == ("scale-mosfet-size", "M1", 6, 19)
    assert finding.message.startswith("`w=20` has no scale suffix: SPICE lengths are in metres, so W of M1 is 20 m")
    assert "(common practice, no source)" in finding.message
    assert finding.fix == "write `w=20u` for 20 µm"


def test_mosfet_length_with_a_suffix_but_implausible_is_reported_with_the_range() -> None:
    findings = lint(dynamo().replace("L=2u", "L=2p"), suffixes.mosfet_size)
    assert [f.subject for f in findings] == ["M1"]
    assert "L of M1 is 2 pm, outside the plausible channel length of 10 nm to 1 mm" in findings[0].message


def test_mosfet_sizes_in_plausible_ranges_and_options_scale_are_not_reported() -> None:
    assert lint(dynamo().replace("W=20u L=2u", "W=2e-5 L=0.18u"), suffixes.mosfet_size) == []
    # `.options scale` multiplies every size: `w=20` is then 20 µm in ngspice.
    scaled = dynamo().replace("W=20u L=2u", "W=20 L=2").replace(".op", ".options scale=1u\n.op")
    assert lint(scaled, suffixes.mosfet_size) == []


@pytest.mark.parametrize("value, shown", [("10u", "10 µΩ"), ("4.7p", "4.7 pΩ"), ("2e13", "20 TΩ")])
def test_resistor_outside_a_plausible_range_is_reported(value: str, shown: str) -> None:
    findings = lint(dynamo().replace("RD vdd d 15k", f"RD vdd d {value}"), suffixes.resistor_range)
    assert [(f.code, f.subject, f.line, f.column) for f in findings] == [("scale-resistor-range", "RD", 5, 10)]
    assert findings[0].message.startswith(f"RD is {shown} (`{value}`), outside the 1 mΩ to 1 TΩ")
    assert "(common practice, no source)" in findings[0].message


def test_a_milli_divider_resistor_below_the_range_is_reported_once_as_milli() -> None:
    text = dynamo(r1="0.5M")
    assert [f.code for f in lint(text, suffixes.milli_meant_meg)] == ["scale-milli-meant-meg"]
    assert lint(text, suffixes.resistor_range) == []


@needs_ngspice
def test_unit_letters_read_as_ngspice_39_reads_them(tmp_path) -> None:
    # reference: ngspice 39 run directly in batch mode (`ngspice -b`). `1A` and `1V` are 1 A and
    # 1 V (no atto scale: the letter is ignored as a unit); 1 A into 1 Ω gives 1 V.
    deck = tmp_path / "units_op.cir"
    deck.write_text("unit letters\nI1 0 a 1A\nR1 a 0 1\nV1 b 0 1V\nR2 b 0 1k\n.op\n.end\n")
    measured = ngspice_batch_op(deck)
    assert measured["a"] == pytest.approx(1.0) and parse_number("1A") == 1.0
    assert measured["b"] == pytest.approx(1.0) and parse_number("1V") == 1.0
    # `10F` on a capacitor is 10 fF: 1 nA charges it to 1e-4 V in 1 ns (10 F would give 1e-19 V);
    # `1H` on an inductor is 1 H: 1 V across it builds 1 µA in 1 µs.
    tran = tmp_path / "units_tran.cir"
    tran.write_text(
        "unit letters\nI1 0 c 1n\nC1 c 0 10F\nV2 b 0 1V\nL1 b e 1H\nR2 e 0 1m\n.tran 1n 1u uic\n"
        ".meas tran vc find v(c) at=1n\n.meas tran il find i(L1) at=1u\n.end\n"
    )
    done = subprocess.run([NGSPICE, "-b", str(tran)], capture_output=True, text=True, timeout=60, cwd=tmp_path)
    values = {
        line.split("=")[0].strip(): float(line.split("=")[1].split()[0])
        for line in done.stdout.splitlines() if line.startswith(("vc ", "il "))
    }
    capacitance = 1e-9 * 1e-9 / values["vc"]
    assert math.isclose(capacitance, 1e-14, rel_tol=1e-3) and parse_number("10F") == pytest.approx(capacitance)
    assert math.isclose(values["il"], 1e-6, rel_tol=1e-3) and parse_number("1H") == 1.0
    # The rule says what ngspice read.
    text = dynamo().replace("RD vdd d 15k", "RD vdd d 15k\nCOUT d out 10F\nRL out 0 100k")
    assert f"reads {capacitance:.3g}" in lint(text, suffixes.farad_read_as_femto)[0].message
