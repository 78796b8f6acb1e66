"""The hand column of `sweep`, numbers only: HandSweep (the circuit reduced once, the affine closed
form solved per point) gives hand_analysis's own numbers to the last bit, and the sweep's hand
column writes no working.

The reference is hand_analysis itself, run on a copy of the circuit with the swept source's value
replaced (what the hand column did at every point before).
"""

from __future__ import annotations

import numpy as np
import pytest

from bridge.analysis import hand, hand_working
from bridge.analysis.hand import HandAnalysisError, HandSweep, hand_analysis
from bridge.analysis.sweep import sweep_values, with_source_value
from bridge.netlist import parse_netlist
from bridge.sweep_run import transfer_curve

# Bicycle dynamo light: the rectified dynamo voltage, divided down, drives an NMOS with a source
# resistor that sinks the lamp driver's current through RD; swept through cutoff, saturation
# and triode.
DYNAMO_LIGHT = """\
Dynamo light driver: divider from the rectified dynamo, source resistor
VDYN dyn 0 6
VDD vdd 0 6
R1 dyn g 220k
R2 g 0 100k
RD vdd d 4.7k
RS s 0 1k
M1 d g s 0 nch w=10u l=1u
.model nch nmos (vto=0.8 kp=110u)
"""

# Greenhouse sensor board: a PMOS from the 3.3 V rail whose gate the controller drives directly,
# the sensor heater as the drain load.
GREENHOUSE_HEATER = """\
Greenhouse heater switch: PMOS gate driven by the controller
VSUP sup 0 3.3
VCTL g 0 1.2
M1 d g sup sup pch w=40u l=1u
RH d 0 2.2k
.model pch pmos (vto=-0.6 kp=50u)
"""

# The same board's bias trim: a current DAC into a gate resistor sets the NMOS sensor amplifier.
GREENHOUSE_TRIM = """\
Greenhouse sensor amplifier: gate set by a current DAC into RG
VDD vdd 0 3.3
IDAC 0 g 8u
RG g 0 150k
RD vdd d 22k
M1 d g 0 0 nch w=8u l=2u
.model nch nmos (vto=0.5 kp=120u)
"""

SCENARIOS = {
    "dynamo light, swept at the dynamo": (DYNAMO_LIGHT, "VDYN", 0.0, 12.0),
    "dynamo light, supply swept through zero": (DYNAMO_LIGHT, "VDD", -2.0, 6.0),
    "greenhouse heater, PMOS gate swept": (GREENHOUSE_HEATER, "VCTL", 0.0, 3.3),
    "greenhouse trim, current DAC swept": (GREENHOUSE_TRIM, "IDAC", 0.0, 30e-6),
}


def _reference(circuit, source: str, value: float):
    try:
        return hand_analysis(with_source_value(circuit, source, value))
    except HandAnalysisError:
        return None


@pytest.mark.parametrize("name", list(SCENARIOS))
def test_hand_sweep_gives_hand_analysis_numbers_to_the_bit(name):
    text, source, start, stop = SCENARIOS[name]
    circuit = parse_netlist(text, "scenario.cir")
    model = HandSweep(circuit, source)
    covered = 0
    seen = set()
    for value in sweep_values(start, stop, points=61):
        fast = model.solve(float(value))
        if fast is None:
            continue  # not the affine closed form at this value: the caller asks hand_analysis
        covered += 1
        reference = _reference(circuit, source, float(value))
        assert reference is not None and reference.closed_form
        assert fast.node_voltages == reference.node_voltages  # exact: the same arithmetic
        assert fast.devices == reference.devices
        assert fast.closed_form and fast.steps == () and fast.assumptions == ()
        seen.add(fast.devices["M1"].region)
    regions = len(seen)
    values = [float(v) for v in sweep_values(start, stop, points=61)]
    # The whole grid at once (one batched linear solve): the same solutions as point by point.
    assert model.solve_all(values) == [model.solve(value) for value in values]
    assert covered >= 40, f"only {covered} of 61 points on the closed-form path"
    assert regions >= 2, f"the sweep saw only {seen}"


def test_hand_sweep_leaves_roles_swapped_points_to_hand_analysis():
    """With VDD below ground the drain sits below the source: no affine closed form there."""
    circuit = parse_netlist(DYNAMO_LIGHT, "dynamo.cir")
    model = HandSweep(circuit, "VDD")
    assert model.solve(-1.0) is None
    assert not hand_analysis(with_source_value(circuit, "VDD", -1.0)).closed_form
    assert model.solve(5.0) is not None


@pytest.mark.parametrize("name", list(SCENARIOS))
def test_hand_column_is_hand_analysis_at_every_point(name):
    text, source, start, stop = SCENARIOS[name]
    circuit = parse_netlist(text, "scenario.cir")
    x = sweep_values(start, stop, points=41)
    curve = transfer_curve(circuit, source, "d", x, None).curves["hand"]
    assert curve is not None
    expected = []
    for value in x:
        reference = _reference(circuit, source, float(value))
        expected.append(reference.node_voltages["d"] if reference is not None else np.nan)
    np.testing.assert_array_equal(curve.output, np.array(expected))


def test_hand_column_writes_no_working(monkeypatch):
    """The hand column solves 201 points and the edge searches: no Step of the hand analysis is
    written for any of them (before, every point wrote its whole derivation)."""
    written = []

    class CountedStep(hand.Step):
        def __init__(self, *args, **kwargs):
            written.append(args[0] if args else kwargs.get("text"))
            super().__init__(*args, **kwargs)

    for text, source, start, stop in SCENARIOS.values():
        circuit = parse_netlist(text, "scenario.cir")
        x = sweep_values(start, stop, points=201)
        with monkeypatch.context() as patch:
            patch.setattr(hand_working, "Step", CountedStep)
            result = transfer_curve(circuit, source, "d", x, None)
        assert result.curves["hand"] is not None
    assert written == []
