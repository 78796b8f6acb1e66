"""The bias lint family (bridge/lint/bias.py): each rule fires on a stage written to show it, at
the element's line with its fix, from the level-1 solution alone and with ngspice's beside it;
every rule is quiet on the correct stages (tests/lint_corpus, netlists/, check's healthy stages);
the thresholds in LintSettings move the verdicts.

External references, named where used: ngspice itself (its `.op` through the worker, and its
threshold vector `@m1[von]`), and the level-1 solver re-run on the stage with the suggested fix.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from check_support import OWN_NETLISTS
from conftest import EXAMPLES, REPO

from bridge.analysis.dcsolve import solve_operating_point
from bridge.check import check_circuit
from bridge.compare import NOT_AMPLIFYING
from bridge.lint import bias, registry
from bridge.lint.rule import LintContext, LintSettings
from bridge.netlist import parse_netlist, read_netlist
from bridge.netlist.numbers import engineering, parse_number
from bridge.sim.operating_point import simulate_operating_point

CORPUS = REPO / "tests" / "lint_corpus"
CORPUS_FILES = sorted(CORPUS.glob("*.cir"))
EXAMPLE_FILES = sorted(EXAMPLES.glob("*.cir"))



def ending(model: str) -> str:
    """The NMOS card every NMOS stage below uses, then `.op` and `.end`."""
    return f".model {model} nmos (vto=0.8 kp=100u lambda=0.01 gamma=0.45 phi=0.7)\n.op\n.end\n"


# Stages written to show one rule each: (netlist, code, severity, line, subject, text in the fix).
FIRING = {
    "bulk_on_gate": ("""\
Greenhouse vent-motor sense: NMOS with its bulk tied to the gate
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 100k
RD vdd d 20k
M1 d g 0 g NVENT W=20u L=2u
""" + ending("NVENT"), "bulk-forward", "error", 6, "M1", "tie M1's bulk to its source 0"),
    "pmos_bulk_on_ground": ("""\
Dynamo light rear lamp: PMOS with its bulk on ground
VDD vdd 0 5
RS vdd s 4.7k
R1 vdd g 200k
R2 g 0 300k
RD d 0 12k
M1 d g s 0 PREAR W=50u L=2u
.model PREAR pmos (vto=-0.9 kp=40u lambda=0.01 gamma=0.5 phi=0.7)
.op
.end
""", "bulk-forward", "error", 7, "M1", "most positive rail, VDD's rail"),
    "bulk_slightly_forward": ("""\
Seed-tray heater sense: NMOS bulk on a 0.2 V tap
VDD vdd 0 5
RB1 vdd bb 240k
RB2 bb 0 10k
R1 vdd g 300k
R2 g 0 100k
RD vdd d 20k
M1 d g 0 bb NTRAY W=20u L=2u
""" + ending("NTRAY"), "bulk-forward", "warning", 8, "M1", "tie M1's bulk to its source 0"),
    "bulk_on_a_tap": ("""\
Orchard frost alarm: NMOS bulk on a -1 V tap
VDD vdd 0 5
VNEG vneg 0 -5
RB1 0 bb 100k
RB2 bb vneg 400k
R1 vdd g 300k
R2 g 0 100k
RD vdd d 10k
M1 d g 0 bb NFROST W=20u L=2u
""" + ending("NFROST"), "bulk-body-effect", "info", 9, "M1", "tie the bulk to the source 0"),
    "drain_source_swapped": ("""\
Pond pump monitor: NMOS written with drain and source swapped
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 100k
RD vdd d 20k
M1 0 g d 0 NPOND W=20u L=2u
""" + ending("NPOND"), "orient-drain-source", "warning", 6, "M1", "`M1 d g 0 0 …`"),
    "pmos_drain_source_swapped": ("""\
Cold-frame vent driver: PMOS written with drain and source swapped
VDD vdd 0 5
R1 vdd g 270k
R2 g 0 750k
RD s 0 22k
M1 vdd g s vdd PVENT W=50u L=2u
.model PVENT pmos (vto=-0.9 kp=40u lambda=0.01 gamma=0.5 phi=0.7)
.op
.end
""", "orient-drain-source", "warning", 6, "M1", "`M1 s g vdd vdd …`"),
    "triode": ("""\
