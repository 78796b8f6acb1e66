"""The worst corners of `spread` proved in ngspice: each extreme's corner as a Circuit variant
(``netlist/variant.py``), emitted and run `.op` through the worker as `check` runs it, its value
read beside the level-1 one.

A corner's circuit: the varied resistors and sources at the corner's values (a resistor's TC1/TC2
stay on its card, and ngspice applies them at the corner's temperature), the model cards' VTO, KP
and LAMBDA set, and `.temp` at the corner's temperature when temperature is varied.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import field

from ..analysis.spread import Band, SpreadResult
from ..netlist.circuit import Circuit
from ..netlist.numbers import engineering
from ..netlist.variant import at_temperature, with_model_parameters, with_values
from ..records import record
from ..vocabulary import Finding, simulator_failure
from .client import NgspiceSession, SimulatorError
from .operating_point import SimOperatingPoint, submit_operating_point

AGREEMENT = 0.005  # relative: level-1 and ngspice at a corner beyond 0.5 % is a finding
FLOORS = {"id": 1e-12, "margin": 1e-3, "node": 1e-3}  # A, V, V: differences below these are not judged
# ngspice's GMIN across each junction carries GMIN·V of leakage that the level-1 drain current (the
# channel's) leaves out: a device in cutoff shows only that (as `check` judges it: ABSTOL plus GMIN
# times the drain-to-bulk voltage, here bounded by the largest node voltage of the corner).
GMIN = 1e-12


def corner_circuit(circuit: Circuit, bands: Sequence[Band], values: Sequence[float]) -> Circuit:
    """`circuit` with every band at its value in `values` (band order)."""
    elements = {band.target: float(value) for band, value in zip(bands, values, strict=True)
                if band.kind in ("resistor", "source")}  # fmt: skip
    parameters: dict[str, dict[str, float]] = {}
    temperature = None
    for band, value in zip(bands, values, strict=True):
        if band.kind == "model":
            assert band.parameter is not None
            parameters.setdefault(band.target, {})[band.parameter] = float(value)
        elif band.kind == "temperature":
            temperature = float(value)
    varied = with_values(circuit, elements) if elements else circuit
    if parameters:
        varied = with_model_parameters(varied, parameters)
    if temperature is not None:
        varied = at_temperature(varied, temperature)
    return varied


@record(frozen=True)
class CornerCheck:
    """ngspice's values at the extremes' corners: ``devices[name][quantity]`` and ``nodes[node]``
    are (sim at the min corner, sim at the max corner), None where ngspice gave none."""

    devices: dict[str, dict[str, tuple[float | None, float | None]]] = field(default_factory=dict)
    nodes: dict[str, tuple[float | None, float | None]] = field(default_factory=dict)
    runs: int = 0
    findings: tuple[Finding, ...] = ()


def prove_corners(
    session: NgspiceSession, circuit: Circuit, result: SpreadResult, timeout: float = 10.0
) -> CornerCheck:
    """Run each extreme's corner in ngspice (each distinct corner once, all sent before any is read)."""
    rows: dict[int, None] = {}
    for quantities in result.devices.values():
        for extremes in quantities.values():
            rows.update({extremes.min_row: None, extremes.max_row: None})
    for extremes in result.nodes.values():
        rows.update({extremes.min_row: None, extremes.max_row: None})
    rows.pop(-1, None)
    pending = {}
    failures: dict[int, Finding] = {}
    for row in rows:
        variant = corner_circuit(circuit, result.bands, result.corners.values[row])
        try:
            pending[row] = submit_operating_point(session, variant, timeout=timeout)
        except SimulatorError as exc:
            failures[row] = simulator_failure(exc)
    answers: dict[int, SimOperatingPoint] = {}
    for row, run in pending.items():
        try:
            answers[row] = run.result()
        except SimulatorError as exc:
            failures[row] = simulator_failure(exc)
    findings: list[Finding] = []
    for row, failure in failures.items():
        findings.append(Finding(failure.severity, failure.code,
                                f"corner {result.corner_names[row]}: {failure.message}", None, None))  # fmt: skip

    def sim_value(row: int, device: str | None, quantity: str) -> float | None:
        answer = answers.get(row)
        if answer is None:
            return None
        if device is None:
            return answer.node_voltages.get(quantity)
        sim = next((d for name, d in answer.devices.items() if name.lower() == device.lower()), None)
        if sim is None:
            return None
        if quantity == "id":
            return sim.id
        if sim.vds is None or sim.vov is None:
            return None
        return sim.vds - sim.vov

    def judged(subject: str, what: str, unit: str, floor: float, level1: float, sim: float | None,
               corner: str) -> None:  # fmt: skip
        if sim is None or not math.isfinite(level1):
            return
        difference = level1 - sim
        if abs(difference) <= max(AGREEMENT * abs(sim), floor):
            return
        relative = f" ({100 * difference / abs(sim):+.2f} %)" if sim != 0.0 else ""
        findings.append(Finding(
            "warning", "corner-differs",
            f"{what} at its corner ({corner}): level-1 {engineering(level1, unit)}, ngspice "
            f"{engineering(sim, unit)}{relative}, beyond {100 * AGREEMENT:g} %", None, subject,
        ))  # fmt: skip

    devices: dict[str, dict[str, tuple[float | None, float | None]]] = {}
    for name, quantities in result.devices.items():
        devices[name] = {}
        for quantity, extremes in quantities.items():
            low = sim_value(extremes.min_row, name, quantity) if extremes.min_row >= 0 else None
            high = sim_value(extremes.max_row, name, quantity) if extremes.max_row >= 0 else None
            devices[name][quantity] = (low, high)
            unit = "A" if quantity == "id" else "V"
            label = f"{name} {'id' if quantity == 'id' else 'saturation margin'}"
            for side, value, sim, row, corner in (("minimum", extremes.min, low, extremes.min_row,
                                                   extremes.min_named or extremes.min_corner),
                                                  ("maximum", extremes.max, high, extremes.max_row,
                                                   extremes.max_named or extremes.max_corner)):  # fmt: skip
                floor = FLOORS[quantity]
                if quantity == "id" and row in answers:
                    floor += GMIN * max(abs(v) for v in answers[row].node_voltages.values())
                judged(name, f"{label} {side}", unit, floor, value, sim, corner)
    nodes: dict[str, tuple[float | None, float | None]] = {}
    for node, extremes in result.nodes.items():
        low = sim_value(extremes.min_row, None, node) if extremes.min_row >= 0 else None
        high = sim_value(extremes.max_row, None, node) if extremes.max_row >= 0 else None
        nodes[node] = (low, high)
        judged(node, f"V({node}) minimum", "V", FLOORS["node"], extremes.min, low,
               extremes.min_named or extremes.min_corner)
        judged(node, f"V({node}) maximum", "V", FLOORS["node"], extremes.max, high,
               extremes.max_named or extremes.max_corner)
    return CornerCheck(devices, nodes, len(rows), tuple(findings))
