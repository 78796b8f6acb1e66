"""The batch engine (``dcbatch.solve_dc_batch``) against the scalar solver, row by row.

Reference: ``solve_operating_point`` on the circuit rebuilt with each row's values by
``netlist.variant`` (itself checked against ngspice in test_dcsolve.py and test_temperature.py),
and ngspice itself for a batch row at `.temp`. The array forms of the temperature phase and of
the limiting are checked against their scalar forms.
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from conftest import needs_ngspice, ngspice_batch_op

from bridge.analysis.dcbatch import BatchValues, solve_dc_batch, solve_dc_sweep_arrays
from bridge.analysis.dcsolve import solve_dc_sweep, solve_operating_point
from bridge.analysis.sweep import HandColumn, SweepInputError, hand_starts, sweep_values
from bridge.commands.sweep_defaults import default_source
from bridge.devices.mos1 import REGIONS, Level1Geometry, Level1Model, evaluate, evaluate_arrays
from bridge.devices.mos1.convergence import (
    fetlim,
    fetlim_arrays,
    limit,
    limit_arrays,
    limvds,
    limvds_arrays,
    needs_limiting,
    pnjlim,
    pnjlim_arrays,
)
from bridge.devices.mos1.temperature import at_temperature_arrays
from bridge.netlist import parse_netlist, read_netlist
from bridge.netlist.variant import at_temperature, with_model_parameters, with_values

# A greenhouse sensor board: the soil-probe amplifier, a divider-biased NMOS common source.
GREENHOUSE_NMOS = """greenhouse soil probe amplifier
vdd vdd 0 5
vin in 0 1.9
r1 in g 100k
r2 g 0 150k
rd vdd d 8.2k
rs s 0 1k
m1 d g s 0 nprobe w=20u l=2u
.model nprobe nmos (vto=0.7 kp=110u lambda=0.02)
.end
"""
# The fan controller's PMOS current source, near the edge of triode.
GREENHOUSE_PMOS = """greenhouse fan controller, PMOS source
vdd vdd 0 12
vb g 0 10
rs vdd s 2.2k
rl d 0 6.8k
m1 d g s vdd pfan w=40u l=2u
.model pfan pmos (vto=-0.9 kp=40u lambda=0.03)
.end
"""
# The humidity sensor's source follower, bulk to ground: body effect.
GREENHOUSE_BODY = """greenhouse humidity follower, body effect
vdd vdd 0 5
vg g 0 3.2
rs s 0 10k
m1 vdd g s 0 nhum w=10u l=1u
.model nhum nmos (vto=0.6 kp=90u lambda=0.01 gamma=0.5 phi=0.7)
.end
"""
# The light sensor's two-stage amplifier: a common source driving a second one.
GREENHOUSE_TWO = """greenhouse light sensor, two stages
vdd vdd 0 6
vin g1 0 1.2
rd1 vdd d1 22k
rd2 vdd d2 10k
rs2 s2 0 1.5k
m1 d1 g1 0 0 nfirst w=10u l=2u
m2 d2 d1 s2 0 nsecond w=20u l=2u
.model nfirst nmos (vto=0.65 kp=100u lambda=0.02 gamma=0.3 phi=0.65)
.model nsecond nmos (vto=0.7 kp=120u lambda=0.03 gamma=0.4 phi=0.7)
.end
"""
STAGES = {
    "nmos": (GREENHOUSE_NMOS, ("r1", "r2", "rd", "rs")),
    "pmos": (GREENHOUSE_PMOS, ("rs", "rl")),
    "body": (GREENHOUSE_BODY, ("rs",)),
    "two": (GREENHOUSE_TWO, ("rd1", "rd2", "rs2")),
}
ROWS = 40


def _random_values(circuit, resistors, rows: int, seed: int) -> tuple[BatchValues, list]:
    """Resistors ±20 %, VTO ±0.2 V, KP ±30 %, LAMBDA 0…0.05, temperature −40…125 °C; and the
    rebuilt Circuit of each row (variant functions: each MOSFET here has its own card)."""
    rng = np.random.default_rng(seed)
    resistances = {name: circuit.element(name).value * rng.uniform(0.8, 1.2, rows) for name in resistors}
    parameters = {}
    for element in circuit.elements_of("mosfet"):
        card = circuit.model(element.model)
        parameters[element.name] = {
            "vto": card.params["vto"] + rng.uniform(-0.2, 0.2, rows),
            "kp": card.params["kp"] * rng.uniform(0.7, 1.3, rows),
            "lambda": rng.uniform(0.0, 0.05, rows),
        }
    temperature = rng.uniform(-40.0, 125.0, rows)
    values = BatchValues(rows, resistors=resistances, parameters=parameters, temperature=temperature)
    circuits = []
    for k in range(rows):
        row = with_values(circuit, {name: float(r[k]) for name, r in resistances.items()})
        row = with_model_parameters(row, {
            circuit.element(name).model: {key: float(v[k]) for key, v in params.items()}
            for name, params in parameters.items()
        })  # fmt: skip
        circuits.append(at_temperature(row, float(temperature[k])))
    return values, circuits


def _assert_rows_match(batch, circuits) -> set[str]:
    """Every row's node voltages and drain currents against the scalar solver's, 1e-9 relative;
    returns the regions the rows reached."""
    regions: set[str] = set()
    for k, circuit in enumerate(circuits):
        reference = solve_operating_point(circuit)
        assert batch.solved[k]
        for node, value in reference.node_voltages.items():
            ours = batch.voltage(node)[k]
            assert abs(ours - value) <= 1e-9 * max(abs(ours), abs(value)) + 1e-12, (k, node, ours, value)
        for name, device in reference.devices.items():
            ours = batch.device(name)
            assert abs(ours.id[k] - device.id) <= 1e-9 * abs(device.id) + 1e-15, (k, name)
            if abs(device.vov) > 1e-9 and abs(abs(device.vds) - device.vov) > 1e-9:  # not on an edge
                assert REGIONS[int(ours.region[k])] == device.region
            regions.add(device.region)
        for name, current in reference.branch_currents.items():
            ours = batch.source_current(name)[k]
            assert abs(ours - current) <= 1e-9 * abs(current) + 1e-15, (k, name)
    return regions


@pytest.mark.parametrize("stage", STAGES)
def test_random_batches_match_the_scalar_solver_row_by_row(stage: str) -> None:
    text, resistors = STAGES[stage]
    circuit = parse_netlist(text, f"{stage}.cir")
    values, circuits = _random_values(circuit, resistors, ROWS, seed=len(stage))
    batch = solve_dc_batch(circuit, values)
    _assert_rows_match(batch, circuits)
    assert batch.vectorised.sum() >= ROWS - 2  # the batch, not the fallback, solved them


def test_rows_cross_into_triode_and_cutoff() -> None:
    circuit = parse_netlist(GREENHOUSE_NMOS, "nmos.cir")
    rows = 30
    # The input from 0 V (cut off) through saturation to 5 V (triode), resistors and VTO moved too.
    rng = np.random.default_rng(7)
    values = BatchValues(
        rows,
        sources={"vin": np.linspace(0.0, 5.0, rows)},
        resistors={"rd": 8.2e3 * rng.uniform(0.8, 1.2, rows)},
        parameters={"m1": {"vto": 0.7 + rng.uniform(-0.2, 0.2, rows)}},
    )
    circuits = [
        with_model_parameters(
            with_values(circuit, {"vin": float(values.sources["vin"][k]), "rd": float(values.resistors["rd"][k])}),
            {"nprobe": {"vto": float(values.parameters["m1"]["vto"][k])}},
        )
        for k in range(rows)
    ]
    batch = solve_dc_batch(circuit, values)
    assert _assert_rows_match(batch, circuits) == {"cutoff", "saturation", "triode"}


def test_rows_far_from_the_nominal_start_converge_in_the_batch() -> None:
    # KP from a tenth to ten times the card's, VTO ±0.6 V: most rows start far from their answer.
    circuit = parse_netlist(GREENHOUSE_TWO, "two.cir")
    rows = 50
    rng = np.random.default_rng(3)
    kp = 100e-6 * 10.0 ** rng.uniform(-1.0, 1.0, rows)
    vto = 0.7 + rng.uniform(-0.6, 0.6, rows)
    values = BatchValues(rows, parameters={"m2": {"kp": kp, "vto": vto}})
    batch = solve_dc_batch(circuit, values)
    circuits = [with_model_parameters(circuit, {"nsecond": {"kp": float(kp[k]), "vto": float(vto[k])}})
                for k in range(rows)]  # fmt: skip
    _assert_rows_match(batch, circuits)
    assert batch.vectorised.all()


def test_parameters_of_one_element_leave_another_on_the_same_card_alone() -> None:
    text = GREENHOUSE_TWO.replace("nsecond w=20u", "nfirst w=20u")
    circuit = parse_netlist(text, "shared.cir")
    vto = np.array([0.5, 0.6, 0.8])
    batch = solve_dc_batch(circuit, BatchValues(3, parameters={"M2": {"VT0": vto}}))  # alias and case
    for k in range(3):
        reference = parse_netlist(
            text.replace("m2 d2 d1 s2 0 nfirst", "m2 d2 d1 s2 0 nown").replace(
                ".end", f".model nown nmos (vto={float(vto[k])!r} kp=100u lambda=0.02 gamma=0.3 phi=0.65)\n.end"
            ),
            "own.cir",
        )
        point = solve_operating_point(reference)
        for node, value in point.node_voltages.items():
            assert batch.voltage(node)[k] == pytest.approx(value, rel=1e-9, abs=1e-12)


def test_a_card_with_derived_values_is_rebuilt_per_row() -> None:
    # GAMMA changes the VTO mos1 derives from NSUB and TOX: the row's card, not only its GAMMA.
    text = GREENHOUSE_BODY.replace("(vto=0.6 kp=90u lambda=0.01 gamma=0.5 phi=0.7)", "(tox=20n nsub=2e16 uo=500)")
    circuit = parse_netlist(text, "derived.cir")
    gamma = np.array([0.3, 0.5, 0.7])
    batch = solve_dc_batch(circuit, BatchValues(3, parameters={"m1": {"gamma": gamma}}))
    for k in range(3):
        point = solve_operating_point(with_model_parameters(circuit, {"nhum": {"gamma": float(gamma[k])}}))
        assert batch.voltage("s")[k] == pytest.approx(point.voltage("s"), rel=1e-9)


def test_a_row_without_a_model_is_not_solved_and_the_others_are() -> None:
    circuit = parse_netlist(GREENHOUSE_BODY, "body.cir")
    batch = solve_dc_batch(circuit, BatchValues(3, parameters={"m1": {"phi": np.array([0.7, -0.5, 0.6])}}))
    assert batch.solved.tolist() == [True, False, True]
    assert math.isnan(batch.voltage("s")[1]) and math.isnan(batch.device("m1").id[1])
    assert not batch.vectorised[1]


@pytest.mark.parametrize("values, named", [
    (BatchValues(2, sources={"vnone": [1.0, 2.0]}), "vnone"),
    (BatchValues(2, resistors={"rnone": [1e3, 2e3]}), "rnone"),
    (BatchValues(2, resistors={"vdd": [1e3, 2e3]}), "vdd"),
    (BatchValues(2, parameters={"mnone": {"vto": [0.5, 0.6]}}), "mnone"),
    (BatchValues(2, parameters={"m1": {"vtoo": [0.5, 0.6]}}), "vtoo"),
    (BatchValues(2, sources={"vin": [1.0, 2.0, 3.0]}), "vin"),
])  # fmt: skip
def test_a_name_the_circuit_does_not_have_is_refused(values: BatchValues, named: str) -> None:
    circuit = parse_netlist(GREENHOUSE_NMOS, "nmos.cir")
    with pytest.raises(ValueError, match=named):
        solve_dc_batch(circuit, values)


def test_sweep_started_from_given_points_matches_the_scalar_sweep() -> None:
    circuit = parse_netlist(GREENHOUSE_NMOS, "nmos.cir")
    x = np.linspace(0.0, 5.0, 101)
    reference = solve_dc_sweep(circuit, "vin", x)
    # Starts a volt off every node: far enough that the limited pass has work to do.
    starts = np.array([[p.voltage(node) + 1.0 for node in circuit.nodes()] for p in reference])
    batch = solve_dc_sweep_arrays(circuit, "vin", x, start=starts)
    assert batch.vectorised.all()
    for node in circuit.nodes():
        expected = np.array([p.voltage(node) for p in reference])
        assert np.allclose(batch.voltage(node), expected, rtol=1e-9, atol=1e-12)


def test_temperature_array_form_equals_the_scalar_one() -> None:
    celsius = np.linspace(-40.0, 125.0, 34)
    cards = [
        Level1Model.from_card("nmos", {"vto": 0.7, "kp": 1.1e-4, "gamma": 0.45, "phi": 0.68}),
        Level1Model.from_card("pmos", {"vto": -0.8, "kp": 4e-5, "gamma": 0.55, "phi": 0.7, "tnom": 50.0}),
        Level1Model.from_card("nmos", {"tox": 20e-9, "nsub": 2e16, "uo": 520.0}),
    ]
    for card in cards:
        arrays = at_temperature_arrays(card, celsius)
        for k, t in enumerate(celsius.tolist()):
            scalar = card.at_temperature(t)
            for name in ("kp", "phi", "vto"):
                assert getattr(arrays, name)[k] == pytest.approx(getattr(scalar, name), rel=1e-12, abs=1e-15)
            assert arrays.saturation_current_factor[k] == pytest.approx(scalar.saturation_current_factor, rel=1e-12)


def test_limiting_array_forms_equal_the_scalar_ones() -> None:
    rng = np.random.default_rng(11)
    count = 4000
    new, old = rng.uniform(-8.0, 8.0, count), rng.uniform(-8.0, 8.0, count)
    near = rng.uniform(-0.6, 0.6, count)  # small steps too, where most branches leave the value
    vto = rng.uniform(-1.5, 1.5, count)
    for a, b in ((new, old), (old + near, old)):
        assert np.array_equal(fetlim_arrays(a, b, vto), [fetlim(*v) for v in zip(a, b, vto)])
        positive = np.abs(b)  # limvds as the MOSFET applies it: a non-negative old value
        assert np.array_equal(limvds_arrays(a, positive), [limvds(*v) for v in zip(a, positive)])
        thermal, vcrit = 0.0258, 0.6
        limited, clipped = pnjlim_arrays(a, b, thermal, vcrit)
        expected = [pnjlim(x, y, thermal, vcrit) for x, y in zip(a, b)]
        assert np.allclose(limited, [e[0] for e in expected], rtol=1e-15, atol=0.0)
        assert clipped.tolist() == [e[1] for e in expected]
    # The whole MOSFET limiting, and the rows it may change.
    state = tuple(rng.uniform(-4.0, 4.0, count) for _ in range(5))
    vgs, vds, vbs = (s + rng.uniform(-1.5, 1.5, count) for s in state[:3])
    arrays = limit_arrays(state, vgs, vds, vbs, 0.0258, 0.62, 0.61)
    free = ~needs_limiting(state, vgs, vds, vbs, 0.62, 0.61)
    assert free.any() and not free.all()
    for k in range(count):
        scalar = limit([s[k] for s in state], vgs[k], vds[k], vbs[k], 0.0258, 0.62, 0.61)
        assert [a[k] for a in arrays[:4]] == pytest.approx(scalar[:4], rel=1e-15, abs=1e-15)
        assert bool(arrays[4][k]) == scalar[4]
        if free[k]:  # limiting leaves these rows as they are (but for rounding)
            assert scalar[:3] == pytest.approx((vgs[k], vds[k], vbs[k]), rel=1e-15, abs=1e-15)
            assert not scalar[4]


@needs_ngspice
def test_a_batch_row_at_temperature_matches_ngspice(tmp_path: Path) -> None:
    # reference: ngspice 39 run directly (`ngspice -b`, `.temp`, `.op`) on each row written out
    circuit = parse_netlist(GREENHOUSE_PMOS, "pmos.cir")
    temperature = np.array([-40.0, 85.0, 125.0])
    vto = np.array([-0.75, -0.9, -1.05])
    rl = np.array([6.8e3, 5.6e3, 8.2e3])
    batch = solve_dc_batch(circuit, BatchValues(3, resistors={"rl": rl}, parameters={"m1": {"vto": vto}},
                                                temperature=temperature))  # fmt: skip
    for k in range(3):
        text = (GREENHOUSE_PMOS.replace("rl d 0 6.8k", f"rl d 0 {float(rl[k])!r}")
                .replace("vto=-0.9", f"vto={float(vto[k])!r}")
                .replace(".end", f".temp {float(temperature[k])!r}\n.op\n.end"))  # fmt: skip
        path = tmp_path / f"row{k}.cir"
        path.write_text(text)
        printed = ngspice_batch_op(path)
        for node in ("s", "d"):
            assert batch.voltage(node)[k] == pytest.approx(printed[node], rel=1e-5, abs=1e-6), (k, node)


def test_rows_started_at_cutoff_converge_in_the_batch_thanks_to_limiting() -> None:
    # Every row of an input sweep started from the stage at 0 V input (both devices cut off or
    # nearly): without ngspice's limiting 24 of these 61 rows leave the batch (checked by hand
    # with the limiting switched off); with it, every row converges in the batch.
    circuit = parse_netlist(GREENHOUSE_TWO, "two.cir")
    x = np.linspace(0.0, 3.0, 61)
    off = solve_operating_point(circuit, source_values={"vin": 0.0})
    starts = np.tile([off.voltage(node) for node in circuit.nodes()], (x.size, 1))
    batch = solve_dc_batch(circuit, BatchValues(x.size, sources={"vin": x}), start=starts)
    assert batch.vectorised.all()
    reference = solve_dc_sweep(circuit, "vin", x)
    for node in circuit.nodes():
        expected = np.array([p.voltage(node) for p in reference])
        assert np.allclose(batch.voltage(node), expected, rtol=1e-9, atol=1e-12)


BUNDLED = sorted((Path(__file__).parent.parent / "netlists").glob("*.cir"))


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: p.stem)
def test_bundled_stages_swept_from_the_hand_points_match_the_scalar_sweep(path: Path) -> None:
    circuit = read_netlist(path)
    try:
        source = default_source(circuit)
    except SweepInputError:  # the gate is not driven by a source of its own: sweep the first supply
        source = next(e.name for e in circuit.elements if e.kind == "vsource")
    value = float(circuit.element(source).value or 0.0)
    x = sweep_values(value - 2.0, value + 2.0, points=101)
    hand = HandColumn(circuit, source)
    hand.points = hand.solve_all([float(v) for v in x])
    starts = hand_starts(circuit, hand, x)
    batch = solve_dc_sweep_arrays(circuit, source, x, start=starts)
    reference = solve_dc_sweep(circuit, source, x)
    assert batch.solved.all()
    for node in reference[0].node_voltages:
        expected = np.array([p.voltage(node) for p in reference])
        ours = batch.voltage(node)
        assert np.all(np.abs(ours - expected) <= 1e-9 * np.maximum(np.abs(ours), np.abs(expected)) + 1e-12), node
    for name in reference[0].devices:
        expected = np.array([p.device(name).id for p in reference])
        assert np.all(np.abs(batch.device(name).id - expected) <= 1e-9 * np.abs(expected) + 1e-15), name


# The greenhouse board at night: a cut-off NMOS whose drain hangs from a 10 GΩ leak path, so the
# drain voltage is set by the bulk junctions' saturation current (which grows with temperature).
NIGHT_LEAKAGE = """greenhouse night leakage, cut-off switch
vdd vdd 0 5
vg g 0 0
rleak vdd d 10g
m1 d g 0 0 nswitch w=50u l=1u
.model nswitch nmos (vto=0.8 kp=100u is=1e-14)
.end
"""


def test_junction_saturation_currents_follow_each_rows_temperature() -> None:
    circuit = parse_netlist(NIGHT_LEAKAGE, "night.cir")
    temperature = np.array([-40.0, 27.0, 85.0, 125.0])
    saturation = np.array([1e-14, 3e-14, 1e-14, 2e-14])
    batch = solve_dc_batch(circuit, BatchValues(4, parameters={"m1": {"is": saturation}}, temperature=temperature))
    drains = []
    for k in range(4):
        row = at_temperature(with_model_parameters(circuit, {"nswitch": {"is": float(saturation[k])}}),
                             float(temperature[k]))  # fmt: skip
        expected = solve_operating_point(row).voltage("d")
        assert batch.voltage("d")[k] == pytest.approx(expected, rel=1e-9, abs=1e-12)
        drains.append(expected)
    assert drains[3] < drains[2] < 4.99  # the leakage pulls the drain down more when hot


def test_evaluate_arrays_takes_model_values_per_point() -> None:
    card = Level1Model.from_card("pmos", {"vto": -0.8, "kp": 4e-5, "gamma": 0.5, "phi": 0.7, "lambda": 0.04})
    rng = np.random.default_rng(5)
    count = 200
    vto, kp = -0.8 + rng.uniform(-0.2, 0.2, count), 4e-5 * rng.uniform(0.7, 1.3, count)
    lam = rng.uniform(0.0, 0.05, count)
    models = at_temperature_arrays(replace(card, vto=vto, kp=kp, lambda_=lam), rng.uniform(-40.0, 125.0, count))
    geometry = Level1Geometry(w=20e-6, l=2e-6)
    vd, vg, vs, vb = (rng.uniform(-3.0, 3.0, count) for _ in range(4))
    arrays = evaluate_arrays(models, geometry, vd, vg, vs, vb)
    for k in range(count):
        one = replace(card, vto=float(vto[k]), kp=float(kp[k]), lambda_=float(lam[k]))
        one = one.at_temperature(float(models.temperature_celsius[k]))
        point = evaluate(one, geometry, vd[k], vg[k], vs[k], vb[k])
        assert arrays.drain_current[k] == pytest.approx(point.drain_current, rel=1e-12, abs=1e-18)
        assert arrays.gm[k] == pytest.approx(point.gm, rel=1e-12, abs=1e-18)


def test_rows_with_resistors_far_from_the_cards_values_still_match() -> None:
    # Resistances over twelve decades (a row's elimination pivots then differ from the circuit's
    # own): every row still lands on the scalar solver's operating point, by the batch or not.
    circuit = parse_netlist(GREENHOUSE_PMOS, "pmos.cir")
    rs = np.array([1e-2, 1.0, 2.2e3, 1e6, 1e10])
    rl = np.array([1e10, 6.8e3, 1e-2, 1.0, 1e6])
    batch = solve_dc_batch(circuit, BatchValues(5, resistors={"rs": rs, "rl": rl}))
    circuits = [with_values(circuit, {"rs": float(rs[k]), "rl": float(rl[k])}) for k in range(5)]
    _assert_rows_match(batch, circuits)