Compost fan driver: NMOS pulled into triode by its drain resistor
VDD vdd 0 5
R1 vdd g 200k
R2 g 0 100k
RD vdd d 47k
M1 d g 0 0 NFAN W=20u L=2u
""" + ending("NFAN"), "op-triode", "warning", 6, "M1", "lower RD to at most"),
    "cutoff": ("""\
Rain sensor preamp: NMOS gate held below threshold
VDD vdd 0 5
VIN in 0 DC 0 AC 1
CIN in g 1u
R1 vdd g 1meg
R2 g 0 100k
RD vdd d 20k
M1 d g 0 0 NRAIN W=20u L=2u
""" + ending("NRAIN"), "op-cutoff", "warning", 8, "M1", "above its threshold 800 mV"),
    "thin_margin": ("""\
Hive entrance counter: NMOS just in saturation
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 100k
RD vdd d 44k
M1 d g 0 0 NHIVE W=20u L=2u
""" + ending("NHIVE"), "op-saturation-margin", "warning", 6, "M1", "lower RD to at most"),
    "weak_inversion": ("""\
Leaf-wetness sensor: NMOS biased barely above threshold
VDD vdd 0 5
VB g 0 0.83
RD vdd d 20k
M1 d g 0 0 NLEAF W=20u L=2u
""" + ending("NLEAF"), "op-weak-inversion", "warning", 5, "M1", "more overdrive"),
    "drain_at_supply": ("""\
Chicken-coop door sense: NMOS drain at the supply
VDD vdd 0 5
VB g 0 0.3
RD vdd d 20k
M1 d g 0 0 NCOOP W=20u L=2u
""" + ending("NCOOP"), "op-node-at-rail", "warning", 5, "M1", "through RD"),
    "drain_at_ground": ("""\
Water-tank level switch: NMOS drain pulled to ground
VDD vdd 0 5
VB g 0 2
RD vdd d 1meg
M1 d g 0 0 NTANK W=20u L=2u
""" + ending("NTANK"), "op-node-at-rail", "warning", 5, "M1", "let d rise from the rail"),
    "hot_resistor": ("""\
Dynamo light front lamp: preamp with a bleeder across the rail
VDD vdd 0 5
RBLEED vdd 0 68
R1 vdd g 300k
R2 g 0 100k
RD vdd d 20k
M1 d g 0 0 NLAMP W=20u L=2u
""" + ending("NLAMP"), "op-resistor-power", "warning", 3, "RBLEED", "735.3 mW"),
}

WARNING_CODES_OF_CHECK = {"bulk-rail", "current-source-backwards", "beyond-supplies", "supply-current",
                          "milliohm-resistor", "swapped-terminals", NOT_AMPLIFYING}


@pytest.fixture(params=["level1", "sim"])
def session(request):
    """None for the level-1 solution alone; the module's ngspice worker (skipping where it is
    absent) for ngspice's solution beside it."""
    if request.param == "level1":
        return None
    return request.getfixturevalue("required_ngspice_session")


def context(circuit, session=None, settings: LintSettings | None = None) -> LintContext:
    level1 = solve_operating_point(circuit)
    sim = simulate_operating_point(session, circuit) if session is not None else None
    return LintContext(circuit, settings or LintSettings(), level1, sim)


def findings(ctx: LintContext):
    return [finding for rule in bias.RULES for finding in rule(ctx)]


def stage(name: str):
    return parse_netlist(FIRING[name][0], f"{name}.cir")


@pytest.mark.parametrize("name", sorted(FIRING))
def test_each_rule_fires_at_the_element_line_with_its_fix(name, session):
    text, code, severity, line, subject, fix = FIRING[name]
    found = [f for f in findings(context(stage(name), session)) if f.code == code]
    assert len(found) == 1, [f.message for f in found]
    finding = found[0]
    assert (finding.severity, finding.line, finding.subject) == (severity, line, subject)
    assert fix in finding.fix
    assert text.splitlines()[line - 1].startswith(subject + " ")
    solution = "in ngspice's solution" if session is not None else "in the level-1 solution"
    assert solution in finding.message


