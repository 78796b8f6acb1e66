"""The columns of a transfer curve side by side: how far each lies from the reference, and the
findings that judging them gives (level-1 beyond tolerance of ngspice, a boundary crossed more
than once).

Measures and judges only: the curves come from bridge.analysis.sweep and bridge.sim.transfer,
bridge.sweep_run puts them side by side.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from .compare import SOLVER_FLOOR, SOLVER_RELATIVE
from .curves import BOUNDARIES, Curve
from .netlist.circuit import Circuit
from .records import record
from .vocabulary import Finding


@record(frozen=True)
class Deviation:
    """The largest |column − reference| over the sweep and where it is."""

    volts: float
    at: float


def largest_deviation(x: np.ndarray, curve: Curve | None, reference: Curve | None) -> Deviation | None:
    """The largest |curve − reference| and the input value where it is (None where either is missing)."""
    if curve is None or reference is None:
        return None
    difference = np.abs(curve.output - reference.output)
    if not np.any(np.isfinite(difference)):
        return None
    k = int(np.nanargmax(difference))
    return Deviation(float(difference[k]), float(x[k]))


def curve_deviations(
    x: np.ndarray, hand: Curve | None, level1: Curve | None, sim: Curve | None
) -> tuple[dict[str, Deviation | None], str | None]:
    """Hand against ngspice (level-1 where ngspice gave no curve), level-1 against ngspice; and
    the reference's column name (None when neither ngspice nor level-1 gave a curve)."""
    reference = sim if sim is not None else level1
    reference_name = "sim" if sim is not None else ("level1" if level1 is not None else None)
    deviation = {
        "hand": largest_deviation(x, hand, reference),
        "level1": largest_deviation(x, level1, sim) if sim is not None else None,
    }
    return deviation, reference_name


def solver_differs_finding(
    x: np.ndarray, source: str, output: str, level1: Curve | None, sim: Curve | None
) -> Finding | None:
    """A warning at the point where level-1 lies furthest beyond the solver tolerance of ngspice
    (SOLVER_RELATIVE of the value plus SOLVER_FLOOR), None where it never does."""
    if sim is None or level1 is None:
        return None
    worst = np.abs(level1.output - sim.output) - (SOLVER_RELATIVE * np.abs(sim.output) + SOLVER_FLOOR["V"])
    if not np.any(worst > 0.0):
        return None
    k = int(np.nanargmax(worst))
    return Finding("warning", "solver-differs", f"V({output}): level-1 solver {level1.output[k]:.6g} V vs ngspice "
                   f"{sim.output[k]:.6g} V at {source} = {x[k]:.6g} (beyond 0.2 % + 1 mV)")  # fmt: skip


def several_crossings_findings(curves: Mapping[str, Curve | None], circuit: Circuit) -> list[Finding]:
    """A note for each device and column where a boundary is crossed more than once: only the
    first crossing is reported as the edge."""
    findings: list[Finding] = []
    for column, curve in curves.items():
        for name, edges in (curve.edges.items() if curve is not None else ()):
            for boundary in BOUNDARIES:
                count = sum(c.boundary == boundary for c in edges.crossings)
                if count > 1:
                    element = circuit.element(name)
                    findings.append(
                        Finding("info", "several-crossings", f"{name} crosses the {boundary.replace('_', '–')} "
                                f"boundary {count} times in the {column} column; the first is reported",
                                element.origin.line if element is not None else None, name)
                    )
    return findings
