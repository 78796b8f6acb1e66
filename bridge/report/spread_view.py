"""`biasbridge spread`'s output: the rich summary and the `--json` object.

Formatting only: the numbers are bridge.analysis.spread's, ngspice's corner values
bridge.sim.corners', the findings bridge.spread_compare's.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from ..analysis.spread import unmoved_nodes
from ..netlist.numbers import engineering
from ..spread_compare import QUANTITY_UNITS, TITLES
from ..vocabulary import Finding

if TYPE_CHECKING:
    from rich.console import RenderableType

    from ..analysis.spread import Extremes, SpreadResult
    from ..sim.corners import CornerCheck



def no_effect_lines(result: SpreadResult) -> list[str]:
    """Once, the varied quantities that move nothing at DC (left out of the corners' names), and why."""
    lines = []
    if result.no_dc_current:
        several = len(result.no_dc_current) > 1
        lines.append(f"{', '.join(result.no_dc_current)}: no DC effect (no DC current can flow through "
                     f"{'them' if several else 'it'}: by the circuit's connectivity one end of "
                     f"{'each' if several else 'it'} leads only to capacitors or MOSFET gates)")  # fmt: skip
    if result.no_effect:
        lines.append(f"{', '.join(result.no_effect)}: no DC effect here (every value the same, within 1e-9, at "
                     f"either end at every one of the {2 ** len(result.bands):,} corners)")  # fmt: skip
    return lines


def _percent(fraction: float) -> str:
    return f"{100 * fraction:.2f} %"


def _number(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


def _ends_json(result: SpreadResult, row: int) -> dict[str, str] | None:
    """A point searched as a mapping: each band's label → "low", "high" or "nominal"."""
    if row < 0 or result.corners.ends is None:
        return None
    words = {-1: "low", 0: "nominal", 1: "high"}
    return {band.label: words[int(end)] for band, end in zip(result.bands, result.corners.ends[row], strict=True)}


def _extremes_json(extremes: Extremes, sim: tuple[float | None, float | None] | None,
                   result: SpreadResult | None = None) -> dict[str, Any]:  # fmt: skip
    sim_min, sim_max = sim if sim is not None else (None, None)
    ends = {} if result is None else {
        "min_corner_ends": _ends_json(result, extremes.min_row),
        "max_corner_ends": _ends_json(result, extremes.max_row),
    }  # fmt: skip
    return {
        "nominal": _number(extremes.nominal), "min": _number(extremes.min), "max": _number(extremes.max),
        "min_corner": extremes.min_corner or None, "max_corner": extremes.max_corner or None,
        "sim_min": _number(sim_min), "sim_max": _number(sim_max),
        "mean": _number(extremes.mean), "std": _number(extremes.std),
        "p0.1": _number(extremes.p_low), "p99.9": _number(extremes.p_high), **ends,
    }  # fmt: skip


def spread_json(file: str, result: SpreadResult, check: CornerCheck | None,
                findings: tuple[Finding, ...]) -> dict[str, Any]:  # fmt: skip
    """The issue's shape: file, samples, seed, devices, nodes, yield, sensitivity, findings."""
    devices = {
        name: {q: _extremes_json(e, check.devices[name][q] if check else None, result) for q, e in quantities.items()}
        for name, quantities in result.devices.items()
    }
    nodes = {node: _extremes_json(e, check.nodes[node] if check else None, result)
             for node, e in result.nodes.items()}  # fmt: skip
    sensitivity = {name: {s.band: _number(s.delta) for s in rows} for name, rows in result.sensitivity.items()}
    return {
        "file": file, "samples": result.samples, "seed": result.seed, "devices": devices, "nodes": nodes,
        "yield": {"saturation": result.saturation_yield, "margin": result.margin_yield},
        "sensitivity": sensitivity,
        "findings": [{"severity": f.severity, "code": f.code, "message": f.message, "line": f.line,
                      "subject": f.subject} for f in findings],
        "no_dc_effect": {"no_dc_current": list(result.no_dc_current), "no_effect_at_corners": list(result.no_effect)},
    }  # fmt: skip


def spread_renderable(file: str, result: SpreadResult, check: CornerCheck | None,
                      findings: tuple[Finding, ...]) -> RenderableType:  # fmt: skip
    """The summary: the bands, per device and node the nominal value, the extremes with their
    corners and ngspice's values there, the Monte-Carlo statistics, the yields, the sensitivities
    and the findings."""
    from rich.console import Group
    from rich.table import Table
    from rich.text import Text

    parts: list[Any] = [Text(f"{file}: spread over {len(result.bands)} tolerance(s)", style="bold")]
    bands = Table(box=None, pad_edge=False, show_edge=False)
    for heading in ("varied", "nominal", "band", "low", "high"):
        bands.add_column(heading, justify="left" if heading == "varied" else "right")
    for band in result.bands:
        unit = {"resistor": "Ω", "temperature": "°C"}.get(band.kind, "")
        if band.kind == "source":
            unit = "V"
        elif band.parameter == "kp":
            unit = "A/V²"
        elif band.parameter == "lambda":
            unit = "1/V"
        elif band.parameter == "vto":
            unit = "V"
        shown = [f"{v:g} °C" if band.kind == "temperature" else f"{v:.4g} 1/V" if unit == "1/V" else
                 engineering(v, unit) for v in (band.nominal, band.low, band.high)]  # fmt: skip
        bands.add_row(band.label, shown[0], band.text, shown[1], shown[2])
    parts += [bands, Text("")]
    table = Table(box=None, pad_edge=False, show_edge=False, title="corners (level-1, and ngspice at the same corner)",
                  title_justify="left")  # fmt: skip
    for heading in ("", "nominal", "min", "ngspice", "max", "ngspice"):
        table.add_column(heading, justify="left" if not heading else "right")
    sampled = Table(box=None, pad_edge=False, show_edge=False, title=f"Monte Carlo ({result.samples:,} samples)",
                    title_justify="left")  # fmt: skip
    for heading in ("", "mean", "std", "p0.1", "p99.9"):
        sampled.add_column(heading, justify="left" if not heading else "right")
    corners: list[tuple[str, str, str]] = []

    def row(label: str, unit: str, extremes: Extremes, sim: tuple[float | None, float | None] | None) -> None:
        sim_min, sim_max = sim if sim is not None else (None, None)
        table.add_row(label, engineering(extremes.nominal, unit), engineering(extremes.min, unit),
                      engineering(sim_min, unit), engineering(extremes.max, unit), engineering(sim_max, unit))
        sampled.add_row(label, engineering(extremes.mean, unit), engineering(extremes.std, unit),
                        engineering(extremes.p_low, unit), engineering(extremes.p_high, unit))  # fmt: skip
        corners.append((label, extremes.min_named or extremes.min_corner, extremes.max_named or extremes.max_corner))

    for name, quantities in result.devices.items():
        for quantity, extremes in quantities.items():
            sim = check.devices[name][quantity] if check else None
            row(f"{name} {TITLES[quantity]}", QUANTITY_UNITS[quantity], extremes, sim)
    unmoved = unmoved_nodes(result)
    for node, extremes in result.nodes.items():
        if node not in unmoved:
            row(f"V({node})", "V", extremes, check.nodes[node] if check else None)
    parts += [table, Text(""), sampled, Text("")]
    if unmoved:
        listed = ", ".join(f"V({node}) {engineering(result.nodes[node].nominal, 'V')}" for node in unmoved)
        parts += [Text(f"{len(unmoved)} node{'s' if len(unmoved) != 1 else ''} left out of the tables (in --json): "
                       f"{listed}, the same at every corner and sample"), Text("")]  # fmt: skip
    for label, low, high in corners:
        parts.append(Text(f"{label}: min at {low}; max at {high}"))
    parts += [Text(line) for line in no_effect_lines(result)]
    parts.append(Text(""))
    parts.append(Text(f"saturation yield {_percent(result.saturation_yield)} (every MOSFET with vov > 0 and "
                      f"vds ≥ vov); margin yield {_percent(result.margin_yield)} (and vds − vov ≥ "
                      f"{engineering(result.margin_threshold, 'V')})", style="bold"))  # fmt: skip
    for name, rows in result.sensitivity.items():
        moves = ", ".join(f"{s.band} {engineering(s.delta, 'A')}" for s in rows)
        parts.append(Text(f"{name} id moves (each tolerance alone, high end − low end): {moves}"))
    parts.append(Text(""))
    style = {"error": "red", "warning": "yellow", "info": ""}
    for finding in findings:
        colour = style.get(finding.severity, "")
        parts.append(Text(f"{finding.severity} {finding.code}: {finding.message}", style=colour))
    return Group(*parts)
