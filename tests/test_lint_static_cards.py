"""Lint, card family: a card whose polarity the wiring contradicts, a card of another level, and
the reader's card-missing code for the runner."""

from __future__ import annotations

import pytest

from bridge.lint import cards
from bridge.lint.rule import LintContext, LintSettings
from bridge.netlist import parse_netlist
from bridge.netlist.errors import NetlistError
from bridge.vocabulary import not_level1_finding


def lint(text: str, rule) -> list:
    return rule(LintContext(parse_netlist(text, "stage.cir"), LintSettings()))


# A greenhouse humidity sensor's buffer: common source on 5 V.
NMOS_WIRED = """\
Greenhouse humidity front end: common source, divider bias
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 200k
RD vdd d 12k
M1 d g 0 0 {card} W=20u L=2u
.model NHUM nmos (vto=0.8 kp=100u)
.model PHUM pmos (vto=-0.8 kp=40u)
.op
.end
"""

PMOS_WIRED = """\
Greenhouse humidity front end: PMOS common source, drain resistor to ground
VDD vdd 0 5
R1 vdd g 200k
R2 g 0 300k
RD d 0 12k
M1 d g vdd vdd {card} W=40u L=2u
.model NHUM nmos (vto=0.8 kp=100u)
.model PHUM pmos (vto=-0.8 kp=40u)
.op
.end
"""


def test_pmos_card_on_a_device_wired_as_nmos_is_reported_at_the_model_field() -> None:
    findings = lint(NMOS_WIRED.replace("{card}", "PHUM"), cards.polarity_against_wiring)
    assert len(findings) == 1
    finding = findings[0]
    assert (finding.code, finding.severity, finding.subject) == ("card-type-against-wiring", "warning", "M1")
    assert (finding.line, finding.column) == (6, "M1 d g 0 0 PHUM".index("PHUM") + 1)
    assert finding.message == (
        "M1 has a pmos card (PHUM) but is wired as an NMOS: its source is on the lowest rail (node 0, 0 V) and "
        "its drain pulled up to node vdd (5 V) through RD"
    )
    assert finding.fix == "give M1 an nmos card, or swap its drain and source fields if it is meant as pmos"


def test_nmos_card_on_a_device_wired_as_pmos_is_reported() -> None:
    findings = lint(PMOS_WIRED.replace("{card}", "NHUM"), cards.polarity_against_wiring)
    assert [(f.subject, f.line) for f in findings] == [("M1", 6)]
    assert "nmos card (NHUM) but is wired as a PMOS: its source is on the highest rail (node vdd, 5 V)" in (
        findings[0].message
    )
    assert "drain pulled down to node 0 (0 V) through RD" in findings[0].message
    assert findings[0].fix.startswith("give M1 a pmos card")


def test_matching_cards_are_not_reported() -> None:
    assert lint(NMOS_WIRED.replace("{card}", "NHUM"), cards.polarity_against_wiring) == []
    assert lint(PMOS_WIRED.replace("{card}", "PHUM"), cards.polarity_against_wiring) == []


def test_ambiguous_wiring_is_not_judged() -> None:
    # A PMOS with its source at ground on split supplies: ground is not the lowest rail.
    split = PMOS_WIRED.replace("VDD vdd 0 5", "VDD vdd 0 5\nVNEG vneg 0 -5").replace(
        "RD d 0 12k", "RD d vneg 12k").replace("M1 d g vdd vdd {card}", "M1 d g 0 vneg PHUM")
    assert lint(split, cards.polarity_against_wiring) == []
    # A current source drives the gate: it can hold the gate beyond the rails.
    driven = NMOS_WIRED.replace("{card}", "PHUM").replace("R1 vdd g 300k", "IG g 0 50u")
    assert lint(driven, cards.polarity_against_wiring) == []


def test_card_of_another_level_is_a_warning_that_says_what_check_does() -> None:
    text = NMOS_WIRED.replace("{card}", "NB3").replace(
        ".model NHUM", ".model NB3 nmos (level=8 version=3.3.0)\n.model NHUM")
    circuit = parse_netlist(text, "stage.cir")
    findings = cards.level_not_1(LintContext(circuit, LintSettings()))
    assert len(findings) == 1
    finding = findings[0]
    assert (finding.code, finding.severity, finding.subject, finding.line) == ("card-not-level-1", "warning", "M1", 6)
    assert finding.column == "M1 d g 0 0 NB3".index("NB3") + 1
    # The same words as check's own note on such a card.
    assert finding.message.startswith("model NB3 of M1 is LEVEL=8: the square-law hand analysis does not apply")
    assert "`check` leaves the hand and level-1 columns empty and ngspice solves the card as written" in (
        finding.message
    )
    assert "model NB3 of M1 is LEVEL=8" in not_level1_finding(circuit.other_level_mosfets()).message
    assert lint(NMOS_WIRED.replace("{card}", "NHUM"), cards.level_not_1) == []


def test_missing_card_reaches_lint_as_code_card_missing_with_its_place() -> None:
    with pytest.raises(NetlistError) as caught:
        parse_netlist(NMOS_WIRED.replace("{card}", "NHUMX"), "stage.cir")
    assert caught.value.code == "card-missing" and "card-missing" in cards.CODES
    location = caught.value.location
    assert (location.line, location.column) == (6, "M1 d g 0 0 NHUMX".index("NHUMX") + 1)