def test_every_code_is_registered_and_documented():
    codes = {f.code for name in FIRING for f in findings(context(stage(name)))}
    assert set(bias.CODES) <= set(registry.CODES)
    assert set(bias.CODES) == codes
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    for code in bias.CODES:
        assert f"`{code}`" in readme, code


def test_the_suggested_drain_resistor_leaves_the_saturation_margin(required_ngspice_session):
    """The fix's RD, put into the triode stage and the thin-margin stage, leaves vds − vov at the
    100 mV margin: by the level-1 solver and by ngspice (external reference)."""
    for name in ("triode", "thin_margin"):
        text = FIRING[name][0]
        fix = next(f.fix for f in findings(context(stage(name))) if f.code.startswith("op-"))
        value = re.search(r"at most (\S+) kΩ", fix).group(1)
        fixed = parse_netlist(re.sub(r"^RD vdd d \S+", f"RD vdd d {value}k", text, flags=re.M), "fixed.cir")
        level1 = solve_operating_point(fixed).device("M1")
        assert level1.vds - level1.vov == pytest.approx(0.1, abs=2e-3)  # the fix prints 4 digits
        sim = simulate_operating_point(required_ngspice_session, fixed).devices["M1"]
        assert sim.vds - sim.vov == pytest.approx(0.1, abs=3e-3)


def test_body_effect_shift_is_the_threshold_ngspice_reports(required_ngspice_session):
    """The threshold the info gives at the operating point is ngspice's own @m1[von] there."""
    ctx = context(stage("bulk_on_a_tap"), required_ngspice_session)
    finding = next(f for f in findings(ctx) if f.code == "bulk-body-effect")
    von = ctx.sim.devices["M1"].vth
    assert von > 0.9
    assert f"from 800 mV to {engineering(von, 'V')}" in finding.message
    assert f"(+{engineering(von - 0.8, 'V')})" in finding.message


def test_bulk_forward_error_only_when_the_junction_conducts():
    conducting = next(f for f in findings(context(stage("bulk_on_gate"))) if f.code == "bulk-forward")
    assert "it conducts" in conducting.message
    slight = next(f for f in findings(context(stage("bulk_slightly_forward"))) if f.code == "bulk-forward")
    assert "does not move the bias yet" in slight.message and "forward biased by 200 mV" in slight.message


def test_a_device_off_either_way_round_is_not_called_swapped(session):
    """A current source wired backwards drives the source node far above the drain: the device
    is off whichever terminal acts as source, so nothing says the card's nodes are swapped."""
    circuit = parse_netlist("""\
Hotbed thermistor buffer: source current sink wired backwards
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 200k
RD vdd d 4.7k
M1 d g s 0 NBED W=20u L=2u
ISINK 0 s 300u
RS s 0 500k
""" + ending("NBED"), "backwards.cir")
    ctx = context(circuit, session)
    reference = ctx.sim or ctx.level1
    assert reference.node_voltages["s"] > 100  # the source node is far above the drain
    assert not [f for f in findings(ctx) if f.code == "orient-drain-source"]


def test_a_wrong_rail_bulk_says_what_check_says():
    finding = next(f for f in findings(context(stage("pmos_bulk_on_ground"))) if f.code == "bulk-forward")
    assert "as check's `bulk-rail` says" in finding.message


def test_findings_point_at_the_node_field_where_the_reader_keeps_it():
    """The bulk rules point at the bulk field, the orientation and rail rules at the drain field,
    once the reader records where each field was written (`Element.written`)."""
    if not hasattr(stage("bulk_on_gate").element("M1"), "written"):
        pytest.skip("this reader keeps no field places (Element.written comes with the static lint rules)")
    cases = {"bulk_on_gate": ("bulk-forward", 10), "drain_source_swapped": ("orient-drain-source", 4),
             "drain_at_ground": ("op-node-at-rail", 4), "triode": ("op-triode", None)}
    for name, (code, column) in cases.items():
        finding = next(f for f in findings(context(stage(name))) if f.code == code)
        assert finding.column == column, name


def test_without_any_solution_the_family_says_nothing():
    for name in FIRING:
        assert findings(LintContext(stage(name), LintSettings())) == []


