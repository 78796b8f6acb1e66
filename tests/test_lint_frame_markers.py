"""The `lint: allow CODE` marker: the line layer carries it to the Circuit as data
(`Circuit.allowances`), at the card's first line, so that lint never re-reads text."""

from __future__ import annotations

from bridge.netlist import parse_netlist
from bridge.netlist.circuit import Allowance

STAGE = """\
Greenhouse sensor board: soil-moisture probe amplifier
VDD vdd 0 5
R1 vdd g 1M ; lint: allow scale-milli-meant-meg
R2 g 0 470k
RD vdd d 10k $ lint: allow op-low-margin, scale-resistor-range because the probe needs it
M1 d g 0 0 nch W=10u
+ L=2u ; lint: allow card-level
* lint: allow path-no-dc  (a comment line belongs to no card)
.model nch nmos (vto=0.7 kp=100u)
.op
.control
print v(d) ; lint: allow control-block-dropped
.endc
.end
"""


def test_allow_marker_on_a_card_is_carried_at_its_line_and_column():
    circuit = parse_netlist(STAGE, "probe.cir")
    assert circuit.allowances[0] == Allowance("scale-milli-meant-meg", "probe.cir", 3, 3, 27)
    line = STAGE.splitlines()[2]
    assert line[26:].startswith("scale-milli-meant-meg")


def test_allow_marker_takes_a_comma_list_and_stops_at_free_text():
    circuit = parse_netlist(STAGE, "probe.cir")
    on_rd = [(a.code, a.column) for a in circuit.allowances if a.line == 5]
    line = STAGE.splitlines()[4]
    assert on_rd == [("op-low-margin", line.index("op-low") + 1), ("scale-resistor-range", line.index("scale") + 1)]


def test_allow_marker_on_a_continuation_belongs_to_the_card_first_line():
    circuit = parse_netlist(STAGE, "probe.cir")
    (card_level,) = [a for a in circuit.allowances if a.code == "card-level"]
    assert (card_level.line, card_level.marker_line) == (6, 7)


def test_allow_marker_outside_a_card_is_not_carried():
    codes = {a.code for a in parse_netlist(STAGE, "probe.cir").allowances}
    assert "path-no-dc" not in codes  # a `*` comment line
    assert "control-block-dropped" not in codes  # inside a dropped `.control` block
    assert codes == {"scale-milli-meant-meg", "op-low-margin", "scale-resistor-range", "card-level"}


def test_allow_word_in_a_name_is_no_marker():
    text = "t\nV1 a 0 1\nRlint:allow a 0 1k\nR$lint:allow-x a 0 1k\n.end\n"
    assert parse_netlist(text, "t.cir").allowances == ()
