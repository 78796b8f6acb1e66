"""What the front end understands: lines, cards, values, models, includes, subcircuits."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from bridge.netlist import NetlistError, parse_netlist, read_netlist
from bridge.netlist.circuit import GROUND


def parse(text: str, tmp_path: Path | None = None):
    return parse_netlist(text, "t.cir", str(tmp_path) if tmp_path else None)


# ---- lines -------------------------------------------------------------------

def test_first_line_is_title_even_when_it_looks_like_a_card():
    circuit = parse("M1 test bench\nR1 a 0 1k\n")
    assert circuit.title == "M1 test bench"
    assert [e.name for e in circuit.elements] == ["R1"]


def test_dot_title_line_gives_the_title():
    assert parse(".title buoy bias\nR1 a 0 1k\n").title == "buoy bias"


def test_comments_indented_inline_and_dollar():
    circuit = parse(
        "t\n* full comment\n   * indented comment\n# hash comment\n"
        "R1 a 0 1k ; inline\nR2 a 0 2k $ dollar comment\nR3 a$b 0 3k\n"
    )
    assert [(e.name, e.nodes, e.value) for e in circuit.elements] == [
        ("R1", ("a", GROUND), 1e3),
        ("R2", ("a", GROUND), 2e3),
        ("R3", ("a$b", GROUND), 3e3),  # a `$` inside a name is not a comment
    ]


def test_inline_comment_forms_and_lookalikes():
    circuit = parse(
        "t\n.param half={1/2}\nR1 a 0 1k;glued\nR2 a 0 2k // slashes\nR3 a 0 3k $\n"
        "R4 a//b 0 {4/half}\nR5 a$ 0 5k\n"
    )
    assert [(e.name, e.nodes, e.value) for e in circuit.elements] == [
        ("R1", ("a", GROUND), 1e3),
        ("R2", ("a", GROUND), 2e3),
        ("R3", ("a", GROUND), 3e3),
        ("R4", ("a//b", GROUND), 8.0),  # `//` and `/` that follow no blank are not comments
        ("R5", ("a$", GROUND), 5e3),
    ]


def test_a_few_control_characters_are_tolerated():
    # More control characters than max(8, 1 % of the text) mean binary data.
    assert parse("t\n* \x01\x02\x03\x04\x05\x06\x07\x08\nR1 a 0 1k\n").element("R1") is not None
    with pytest.raises(NetlistError, match="binary data"):
        parse("t\n* \x01\x02\x03\x04\x05\x06\x07\x08\x0e\nR1 a 0 1k\n")
    # Tab, line feed, vertical tab, form feed and carriage return are blanks, not binary.
    assert parse("t\n" + "\t\v\f\r\n" * 20 + "R1 a 0 1k\n").element("R1") is not None


def test_continuation_lines_indented_and_after_comments():
    circuit = parse(
        "t\nM1 d g 0 0 nch\n* a comment between\n\n   + w=10u\n+ l=2u\n"
        ".model nch nmos\n+ (vto=0.7\n* note\n  + kp=50u)\n"
    )
    m1 = circuit.element("m1")
    assert m1.params == {"w": 10e-6, "l": 2e-6}
    assert circuit.model("NCH").params == {"vto": 0.7, "kp": 50e-6}


def test_level_only_on_a_continuation_line():
    circuit = parse("t\n.model n1 nmos vto=1\n+ level=1 kp=1u\nM1 d g 0 0 n1\n")
    assert circuit.model("n1").level == 1


def test_crlf_tabs_and_stray_bytes(tmp_path):
    path = tmp_path / "win.cir"
    path.write_bytes(b"t\xe9st \xff title\r\nR1\ta\t0\t1k\r\n* caf\xe9\r\nV1 a 0 5\r\n.op\r\n.end\r\n")
    circuit = read_netlist(path)
    assert [e.name for e in circuit.elements] == ["R1", "V1"]
    assert circuit.element("R1").value == 1e3


def test_case_insensitive_cards_and_nodes():
    circuit = parse("t\nr1 OUT Gnd 1K\n.MODEL NCH NMOS(VTO=1)\nm1 Out G 0 0 nch W=1U L=1U\n.OP\n.END\n")
    assert circuit.element("R1").nodes == ("out", GROUND)
    assert circuit.element("M1").nodes[0] == "out"
    assert circuit.model("nch").params["vto"] == 1.0
    assert circuit.analyses[0].kind == "op"


def test_missing_end_is_accepted_and_lines_after_end_ignored():
    assert len(parse("t\nR1 a 0 1k\n").elements) == 1
    circuit = parse("t\nR1 a 0 1k\n.end\nR2 a 0 1k\n")
    assert len(circuit.elements) == 1
    assert any(n.code == "after-end" for n in circuit.notices)


# ---- .param and expressions --------------------------------------------------------

def test_params_several_per_line_evaluated_in_order():
    circuit = parse(
        "t\n.param a=2 b = {a*3} c='b-1'\n.param d={-a^2 + sqrt(16) * (1+1)} e={max(a, b) / min(4, 8)}\n"
        ".param f={pow(2,3) + abs(-1) + exp(0) + ln(1) + log(1)} g={2**3}\n"
        "R1 a 0 {d*1k}\n"
    )
    values = {p.name: p.value for p in circuit.parameters}
    assert values == {"a": 2, "b": 6, "c": 5, "d": 4, "e": 1.5, "f": 10, "g": 8}
    assert circuit.element("R1").value == 4000.0


def test_unary_minus_binds_looser_than_power():
    circuit = parse("t\n.param x={-2^2}\nR1 a 0 1\n")
    assert circuit.parameters[0].value == -4.0


def test_expression_numbers_take_suffixes():
    assert parse("t\nR1 a 0 {2*4.7k}\n").element("R1").value == 9400.0


def test_func_definitions():
    circuit = parse("t\n.func par(x,y) {x*y/(x+y)}\nR1 a 0 {par(2k, 2k)}\n")
    assert circuit.element("R1").value == 1000.0


# ---- elements ------------------------------------------------------------------

@pytest.mark.parametrize(
    "card, dc",
    [
        ("V1 a 0 5", 5.0),
        ("V1 a 0 DC 5", 5.0),
        ("V1 a 0 dc=5", 5.0),
        ("V1 a 0 DC 5V AC 1", 5.0),
        ("V1 a 0 AC 1 0", 0.0),
        ("V1 a 0 SIN(0.5 1 1k)", 0.5),
        ("V1 a 0 sin 0.5 1 1k", 0.5),
        ("V1 a 0 PULSE(0 5 1u 1n 1n 1u 2u)", 0.0),
        ("V1 a 0 pulse 1 5 1u", 1.0),
        ("V1 a 0 PWL(0 2 1m 3)", 2.0),
        ("V1 a 0 EXP(1.5 5 0 1u)", 1.5),
        ("V1 a 0 DC 2 SIN(0 1 1k)", 2.0),
        ("V1 a 0 {1+1}", 2.0),
    ],
)
def test_source_dc_value_forms(card: str, dc: float):
    element = parse(f"t\n{card}\nR1 a 0 1k\n").element("V1")
    assert element.value == dc


def test_source_without_dc_uses_t0_value_with_a_notice():
    circuit = parse("t\nV1 a 0 SIN(0.5 1 1k)\nR1 a 0 1k\n")
    assert circuit.element("V1").waveform.kind == "sin"
    assert any(n.code == "no-dc-value" for n in circuit.notices)


def test_ac_spec_is_kept():
    element = parse("t\nV1 a 0 DC 1 AC 2 45\nR1 a 0 1k\n").element("V1")
    assert element.params == {"ac_mag": 2.0, "ac_phase": 45.0}


def test_controlled_sources():
    circuit = parse(
        "t\nV1 a 0 1\nVs a b 0\nR1 b 0 1k\nE1 c 0 a 0 10\nG1 d 0 a 0 1m\nF1 e 0 Vs 2\nH1 f 0 vs 100\n"
        "R2 c 0 1\nR3 d 0 1\nR4 e 0 1\nR5 f 0 1\n"
    )
    assert circuit.element("E1").nodes == ("c", "0", "a", "0") and circuit.element("E1").value == 10
    assert circuit.element("G1").value == 1e-3
    assert circuit.element("F1").controlling_source == "Vs"
    assert circuit.element("H1").value == 100


def test_mosfet_instance_parameters_with_spaces_around_equals():
    circuit = parse(
        "t\n.model nch nmos\nM1 d g s b nch W = 10u L= 2u M =2 AD=1p AS=1p PD=4u PS=4u NRD=1 NRS=1 OFF\n"
    )
    m1 = circuit.element("M1")
    assert m1.nodes == ("d", "g", "s", "b")
    assert m1.model == "nch"
    assert m1.params == {"w": 10e-6, "l": 2e-6, "m": 2, "ad": 1e-12, "as": 1e-12, "pd": 4e-6,
                         "ps": 4e-6, "nrd": 1, "nrs": 1}
    assert m1.flags == ("off",)


def test_diode_and_bjt_with_three_or_four_nodes():
    circuit = parse(
        "t\n.model dx d(is=1e-14)\n.model qn npn(bf=100)\nD1 a k dx 2\n"
        "Q1 c b e qn\nQ2 c b e sub qn 3\n"
    )
    assert circuit.element("D1").params == {"area": 2.0}
    assert circuit.element("Q1").nodes == ("c", "b", "e") and circuit.element("Q1").model == "qn"
    assert circuit.element("Q2").nodes == ("c", "b", "e", "sub")
    assert circuit.element("Q2").params == {"area": 3.0}


def test_odd_node_names():
    circuit = parse("t\nR1 +5V 1in+ 1k\nR2 Net-_C4-Pad1_ gnd 1k\n")
    assert circuit.element("R1").nodes == ("+5v", "1in+")
    assert circuit.element("R2").nodes == ("net-_c4-pad1_", GROUND)


# ---- models ----------------------------------------------------------------------

def test_model_forms_commas_units_duplicates_aliases():
    circuit = parse(
        "t\n.model a nmos(vt0=0.8V, kp = 50u, u0=400)\n.model b pmos vto=-1 kp=20u\n"
        ".model a nmos (vto=0.9 vto=1.1)\n"
    )
    assert circuit.model("a").params == {"vto": 1.1}  # duplicates: the last wins
    assert circuit.model("b").type == "pmos"
    assert any(n.code == "duplicate-model" for n in circuit.notices)
    first = parse("t\n.model a nmos(vt0=0.8V, kp = 50u, u0=400)\n").model("a")
    assert first.params == {"vto": 0.8, "kp": 50e-6, "uo": 400.0}
    assert first.level == 1


# ---- includes and libraries ------------------------------------------------------------

def test_include_relative_to_including_file(tmp_path):
    (tmp_path / "lib").mkdir()
    (tmp_path / "lib" / "models.inc").write_text(".model nch nmos vto=0.7\n.include more.inc\n")
    (tmp_path / "lib" / "more.inc").write_text("* no title line in an include\nR9 x 0 1k\n")
    (tmp_path / "main.cir").write_text('t\n.include "lib/models.inc"\nM1 d g 0 0 nch\n')
    circuit = read_netlist(tmp_path / "main.cir")
    assert circuit.model("nch") is not None
    assert circuit.element("R9").origin.file.endswith("more.inc")
    assert circuit.element("R9").origin.line == 2


def test_include_through_a_symlinked_netlist(tmp_path):
    # Includes resolve against the folder of the file itself, not of a link to it.
    (tmp_path / "real").mkdir()
    (tmp_path / "real" / "main.cir").write_text("t\n.include parts.inc\n")
    (tmp_path / "real" / "parts.inc").write_text("R1 a 0 1k\n")
    (tmp_path / "parts.inc").write_text("R2 a 0 2k\n")
    try:
        (tmp_path / "link.cir").symlink_to(tmp_path / "real" / "main.cir")
    except OSError:
        pytest.skip("no symbolic links here")
    assert [e.name for e in read_netlist(tmp_path / "link.cir").elements] == ["R1"]


def test_self_include_through_a_symlink_is_a_cycle(tmp_path):
    (tmp_path / "main.cir").write_text("t\n.include link.cir\n")
    try:
        (tmp_path / "link.cir").symlink_to(tmp_path / "main.cir")
    except OSError:
        pytest.skip("no symbolic links here")
    with pytest.raises(NetlistError, match="include cycle: main.cir → main.cir"):
        read_netlist(tmp_path / "link.cir")


def test_include_of_a_loop_of_symlinks_is_a_located_error(tmp_path):
    (tmp_path / "main.cir").write_text("t\nR1 a 0 1k\n.include loop_a.inc\n")
    try:
        (tmp_path / "loop_a.inc").symlink_to(tmp_path / "loop_b.inc")
        (tmp_path / "loop_b.inc").symlink_to(tmp_path / "loop_a.inc")
    except OSError:
        pytest.skip("no symbolic links here")
    with pytest.raises(NetlistError, match="included file `loop_a.inc` cannot be located") as raised:
        read_netlist(tmp_path / "main.cir")
    assert (raised.value.location.line, raised.value.location.column) == (3, 10)


def test_lib_section(tmp_path):
    (tmp_path / "corners.lib").write_text(
        "* corners\n.lib tt\n.model nch nmos vto=0.7\n.endl tt\n.lib ss\n.model nch nmos vto=0.9\n.endl\n"
    )
    (tmp_path / "main.cir").write_text("t\n.lib corners.lib ss\nM1 d g 0 0 nch\n")
    assert read_netlist(tmp_path / "main.cir").model("nch").params["vto"] == 0.9


# ---- control cards -----------------------------------------------------------------------

def test_analyses_and_kept_cards():
    circuit = parse(
        "t\nV1 a 0 1\nV2 b 0 1\nR1 a b 1k\n.op\n.dc V1 0 5 0.1\n.dc v1 0 1 0.5 v2 0 2 1\n"
        ".options reltol=1e-4 noacct\n.option gmin=1e-12\n.opt abstol=1p\n.temp 50\n"
        ".ic v(a)=1\n.nodeset v(b)=0.5\n.save all @m1[id]\n.print dc v(a)\n.global vdd\n"
        ".meas dc x find v(a) at=1\n.tran 1n 1u\n"
    )
    assert [a.kind for a in circuit.analyses] == ["op", "dc", "dc"]
    assert circuit.analyses[1].sweeps[0].stop == 5
    assert len(circuit.analyses[2].sweeps) == 2
    kinds = [d.kind for d in circuit.directives]
    assert kinds == ["options", "options", "options", "temp", "ic", "nodeset", "save", "print", "meas", "tran"]
    assert circuit.directives[0].settings == (("reltol", 1e-4), ("noacct", None))
    assert circuit.directives[5].settings == (("b", 0.5),)


# ---- subcircuits -----------------------------------------------------------------------------

def test_subcircuits_are_flattened_with_parameters():
    circuit = parse(
        "t\n.param rbase=1k\n.subckt stage in out vdd params: rd={2*rbase} w=10u\n"
        "RD vdd out {rd}\nM1 out in mid 0 nch w={w} l=1u\nRS mid 0 100\n.ends stage\n"
        ".model nch nmos vto=0.7\nX1 a b vdd stage w=20u\nX2 b c vdd stage rd=5k\nV1 vdd 0 5\n"
    )
    # Flattened names follow ngspice's own convention: letter, instance path, name.
    names = [e.name for e in circuit.elements]
    assert names == ["R.x1.RD", "M.x1.M1", "R.x1.RS", "R.x2.RD", "M.x2.M1", "R.x2.RS", "V1"]
    rd1 = circuit.element("R.x1.RD")
    assert rd1.value == 2000.0 and rd1.nodes == ("vdd", "b")
    assert circuit.element("M.x1.M1").params["w"] == 20e-6
    assert circuit.element("M.x1.M1").nodes == ("b", "a", "x1.mid", GROUND)
    assert circuit.element("R.x2.RD").value == 5000.0
    assert circuit.element("M.x2.M1").params["w"] == 10e-6


def test_global_nodes_stay_global_in_subcircuits():
    circuit = parse("t\n.global vcc\n.subckt load a\nR1 a vcc 1k\n.ends\nX1 n load\nV1 vcc 0 1\n")
    assert circuit.element("R.x1.R1").nodes == ("n", "vcc")


def test_values_are_si_and_lines_one_based():
    circuit = parse("t\n\nR1 a 0 1M\nC1 a 0 1F\nL1 a 0 1mH\n")
    assert [(e.value, e.origin.line) for e in circuit.elements] == [(1e-3, 3), (1e-15, 4), (1e-3, 5)]


def test_unclosed_subckt_is_located():
    with pytest.raises(NetlistError) as info:
        parse("t\n.subckt amp a b\nR1 a b 1k\n")
    assert info.value.location.line == 2


def test_float_values_are_finite():
    assert all(math.isfinite(e.value) for e in parse("t\nR1 a 0 1e300\n").elements)
