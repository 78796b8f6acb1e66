"""`biasbridge spread`'s findings: what the corners, the samples and ngspice's corner runs tell
the designer, each at the element's line where an element is the subject. Numbers in, findings
out; the view formats them."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from .netlist.numbers import engineering
from .vocabulary import UNITS, Finding

if TYPE_CHECKING:
    from .analysis.spread import Extremes, SpreadResult
    from .netlist.circuit import Circuit
    from .sim.corners import CornerCheck

QUANTITY_UNITS = {"id": UNITS["id"], "margin": UNITS["sat_margin"]}
CUTOFF = 0  # region code of ask.REGIONS
TITLES = {"id": "id", "margin": "vds − vov"}


def _percent(fraction: float) -> str:
    return f"{100 * fraction:.2f} %"


def _line(circuit: Circuit, name: str) -> int | None:
    element = circuit.element(name)
    return element.origin.line if element is not None else None


def spread_findings(circuit: Circuit, result: SpreadResult, check: CornerCheck | None) -> tuple[Finding, ...]:
    """What the spread tells the designer, in order: how it was searched, the yields, the corners
    that leave saturation, Monte-Carlo samples beyond every corner, what was not solved, and
    ngspice's disagreements at the corners."""
    findings = [
        Finding("info", "spread-corners", f"extremes over {result.corners.count} points: {result.how}"),
        Finding("info", "spread-samples", _samples_text(result)),
    ]
    samples = result.samples
    unsolved = result.unsolved_samples
    besides = f"; {unsolved:,} more have no solution" if unsolved else ""
    if result.saturation_yield < 1.0:
        failing = round((1.0 - result.saturation_yield) * samples) - unsolved
        findings.append(Finding("warning", "saturation-yield", f"{failing:,} of {samples:,} samples "
                                f"({_percent(failing / samples)}) have a MOSFET out of saturation "
                                f"(cutoff or triode){besides}"))  # fmt: skip
    if result.margin_yield < 1.0:
        failing = round((1.0 - result.margin_yield) * samples) - unsolved
        findings.append(Finding("warning", "margin-yield", f"{failing:,} of {samples:,} samples "
                                f"({_percent(failing / samples)}) have a MOSFET out of saturation or with "
                                f"vds − vov below {engineering(result.margin_threshold, 'V')} (lint's "
                                f"saturation-margin threshold){besides}"))  # fmt: skip
    for name, quantities in result.devices.items():
        margin = quantities["margin"]
        if math.isfinite(margin.min) and margin.min < 0.0:
            findings.append(Finding("warning", "corner-triode", f"{name} leaves saturation at a corner: vds − vov = "
                                    f"{engineering(margin.min, 'V')} at {margin.min_named or margin.min_corner}",
                                    _line(circuit, name), name))  # fmt: skip
        cutoff = np.flatnonzero(result.corner_solution.regions[name] == CUTOFF)
        if cutoff.size:
            findings.append(Finding("warning", "corner-cutoff", f"{name} is in cutoff (vov ≤ 0) at {cutoff.size} of "
                                    f"{result.corners.count} points searched, e.g. at "
                                    f"{result.corner_names[int(cutoff[0])]}", _line(circuit, name), name))  # fmt: skip
        for quantity, extremes in quantities.items():
            findings += _inside(f"{name} {TITLES[quantity]}", QUANTITY_UNITS[quantity], extremes, name,
                                _line(circuit, name))
    for node, extremes in result.nodes.items():
        findings += _inside(f"V({node})", "V", extremes, node, None)
    if result.unsolved_corners:
        shown = "; ".join(result.unsolved_corners[:3])
        more = f" and {len(result.unsolved_corners) - 3} more" if len(result.unsolved_corners) > 3 else ""
        findings.append(Finding("error", "corner-unsolved", f"{len(result.unsolved_corners)} corner(s) have no "
                                f"level-1 solution and are left out of the extremes: {shown}{more}"))  # fmt: skip
    if result.unsolved_samples:
        findings.append(Finding("error", "sample-unsolved", f"{result.unsolved_samples:,} samples have no level-1 "
                                "solution: left out of the statistics and counted as failing both yields"))  # fmt: skip
    for caveat in result.caveats:
        findings.append(Finding("info", "solver-caveat", caveat))
    if check is None:
        findings.append(Finding("info", "no-simulator", "ngspice is not available: the corners are not run in it"))
    else:
        findings += check.findings
    return tuple(findings)


def _samples_text(result: SpreadResult) -> str:
    how = ("uniform within each band" if result.distribution == "uniform" else
           "normal with each band as ±3σ around its middle, clipped to the band")  # fmt: skip
    return (f"{result.samples:,} Monte-Carlo samples, {how}, seed {result.seed}; a model's tolerance is one draw per "
            "sample for every MOSFET using that model (one lot)")  # fmt: skip


def _inside(what: str, unit: str, extremes: Extremes, subject: str, line: int | None) -> list[Finding]:
    """A sample beyond every corner searched: the quantity is not monotone in some band (or the
    corners were not all searched), so the corners' extreme is not the worst case."""
    found = []
    scale = max(abs(extremes.min), abs(extremes.max), 1e-15)
    for side, sample, corner in (("below", extremes.sample_min, extremes.min), ("above", extremes.sample_max,
                                                                               extremes.max)):  # fmt: skip
        beyond = sample < corner if side == "below" else sample > corner
        if math.isfinite(sample) and math.isfinite(corner) and beyond and abs(sample - corner) > 1e-9 * scale:
            found.append(Finding("info", "corner-not-worst", f"{what}: a Monte-Carlo sample is {side} every corner "
                                 f"searched ({engineering(sample, unit)} against {engineering(corner, unit)}): its "
                                 "extreme lies inside the bands, not at a corner", line, subject))  # fmt: skip
    return found
