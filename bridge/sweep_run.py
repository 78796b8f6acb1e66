"""One netlist's sweep: runs the hand, level-1 and ngspice columns of the transfer curve, compares
them and assembles the result — the sweep's driver, as ``check.py`` is the check's.

    transfer_curve(circuit, source, output, values, session) -> TransferCurve

The columns are computed where they belong: hand and level-1 in ``bridge.analysis.sweep``
(numbers only), ngspice's ``.dc`` runs in ``bridge.sim.transfer``; the deviations and the
findings of judging them in ``bridge.curve_compare``. Nothing here reads files or prints.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import field

import numpy as np

from .analysis import sweep as own_columns
from .analysis.hand_edges import ClosedFormEdges, HandGainFormula
from .curve_compare import Deviation, curve_deviations, several_crossings_findings, solver_differs_finding
from .curves import BOUNDARIES, Curve, GateBias, SweepInputError, grid_step, independent_source
from .netlist.circuit import Circuit
from .netlist.source import NOTICE_SEVERITY, notice_in
from .records import record
from .sim.client import NgspiceSession, SimulatorError
from .sim.transfer import SIM_EDGE_METHOD, SIM_GAIN_METHOD, sim_curve
from .vocabulary import Finding, not_level1_finding, simulator_failure

__all__ = ["BOUNDARIES", "EDGE_METHODS", "GAIN_METHODS", "TransferCurve", "transfer_curve"]

EDGE_METHODS = {**own_columns.EDGE_METHODS, "sim": SIM_EDGE_METHOD}
GAIN_METHODS = {**own_columns.GAIN_METHODS, "sim": SIM_GAIN_METHOD}


@record(frozen=True)
class TransferCurve:
    file: str
    title: str
    source: str
    source_unit: str
    output: str
    x: np.ndarray
    step: float
    bias: float
    devices: tuple[str, ...]
    curves: dict[str, Curve | None]
    simulator: tuple[str, str] | None
    deviation: dict[str, Deviation | None]
    deviation_reference: str | None
    closed_form: dict[str, ClosedFormEdges] = field(default_factory=dict)
    hand_gain: HandGainFormula | None = None
    findings: tuple[Finding, ...] = ()
    gate_bias: GateBias | None = None  # the source created at the gate, when the sweep swept one

    @property
    def agree(self) -> bool:
        """No error or warning: every column solved and level-1 matches ngspice."""
        return not any(f.severity in {"error", "warning"} for f in self.findings)


def transfer_curve(
    circuit: Circuit,
    source: str,
    output: str,
    values: Sequence[float] | np.ndarray,
    session: NgspiceSession | None = None,
    *,
    sim_timeout: float = 10.0,
    unavailable_hint: str | None = None,
    gate_bias: GateBias | None = None,
) -> TransferCurve:
    """Sweep `source` through `values` and follow V(`output`) in the three columns.

    Raises SweepInputError for an unknown source or node; a column that cannot be computed is
    None, with a finding that says why. With `gate_bias` (from gate_bias_source), `circuit` must
    be its circuit: the result then says which source was created and why.
    """
    element = independent_source(circuit, source)
    output = own_columns.output_node(circuit, output)
    x = np.asarray(values, dtype=float)
    if x.ndim != 1 or len(x) == 0:
        raise SweepInputError("the sweep has no points")
    devices = tuple(e.name for e in circuit.elements_of("mosfet"))
    bias = float(element.value or 0.0)
    findings: list[Finding] = [Finding(NOTICE_SEVERITY, n.code, *notice_in(n, circuit.source_file))
                               for n in circuit.notices]

    other_levels = circuit.other_level_mosfets()
    hand: Curve | None = None
    level1: Curve | None = None
    if other_levels:
        findings.append(not_level1_finding(other_levels))
    else:
        hand, hand_findings, hand_model_at = own_columns.hand_curve(circuit, element.name, output, x, bias, devices)
        findings += hand_findings
        starts = own_columns.hand_starts(circuit, hand_model_at, x)  # each level-1 point from its hand point
        level1, level1_findings = own_columns.level1_curve(circuit, element.name, output, x, bias, devices, starts)
        findings += level1_findings

    sim: Curve | None = None
    simulator: tuple[str, str] | None = None
    if session is None:
        findings.append(Finding("info", "no-simulator", unavailable_hint or "ngspice not available"))
    else:
        try:
            simulator = ("ngspice", session.version)
        except SimulatorError as exc:
            findings.append(simulator_failure(exc))
        else:
            sim, sim_findings = sim_curve(circuit, session, element.name, output, x, bias, devices, sim_timeout)
            findings += sim_findings

    deviation, reference_name = curve_deviations(x, hand, level1, sim)
    differs = solver_differs_finding(x, element.name, output, level1, sim)
    if differs is not None:
        findings.append(differs)
    findings += several_crossings_findings({"hand": hand, "level1": level1, "sim": sim}, circuit)

    closed: dict[str, ClosedFormEdges] = {}
    hand_gain: HandGainFormula | None = None
    if hand is not None:
        form, gain = own_columns.hand_closed_forms(circuit, element.name, hand_model_at, x, output, bias)
        if form is not None:
            closed[form.device] = form
            hand_gain = gain
    return TransferCurve(
        file=circuit.source_file,
        title=circuit.title,
        source=element.name,
        source_unit="V" if element.kind == "vsource" else "A",
        output=output,
        x=x,
        step=grid_step(x),
        bias=bias,
        devices=devices,
        curves={"hand": hand, "level1": level1, "sim": sim},
        simulator=simulator,
        deviation=deviation,
        deviation_reference=reference_name,
        closed_form=closed,
        hand_gain=hand_gain,
        findings=tuple(findings),
        gate_bias=gate_bias,
    )
