"""Lint, path family: circuits whose operating point cannot exist, in the user's node names; each
netlist shown here is also run through ngspice itself, which fails on it."""

from __future__ import annotations

import subprocess

import pytest
from conftest import NGSPICE, needs_ngspice

from bridge.lint import paths
from bridge.lint.rule import LintContext, LintSettings
from bridge.netlist import parse_netlist


def lint(text: str, rule) -> list:
    return rule(LintContext(parse_netlist(text, "stage.cir"), LintSettings()))


# A bicycle dynamo light's hub-speed pickup: AC-coupled common source, the gate bias forgotten.
GATE_ON_CAPACITOR = """\
Dynamo hub-speed pickup: AC-coupled common source, no gate bias
VDD vdd 0 6
VPICK pick 0 DC 0 AC 10m
CIN pick Gin 1u
RD vdd d 15k
M1 d Gin 0 0 NHUB W=20u L=2u
.model NHUB nmos (vto=0.7 kp=100u)
.op
.end
"""

# The same pickup with a tail current source into a capacitor-only source node.
CURRENT_NOWHERE = """\
Dynamo hub-speed pickup: tail current into a bypass capacitor only
VDD vdd 0 6
R1 vdd g 2MEG
R2 g 0 1MEG
RD vdd d 15k
M1 d g src 0 NHUB W=20u L=2u
ITAIL tail 0 100u
CTAIL tail 0 10u
CS src tail 10u
.model NHUB nmos (vto=0.7 kp=100u)
.op
.end
"""

# A node joined to the rest only through capacitors (no gate, no current source).
ISLAND = """\
Dynamo hub-speed pickup: output coupled to nothing at DC
VDD vdd 0 6
R1 vdd g 2MEG
R2 g 0 1MEG
RD vdd d 15k
M1 d g 0 0 NHUB W=20u L=2u
COUT d Out 1u
CL Out 0 100p
.model NHUB nmos (vto=0.7 kp=100u)
.op
.end
"""

# Two supplies across the same rail, and a choke across a 0 V source.
LOOPS = """\
Dynamo light regulator: two supplies on one rail
VDD vdd 0 6
VAUX vdd 0 5
RD vdd d 15k
LCHOKE s 0 10m
VSENSE s 0 0
R1 vdd g 2MEG
R2 g 0 1MEG
M1 d g s 0 NHUB W=20u L=2u
.model NHUB nmos (vto=0.7 kp=100u)
.op
.end
"""


def test_gate_reached_only_through_a_capacitor_is_reported_at_the_gate_field() -> None:
    findings = lint(GATE_ON_CAPACITOR, paths.floating_nodes)
    assert len(findings) == 1
    finding = findings[0]
    assert (finding.code, finding.severity, finding.subject) == ("path-gate-through-capacitor", "error", "M1")
    assert (finding.line, finding.column) == (6, "M1 d Gin".index("Gin") + 1)
    assert finding.message == (
        "the gate of M1 (node Gin) is reached only through CIN, a capacitor open at DC: nothing sets the gate's "
        "DC voltage, so the DC operating point is undefined"
    )
    assert finding.fix == "bias node Gin: a resistor to a rail or a divider between the rails"


def test_current_source_into_a_capacitor_only_node_is_reported_at_its_node_field() -> None:
    findings = lint(CURRENT_NOWHERE, paths.floating_nodes)
    assert len(findings) == 1
    finding = findings[0]
    assert (finding.code, finding.subject, finding.line) == ("path-current-nowhere", "ITAIL", 7)
    assert finding.column == 7  # `ITAIL tail 0 100u`: the node it drives current out of
    # The source of M1 (node src) joins its bulk, node 0, through the junction: only tail is cut off.
    assert finding.message == (
        "ITAIL forces 100 µA out of node tail, which has no DC path to ground: besides ITAIL only "
        "CTAIL (a capacitor, open at DC) and CS (a capacitor, open at DC) reach it, so at DC the current "
        "has nowhere to go and no DC operating point exists"
    )
    assert finding.fix.startswith("give node tail a DC path: a resistor to a rail")


def test_node_joined_only_through_capacitors_has_no_dc_path() -> None:
    findings = lint(ISLAND, paths.floating_nodes)
    assert [(f.code, f.subject, f.line, f.column) for f in findings] == [
        ("path-no-dc-ground", "Out", 7, "COUT d Out".index("Out") + 1)
    ]
    assert findings[0].message == (
        "node Out has no DC path to ground: only COUT (a capacitor, open at DC) and CL (a capacitor, open at DC) "
        "reach it, so its DC voltage is undefined, and with it the DC operating point"
    )


def test_loops_of_voltage_sources_and_inductors_are_reported_at_the_closing_element() -> None:
    findings = lint(LOOPS, paths.voltage_loops)
    assert [(f.code, f.subject, f.line, f.column) for f in findings] == [
        ("path-voltage-loop", "VAUX", 3, 6),
        ("path-voltage-loop", "VSENSE", 6, 8),
    ]
    assert findings[0].message.startswith(
        "VAUX closes a loop of voltage sources (VDD and VAUX, through nodes vdd and 0)"
    )
    assert findings[1].message.startswith(
        "VSENSE closes a loop of voltage sources and inductors (LCHOKE and VSENSE, through nodes s and 0; an "
        "inductor is a DC short)"
    )
    assert all(f.message.endswith("so the DC operating point is not defined") for f in findings)


def test_a_source_across_one_node_is_a_loop_of_itself() -> None:
    text = LOOPS.replace("VAUX vdd 0 5", "VAUX vdd vdd 5")
    found = [f for f in lint(text, paths.voltage_loops) if f.subject == "VAUX"]
    assert found and found[0].message.startswith("VAUX closes a loop of voltage sources (itself, through node vdd)")


def test_drain_on_a_capacitor_only_is_joined_through_the_bulk_junction_and_not_reported() -> None:
    # ngspice's drain junction (with GMIN) gives the drain a DC path to the bulk.
    text = ISLAND.replace("RD vdd d 15k\n", "")
    assert [f.subject for f in lint(text, paths.floating_nodes)] == ["Out"]


@needs_ngspice
@pytest.mark.parametrize(
    "text", [GATE_ON_CAPACITOR, CURRENT_NOWHERE, ISLAND, LOOPS], ids=["gate", "current", "island", "loops"]
)
def test_ngspice_finds_no_operating_point_for_these_circuits(tmp_path, text: str) -> None:
    # reference: ngspice 39 run directly in batch mode: its DC solution meets a singular matrix and
    # neither gmin nor source stepping rescues it (ngspice may then print the numbers of its
    # transient fallback, which depend on how the capacitors charged).
    deck = tmp_path / "stage.cir"
    deck.write_text(text)
    done = subprocess.run([NGSPICE, "-b", str(deck)], capture_output=True, text=True, timeout=60, cwd=tmp_path)
    said = (done.stdout + done.stderr).lower()
    assert "singular matrix" in said
    assert "gmin stepping failed" in said and "source stepping failed" in said
