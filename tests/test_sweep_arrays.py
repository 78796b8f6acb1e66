"""The vectorised sweep solver against the scalar one: the same operating points to 1e-9 relative.

The scalar solver (``solve_dc_sweep``, itself checked against ngspice in test_dcsolve.py) is the
reference; ``solve_dc_sweep_arrays`` solves every point at once and must land on the same ones.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from bridge.analysis.dcsolve import solve_dc_sweep, solve_dc_sweep_arrays
from bridge.analysis.sweep import SweepInputError, sweep_values
from bridge.commands.sweep_defaults import default_source
from bridge.devices.mos1 import REGIONS
from bridge.netlist import parse_netlist, read_netlist

BUNDLED = sorted((Path(__file__).parent.parent / "netlists").glob("*.cir"))

# A bicycle dynamo light: a PMOS high-side switch whose gate the dynamo's rectified voltage pulls.
DYNAMO_SWITCH = """bicycle dynamo light, PMOS high-side switch
vdyn rail 0 6
vsense g 0 3
rled rail2 0 150
m1 rail2 g rail rail plight w=200u l=1u
.model plight pmos (vto=-0.9 kp=30u lambda=0.05 gamma=0.35 phi=0.7)
.end
"""
# A dynamo light's regulator sense stage, its drain able to go below the source (swapped mode).
SWAPPED_SENSE = """dynamo regulator sense, drain driven both ways
vin d 0 0
vg g 0 2.5
rs s 0 4.7k
m1 d g s 0 nsense w=10u l=2u
.model nsense nmos (vto=0.6 kp=100u lambda=0.02 gamma=0.5 phi=0.7)
.end
"""
# A diode in the network: solved point by point by the scalar solver.
DIODE_CLAMP = """dynamo light, diode clamp on the gate
vin a 0 0
r1 a g 10k
d1 g 0 dclamp
rd vdd d 2k
vdd vdd 0 6
m1 d g 0 0 nlamp w=40u l=2u
.model dclamp d (is=1e-14 n=1.5)
.model nlamp nmos (vto=0.5 kp=80u)
.end
"""


def _agree(circuit, source: str, x: np.ndarray) -> np.ndarray:
    reference = solve_dc_sweep(circuit, source, x)
    batch = solve_dc_sweep_arrays(circuit, source, x)
    assert batch.solved.all()
    for node in reference[0].node_voltages:
        ours, theirs = batch.voltage(node), np.array([p.voltage(node) for p in reference])
        assert np.all(np.abs(ours - theirs) <= 1e-9 * np.maximum(np.abs(ours), np.abs(theirs)) + 1e-12), node
    for name in reference[0].devices:
        regions = [REGIONS[code] for code in batch.device(name).region.tolist()]
        ids = batch.device(name).id
        for k, point in enumerate(reference):
            device = point.device(name)
            assert abs(ids[k] - device.id) <= 1e-9 * abs(device.id) + 1e-15
            if abs(device.vov) > 1e-9 and abs(abs(device.vds) - device.vov) > 1e-9:  # not on an edge
                assert regions[k] == device.region
    return batch.vectorised


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: p.stem)
def test_bundled_stages_swept_at_once_match_the_scalar_sweep(path: Path) -> None:
    circuit = read_netlist(path)
    try:
        source = default_source(circuit)
    except SweepInputError:  # the gate is not driven by a source of its own: sweep the first supply
        source = next(e.name for e in circuit.elements if e.kind == "vsource")
    value = float(circuit.element(source).value or 0.0)
    x = sweep_values(value - 2.0, value + 2.0, points=201)
    vectorised = _agree(circuit, source, x)
    assert vectorised.sum() >= len(x) - 1  # all but the first point came from the vectorised Newton


@pytest.mark.parametrize("text, source, start, stop", [
    (DYNAMO_SWITCH, "vsense", 0.0, 6.0),
    (SWAPPED_SENSE, "vin", -3.0, 5.0),
])  # fmt: skip
def test_written_stages_through_every_region_match_the_scalar_sweep(text, source, start, stop) -> None:
    vectorised = _agree(parse_netlist(text, "dynamo.cir"), source, sweep_values(start, stop, points=401))
    assert vectorised.sum() >= 400


def test_a_circuit_with_a_diode_is_solved_point_by_point_with_the_same_answers() -> None:
    vectorised = _agree(parse_netlist(DIODE_CLAMP, "clamp.cir"), "vin", sweep_values(0.0, 5.0, points=51))
    assert not vectorised.any()
