"""Lint, static families (scale, card, path): quiet on correct stages. Every topology the hand
analysis knows, NMOS and PMOS, split supplies and AC-coupled (tests/lint_corpus), the bundled
examples (netlists/*.cir) and the stages the check tests use (tests/check_support.py)."""

from __future__ import annotations

from pathlib import Path

import pytest
from check_support import OWN_NETLISTS
from conftest import EXAMPLES

from bridge.lint import cards, paths, registry, suffixes
from bridge.lint.rule import LintContext, LintSettings
from bridge.netlist import parse_netlist, read_netlist

CORPUS = Path(__file__).resolve().parent / "lint_corpus"
STATIC_RULES = suffixes.RULES + cards.RULES + paths.RULES

# Correct stages written for the static rules' borderlines: a real milliohm shunt in the supply
# path, a 1 TΩ resistor giving a node its DC path, a choke written in millihenries (`M` is milli,
# the value meant), values with units (`mA`, `uF`, `V`, `H`) and a drain with only a capacitor
# (joined to the bulk through its junction).
OWN_CORRECT = {
    "greenhouse_shunt.cir": """\
Greenhouse pump-current monitor: common source with a 1 mOhm supply shunt
VDD vdd 0 12
RSHUNT vdd vs 1m
RD vs d 1k
R1 vdd g 1MEG
R2 g 0 330k
M1 d g 0 0 NPUMP W=40u L=2u
.model NPUMP nmos (vto=1 kp=100u)
.op
.end
""",
    "dynamo_choke.cir": """\
Dynamo light sensor: choke-fed drain, bypassed source, a teraohm keeping a sense node defined
VDD vdd 0 6V
LCHOKE vdd d 10M
RS s 0 2.2k
CS s 0 47uF
R1 vdd g 2MEG
R2 g 0 1MEG
CSENSE d sense 100n
RKEEP sense 0 1T
ILEAK 0 aux 1uA
RAUX aux 0 100k
M1 d g s 0 NDYN W=20u L=2u M=2
.model NDYN nmos (vto=0.7 kp=100u)
.op
.end
""",
    "greenhouse_pmos_tail.cir": """\
Greenhouse light sensor: PMOS follower with a tail current, split supplies
VPOS vpos 0 5
VNEG vneg 0 -5
RG g 0 1MEG
ITAIL vpos s 200uA
M1 vneg g s vpos PLUX W=50u L=2u
.model PLUX pmos (vto=-0.8 kp=40u)
.op
.end
""",
}


def _loud(findings) -> list[str]:
    return [f"{f.line}:{f.column}: {f.severity} {f.code} {f.message}" for f in findings if f.severity != "info"]


def _static_findings(circuit) -> list:
    context = LintContext(circuit, LintSettings())
    return [finding for rule in STATIC_RULES for finding in rule(context)]


def test_the_registry_runs_the_static_rules_and_knows_their_codes() -> None:
    assert set(STATIC_RULES) <= set(registry.RULES)
    for family in (suffixes, cards, paths):
        assert family.CODES and all(code in registry.CODES for code in family.CODES)
        prefix = {"suffixes": "scale-", "cards": "card-", "paths": "path-"}[family.__name__.rsplit(".", 1)[1]]
        assert all(code.startswith(prefix) for code in family.CODES)


@pytest.mark.parametrize("path", sorted(CORPUS.glob("*.cir")), ids=lambda p: p.name)
def test_quiet_on_the_corpus_of_correct_stages(path: Path) -> None:
    assert _loud(_static_findings(read_netlist(path))) == []


def test_the_corpus_is_there() -> None:
    # Every topology the hand analysis knows, NMOS and PMOS: the quiet tests above must not pass empty.
    assert len(list(CORPUS.glob("*.cir"))) >= 20


@pytest.mark.parametrize("path", sorted(EXAMPLES.glob("*.cir")), ids=lambda p: p.name)
def test_quiet_on_the_bundled_examples(path: Path) -> None:
    assert _loud(_static_findings(read_netlist(path))) == []


@pytest.mark.parametrize("name", sorted(OWN_NETLISTS), ids=str)
def test_quiet_on_the_check_stages(name: str) -> None:
    assert _loud(_static_findings(parse_netlist(OWN_NETLISTS[name], name))) == []


@pytest.mark.parametrize("name", sorted(OWN_CORRECT), ids=str)
def test_quiet_on_borderline_correct_stages(name: str) -> None:
    assert _loud(_static_findings(parse_netlist(OWN_CORRECT[name], name))) == []