def test_the_level1_verdict_is_named_only_when_it_differs(required_ngspice_session):
    """ngspice's solution is the reference; the level-1 solution is mentioned only when its
    verdict differs (here it is the solution of the same stage with a smaller RD)."""
    circuit = stage("triode")
    sim = simulate_operating_point(required_ngspice_session, circuit)
    same = findings(LintContext(circuit, LintSettings(), solve_operating_point(circuit), sim))
    assert not any("level-1 solver differs" in f.message for f in same)
    other = parse_netlist(FIRING["triode"][0].replace("RD vdd d 47k", "RD vdd d 10k"), "other.cir")
    differing = findings(LintContext(circuit, LintSettings(), solve_operating_point(other), sim))
    triode = next(f for f in differing if f.code == "op-triode")
    assert "in ngspice's solution" in triode.message
    assert "(the level-1 solver differs: saturation" in triode.message


def test_a_finding_the_level1_solution_lacks_says_so(required_ngspice_session):
    """ngspice's solution decides; a finding there that the level-1 solution (here of the same
    stage with a 20 kΩ drain resistor) does not give is marked, one it does give is not."""
    circuit = stage("drain_at_ground")
    sim = simulate_operating_point(required_ngspice_session, circuit)
    alike = [f for f in findings(LintContext(circuit, LintSettings(), solve_operating_point(circuit), sim))
             if f.code == "op-node-at-rail"]
    assert len(alike) == 1 and "does not show it" not in alike[0].message
    other = parse_netlist(FIRING["drain_at_ground"][0].replace("RD vdd d 1meg", "RD vdd d 20k"), "other.cir")
    marked = [f for f in findings(LintContext(circuit, LintSettings(), solve_operating_point(other), sim))
              if f.code == "op-node-at-rail"]
    assert len(marked) == 1 and marked[0].message.endswith("(the level-1 solution does not show it)")


def test_thresholds_set_in_lint_settings_move_the_verdict():
    circuit = read_netlist(CORPUS / "nmos_cs_current_source.cir")  # vds − vov 1.3 V, vov 0.44 V
    assert not findings(context(circuit))
    strict = LintSettings(saturation_margin=2.0, weak_overdrive=0.5, resistor_rating=1e-4)
    codes = {f.code for f in findings(context(circuit, settings=strict))}
    assert codes == {"op-saturation-margin", "op-weak-inversion", "op-resistor-power"}
    hot = stage("hot_resistor")
    assert not [f for f in findings(context(hot, settings=LintSettings(resistor_rating=0.5)))
                if f.code == "op-resistor-power"]
    thin = stage("thin_margin")  # vds − vov = 72 mV
    assert not findings(context(thin, settings=LintSettings(saturation_margin=0.05)))


def _healthy_check_stages(tmp_path_factory) -> list[Path]:
    folder = tmp_path_factory.mktemp("check_stages")
    for name, text in OWN_NETLISTS.items():
        (folder / name).write_text(text, encoding="utf-8")
    return sorted(folder.glob("*.cir"))


def test_corpus_holds_every_topology():
    assert 15 <= len(CORPUS_FILES) <= 25
    names = {path.stem for path in CORPUS_FILES}
    for part in ("cs_divider", "gate_resistor", "source_resistor", "current_source", "follower_resistor",
                 "follower_current_load", "diode_resistor", "diode_current", "drain_feedback", "pmos_",
                 "split_supply", "ac_coupled", "bulk_at_source"):
        assert any(part in name for name in names), part


@pytest.mark.parametrize("path", CORPUS_FILES + EXAMPLE_FILES, ids=lambda path: f"{path.parent.name}/{path.name}")
def test_quiet_on_correct_stages(path, session):
    loud = [f for f in findings(context(read_netlist(path), session)) if f.severity in ("error", "warning")]
    assert loud == []


def test_quiet_on_the_stages_check_finds_healthy(tmp_path_factory, ngspice_session):
    healthy = 0
    for path in _healthy_check_stages(tmp_path_factory):
        circuit = read_netlist(path)
        result = check_circuit(circuit, ngspice_session, tolerance=0.05)
        if not result.amplifies or any(f.code in WARNING_CODES_OF_CHECK for f in result.findings):
            continue
        healthy += 1
        loud = [f for f in findings(context(circuit, ngspice_session)) if f.severity in ("error", "warning")]
        assert loud == [], path.name
    assert healthy >= 8


