"""Lint, static families: over netlists nobody wrote by hand (the front end's mutated seeds),
every rule returns well-formed findings and never raises on a circuit the reader accepts."""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_netlist_properties import DIRECTORY, NAME, mutated_netlists

from bridge.lint import cards, paths, suffixes
from bridge.lint.rule import LintContext, LintSettings
from bridge.netlist import NetlistError, parse_netlist
from bridge.vocabulary import SEVERITIES

STATIC_RULES = suffixes.RULES + cards.RULES + paths.RULES
CODES = suffixes.CODES | cards.CODES | paths.CODES


def _well_formed_findings(text: str) -> list:
    """The static rules' findings on `text` (none when the reader refuses it), each checked."""
    try:
        circuit = parse_netlist(text, NAME, DIRECTORY)
    except NetlistError:
        return []
    context = LintContext(circuit, LintSettings())
    findings = [finding for rule in STATIC_RULES for finding in rule(context)]
    for finding in findings:
        assert finding.code in CODES and finding.severity in SEVERITIES
        assert finding.message and finding.fix and finding.subject
        assert finding.line is not None and finding.line >= 1
        assert finding.column is None or finding.column >= 1
    return findings


@settings(max_examples=200, derandomize=True, database=None, deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(mutated_netlists())
def test_static_rules_give_well_formed_findings_on_any_readable_netlist(text: str) -> None:
    _well_formed_findings(text)

NODES = ("0", "a", "b", "Gate", "vdd", "vneg")
VALUES = ("2M", "1MOhm", "10F", "1MEG", "4.7k", "15u", "1T", "2e13", "{1k}", "0.5m", "1", "-1k", "10f")
SIZES = ("20u", "20", "2p", "1e-5", "{2u}", "0.18u")


@st.composite
def small_circuits(draw) -> str:
    """A few cards of every kind the static rules read, on a handful of nodes, with the values
    and sizes the scale rules judge, cards of both polarities and another level."""
    node = st.sampled_from(NODES)
    cards_ = ["random stage", ".model NX nmos (vto=0.7 kp=100u)", ".model PX pmos (vto=-0.7 kp=40u)",
              ".model BX nmos (level=8)"]
    for index in range(draw(st.integers(1, 9))):
        letter = draw(st.sampled_from("RCLVIEGM"))
        a, b = draw(node), draw(node)
        if letter in "RCL":
            cards_.append(f"{letter}{index} {a} {b} {draw(st.sampled_from(VALUES))}")
        elif letter in "VI":
            cards_.append(f"{letter}{index} {a} {b} {draw(st.sampled_from(('5', '-5', '1A', '100u', '0')))}")
        elif letter in "EG":
            cards_.append(f"{letter}{index} {a} {b} {draw(node)} {draw(node)} 2")
        else:
            model = draw(st.sampled_from(("NX", "PX", "BX")))
            w, length = draw(st.sampled_from(SIZES)), draw(st.sampled_from(SIZES))
            cards_.append(f"M{index} {a} {draw(node)} {b} {draw(node)} {model} W={w} L={length}")
    return "\n".join(cards_) + "\n.op\n.end\n"


@settings(max_examples=300, derandomize=True, database=None, deadline=None)
@given(small_circuits())
def test_static_rules_give_well_formed_findings_on_small_random_circuits(text: str) -> None:
    _well_formed_findings(text)