def test_corpus_stages_are_healthy_and_agree_in_check(required_ngspice_session):
    """Every corpus stage: all three check columns agree, no warning, saturation by over 0.5 V."""
    for path in CORPUS_FILES:
        result = check_circuit(read_netlist(path), required_ngspice_session, tolerance=0.05)
        assert result.agree and result.amplifies, path.name
        assert not [f for f in result.findings if f.severity in ("error", "warning")], path.name
        margin = result.devices["M1"].quantities["sat_margin"].sim
        assert margin > 0.5, path.name


def test_parse_number_reads_the_suggested_value():
    """The fix's resistor value is written so that SPICE reads it back (`43.71k`)."""
    fix = next(f.fix for f in findings(context(stage("thin_margin"))) if f.code == "op-saturation-margin")
    value = re.search(r"at most (\S+) kΩ", fix).group(1)
    assert parse_number(value + "k") == pytest.approx(43.71e3)


# A snow-depth gauge's bias string: a bleeder written `1M` across the rail (meant 1 MΩ, read as
# 1 mΩ by SPICE: ngspice manual, 2.1.4.2, `M` is milli, mega is `MEG`), and a current shunt
# written `10m` on purpose.
_SNOW_GAUGE = """\
Snow-depth gauge: NMOS stage, a bleeder and a shunt
VDD vdd 0 5
RBLEED vdd 0 {bleeder}
RSHUNT d2 0 10m
R1 vdd g 300k
R2 g 0 100k
RD vdd d 20k
M1 d g d2 0 NSNOW W=20u L=2u
""" + ending("NSNOW")


def test_a_hot_resistor_written_with_a_capital_m_is_told_that_m_is_milli():
    hot = [f for f in findings(context(parse_netlist(_SNOW_GAUGE.format(bleeder="1M"), "snow.cir")))
           if f.code == "op-resistor-power"]
    assert [f.subject for f in hot] == ["RBLEED"]
    assert hot[0].message.endswith("; `1M` is 1 mΩ in SPICE (`M` is milli, mega is `MEG`)")
    assert hot[0].fix.startswith("if mega was meant, write `1MEG`; otherwise use a part rated for at least")
    # Written as mega, the bleeder draws 5 µA: nothing to say; written `4.7MOhm`, the same slip.
    assert not [f for f in findings(context(parse_netlist(_SNOW_GAUGE.format(bleeder="1MEG"), "snow.cir")))
                if f.code == "op-resistor-power"]
    ohm = [f for f in findings(context(parse_netlist(_SNOW_GAUGE.format(bleeder="4.7MOhm"), "snow.cir")))
           if f.code == "op-resistor-power"]
    assert "`4.7MOhm` is 4.7 mΩ in SPICE" in ohm[0].message and "write `4.7MEG`" in ohm[0].fix


def test_the_slip_is_said_once_where_the_scale_rule_says_it_already():
    # A source resistor written `1M` on a stage whose bulk sits on the supply: the forward-biased
    # junction drives a large current through it; `scale-milli-meant-meg` names the slip there.
    text = _SNOW_GAUGE.format(bleeder="100k").replace("RSHUNT d2 0 10m", "RS d2 0 1M").replace(
        "M1 d g d2 0 NSNOW", "M1 d g d2 vdd NSNOW")
    hot = [f for f in findings(context(parse_netlist(text, "snow.cir"))) if f.code == "op-resistor-power"]
    assert [f.subject for f in hot] == ["RS"]
    assert "milli" not in hot[0].message and "MEG" not in hot[0].fix


def test_a_hot_resistor_written_in_milliohms_with_a_small_m_gets_no_scale_hint():
    # A 1 Ω-class bleeder written `500m`: a deliberate milli; its power is still reported.
    hot = [f for f in findings(context(parse_netlist(_SNOW_GAUGE.format(bleeder="500m"), "snow.cir")))
           if f.code == "op-resistor-power"]
    assert [f.subject for f in hot] == ["RBLEED"]
    assert "milli" not in hot[0].message and "MEG" not in hot[0].fix
