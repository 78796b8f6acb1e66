"""How `biasbridge sweep` shows its result: a rich summary table, one JSON object, or CSV rows.

Formatting only: every number here was computed by the sweep (bridge.sweep_run).
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ..netlist.numbers import engineering
from ..sweep_run import BOUNDARIES, GAIN_METHODS, TransferCurve
from ..vocabulary import COLUMN_TITLES, COLUMNS, Step

if TYPE_CHECKING:  # rich is imported where a table is drawn: `sweep --json` and `--csv` do not load it
    from rich.console import Group
    from rich.text import Text

BOUNDARY_TITLES = {"cutoff_saturation": "cutoff ↔ saturation", "saturation_triode": "saturation ↔ triode"}
SEVERITY_STYLE = {"error": "bold red", "warning": "yellow", "info": "dim"}
# The summary table shows every number of a column with one number of decimals: DECIMALS, or
# fewer in a column whose stated accuracy does not support them.
DECIMALS = 4
_PREFIXES = ((1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"), (1e-12, "p"))


def column_decimals(accuracies: Sequence[float | None]) -> int:
    """The decimals a column can show: DECIMALS, fewer when its worst stated accuracy exceeds half
    the last digit."""
    worst = max((a for a in accuracies if a is not None and math.isfinite(a)), default=0.0)
    decimals = DECIMALS
    while decimals > 0 and worst > 0.5 * 10.0**-decimals:
        decimals -= 1
    return decimals


def shown_accuracy(accuracy: float, decimals: int) -> float:
    """The ± of a value rounded to `decimals`: its stated accuracy plus the rounding, rounded up to the last digit."""
    unit = 10.0**-decimals
    return math.ceil((accuracy + 0.5 * unit) / unit * (1.0 - 1e-12)) * unit


def _scale(values: Sequence[float], unit: str) -> tuple[float, str]:
    """The SI prefix for a row of values in `unit` (volts stay volts from 1 V up to the kV a stage never sees)."""
    largest = max((abs(v) for v in values if math.isfinite(v)), default=0.0)
    for factor, prefix in _PREFIXES:
        if largest >= factor:
            return factor, f"{prefix}{unit}"
    return _PREFIXES[-1][0], f"{_PREFIXES[-1][1]}{unit}"


def _finite(value: float | None) -> float | None:
    """JSON has no infinity or NaN: such a value is null."""
    return float(value) if value is not None and math.isfinite(value) else None


def _numbers(values: np.ndarray | None) -> list[float | None] | None:
    return None if values is None else [_finite(float(v)) for v in values]


def _quantity(value: float | None, unit: str) -> Text:
    from rich.text import Text

    if value is None or not math.isfinite(value):
        return Text("—", style="dim")
    return Text(engineering(value, unit, digits=6))


def _gain(value: float | None) -> Text:
    from rich.text import Text

    if value is None or not math.isfinite(value):
        return Text("—", style="dim")
    return Text(f"{value:.5g}")


def _sweep_line(result: TransferCurve) -> str:
    unit = result.source_unit
    x = result.x
    step = f", step {engineering(result.step, unit)}" if len(x) > 1 else ""
    return (
        f"sweep {result.source} {engineering(float(x[0]), unit)} → {engineering(float(x[-1]), unit)}, "
        f"{len(x)} points{step}; output V({result.output}); bias {result.source} = {engineering(result.bias, unit)}"
    )


def _dim(text: str = "—") -> Text:
    from rich.text import Text

    return Text(text, style="dim")


def _steps(title: str, steps: Sequence[Step]) -> list[Text]:
    from rich.text import Text

    lines = [Text(title, style="bold")]
    for number, step in enumerate(steps, start=1):
        lines.append(Text(f"  {number:>2}. {step.text}"))
        if step.equation:
            lines.append(Text(f"      {step.equation}", style="cyan"))
    return lines


def sweep_renderable(result: TransferCurve, steps: bool = False) -> Group:
    """The summary: deviations, region edges, gains; with `steps` the closed-form working."""
    from rich.console import Group
    from rich.text import Text

    from .table_layout import Cell, Table  # laid out as rich's Table, without its machinery

    simulator = f"{result.simulator[0]} {result.simulator[1]}" if result.simulator else "no simulator"
    header = Text.assemble((f"{result.file}", "bold"), f": {result.title}\n", _sweep_line(result),
                           f"\nsimulator: {simulator}")  # fmt: skip
    if result.gate_bias is not None:
        header.append(f"\n{result.gate_bias.explanation()}", style="yellow")
    curves = result.curves
    x_unit = result.source_unit
    table = Table(("quantity", *(COLUMN_TITLES[column] for column in COLUMNS)))
    empty: Cell = ("", "")

    def row(label: str, cells: list[Cell]) -> None:
        table.add_row([(label, ""), *cells])

    def dim(text: str = "—") -> Cell:
        return (text, "dim")

    x_factor, x_label = _scale([float(v) for v in result.x], x_unit)
    gain_unit = "V/V" if x_unit == "V" else "V/A"
    # Each column's decimals: the stated accuracies of its numbers (in the units shown) decide.
    stated: dict[str, list[float | None]] = {column: [] for column in COLUMNS}
    for column in COLUMNS:
        curve = curves[column]
        if curve is None:
            continue
        stated[column].append(curve.gain_accuracy)
        for edges in curve.edges.values():
            stated[column] += [
                (a / x_factor if (a := edges.accuracy(b)) is not None else None) for b in BOUNDARIES
            ]
    decimals = {column: column_decimals(stated[column]) for column in COLUMNS}

    def number(column: str, value: float | None, factor: float = 1.0, accuracy: float | None = None) -> Cell:
        if value is None or not math.isfinite(value):
            return dim()
        places = decimals[column]
        text = f"{value / factor:.{places}f}"
        if accuracy is not None and math.isfinite(accuracy):
            text += f" ± {shown_accuracy(accuracy / factor, places):.{places}f}"
        return (text, "")

    reference = result.deviation_reference
    found = [result.deviation.get(c) if c != reference else None for c in COLUMNS]
    row(f"max |ΔV({result.output})| vs {COLUMN_TITLES.get(reference or '', '—')} (mV)",
        [number(c, d.volts, 1e-3) if d else dim() for c, d in zip(COLUMNS, found)])  # fmt: skip
    row(f"  at {result.source} ({x_label})",
        [number(c, d.at, x_factor) if d else dim() for c, d in zip(COLUMNS, found)])  # fmt: skip

    for device in result.devices:
        table.add_section()
        for boundary in BOUNDARIES:
            cells = []
            for column in COLUMNS:
                curve = curves[column]
                edges = curve.edges.get(device) if curve is not None else None
                if edges is None:
                    cells.append(dim())
                elif edges.get(boundary) is None:
                    cells.append(dim("never"))
                else:
                    cells.append(number(column, edges.get(boundary), x_factor, edges.accuracy(boundary)))
            row(f"{device} {BOUNDARY_TITLES[boundary]} ({x_label})", cells)
            closed = result.closed_form.get(device)
            if closed is not None:
                row("  closed form", [number("hand", getattr(closed, boundary), x_factor), empty, empty])

    table.add_section()
    row(f"gain at the bias point ({gain_unit})",
        [number(c, curves[c].gain_at_bias, 1.0, curves[c].gain_accuracy) if curves[c] else dim()
         for c in COLUMNS])  # fmt: skip
    if result.hand_gain is not None:
        row("  hand −gm·(RD ∥ ro)·dVG/dVin", [number("hand", result.hand_gain.value), empty, empty])
    peaks = [curves[c].largest_gain if curves[c] else None for c in COLUMNS]
    row(f"largest |gain| on the grid ({gain_unit})",
        [number(c, abs(p.gain)) if p else dim() for c, p in zip(COLUMNS, peaks)])  # fmt: skip
    row(f"  at {result.source} ({x_label})",
        [number(c, p.at, x_factor) if p else dim() for c, p in zip(COLUMNS, peaks)])  # fmt: skip

    parts: list[Any] = [header, table]
    parts += [_dim(f"{COLUMN_TITLES[c]} edges: {curves[c].edge_method}") for c in COLUMNS if curves[c] is not None]
    parts += [_dim(f"{COLUMN_TITLES[c]} gain: {GAIN_METHODS[c]}") for c in COLUMNS if curves[c] is not None]
    if any(curves[c] is not None for c in COLUMNS):
        parts.append(_dim("± is the stated accuracy plus the rounding shown; the largest |gain| is read from the "
                          "sweep's grid (np.gradient) at a grid point"))  # fmt: skip
    if result.hand_gain is not None:
        gain = result.hand_gain
        ro = "ro = ∞ (λ = 0), so it is −gm·RD·dVG/dVin" if math.isinf(gain.ro) else (
            f"ro = 1/gds = {engineering(gain.ro, 'Ω')} ({gain.region})")
        parts.append(_dim(f"hand small-signal gain −gm·(RD ∥ ro)·dVG/dVin: {ro}"))
    if steps:
        for device, closed in result.closed_form.items():
            parts += _steps(f"{device}: region edges in closed form (resistor-loaded common source)", closed.steps)
        if result.hand_gain is not None:
            parts += _steps("Hand small-signal gain", result.hand_gain.steps)
        if not result.closed_form:
            parts.append(_dim("No closed form for these edges (it covers one MOSFET with its source on a rail and "
                              "one drain resistor, swept at the gate): they were found by root-finding"))  # fmt: skip
    for finding in result.findings:
        where = f"line {finding.line}: " if finding.line else ""
        parts.append(Text(f"{finding.severity}: {where}{finding.message} [{finding.code}]",
                          style=SEVERITY_STYLE.get(finding.severity, "")))  # fmt: skip
    solved = [COLUMN_TITLES[column] for column in ("hand", "level1", "sim") if curves[column] is not None]
    missing = [COLUMN_TITLES[column] for column in ("hand", "level1", "sim") if curves[column] is None]
    if not result.agree:
        verdict = "problems flagged above"
    elif not solved:
        verdict = "no column could be solved"
    elif len(solved) == 1:
        verdict = f"only the {solved[0]} column solved; nothing to compare it with"
    else:
        verdict = (
            "every column solved" if not missing
            else f"{' and '.join(solved)} solved; no {' or '.join(missing)} column"
        )
        if curves["sim"] is not None and curves["level1"] is not None:
            verdict += "; level-1 and ngspice agree"
    parts.append(Text(f"→ {verdict}", style="bold green" if result.agree else "bold red"))
    return Group(*parts)


def _json_safe(value: Any) -> Any:
    """Every NaN or infinity, however deep, as null: JSON has neither."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {key: _json_safe(item) for key, item in value.items()}
    if isinstance(value, list):
        return [_json_safe(item) for item in value]
    return value


def sweep_json(result: TransferCurve) -> dict[str, Any]:
    """The `sweep --json` object: every number finite or null."""
    return _json_safe(_sweep_document(result))


def _sweep_document(result: TransferCurve) -> dict[str, Any]:
    curves = result.curves

    def per_column(get) -> dict[str, Any]:
        return {column: (get(curves[column]) if curves[column] is not None else None) for column in COLUMNS}

    boundaries: dict[str, Any] = {}
    edge_accuracy: dict[str, Any] = {}
    regions: dict[str, Any] = {}
    for device in result.devices:
        boundaries[device] = per_column(
            lambda curve, device=device: (
                {b: _finite(curve.edges[device].get(b)) for b in BOUNDARIES} if device in curve.edges else None
            )
        )
        edge_accuracy[device] = per_column(
            lambda curve, device=device: (
                {b: _finite(curve.edges[device].accuracy(b)) for b in BOUNDARIES} if device in curve.edges else None
            )
        )
        regions[device] = per_column(
            lambda curve, device=device: list(curve.regions[device]) if device in curve.regions else None
        )
    hand_gain = result.hand_gain
    gain = {
        "bias": _finite(result.bias),
        **per_column(lambda curve: _finite(curve.gain_at_bias)),
        "accuracy": per_column(lambda curve: _finite(curve.gain_accuracy)),
        "methods": per_column(lambda curve: GAIN_METHODS[curve.column]),
        "largest": per_column(
            lambda curve: {"gain": curve.largest_gain.gain, "magnitude": abs(curve.largest_gain.gain),
                           "at": curve.largest_gain.at} if curve.largest_gain else None
        ),
        "hand_small_signal": None
        if hand_gain is None
        else {
            "value": hand_gain.value,
            "formula": hand_gain.formula,
            "gm": hand_gain.gm,
            "ro": _finite(hand_gain.ro),
            "drain_resistance": hand_gain.drain_resistance,
            "gate_ratio": hand_gain.gate_ratio,
            "region": hand_gain.region,
        },
    }
    return {
        "file": result.file,
        "title": result.title,
        "source": result.source,
        "unit": result.source_unit,
        "output": result.output,
        "step": _finite(result.step),
        "x": _numbers(result.x),
        **{column: (_numbers(curves[column].output) if curves[column] is not None else None) for column in COLUMNS},
        "regions": regions,
        "boundaries": boundaries,
        "boundary_accuracy": edge_accuracy,
        "edge_methods": per_column(lambda curve: curve.edge_method),
        "closed_form": {
            device: {
                "cutoff_saturation": _finite(closed.cutoff_saturation),
                "saturation_triode": _finite(closed.saturation_triode),
                "gate_ratio": closed.gate_ratio,
                "gate_offset": closed.gate_offset,
                "drain_resistor": closed.drain_resistor,
                "steps": [str(step) for step in closed.steps],
            }
            for device, closed in result.closed_form.items()
        },
        "gain": gain,
        "gate_bias": _gate_bias_document(result),
        "deviation": {
            "reference": result.deviation_reference,
            **{
                column: ({"volts": found.volts, "at": found.at} if (found := result.deviation.get(column)) else None)
                for column in ("hand", "level1")
            },
        },
        "simulator": {"name": result.simulator[0], "version": result.simulator[1]} if result.simulator else None,
        "findings": [
            {"severity": f.severity, "code": f.code, "message": f.message, "line": f.line, "subject": f.subject}
            for f in result.findings
        ],
        "agree": result.agree,
    }


def _gate_bias_document(result: TransferCurve) -> dict[str, Any] | None:
    """The source created at a capacitor-coupled gate, or None when the netlist's own source was swept."""
    bias = result.gate_bias
    if bias is None:
        return None
    return {
        "source": bias.source, "node": bias.gate, "device": bias.device,
        "thevenin_voltage": bias.thevenin_voltage, "thevenin_resistance": bias.thevenin_resistance,
        "replaces": list(bias.divider), "rails": list(bias.rails), "coupling": list(bias.coupling),
        "explanation": bias.explanation(),
    }  # fmt: skip


def _cell(value: float | None) -> str:
    return "" if value is None or not math.isfinite(value) else repr(float(value))


def sweep_csv(result: TransferCurve) -> str:
    """One row per point: x, the three outputs, then each transistor's region in each column.

    The header names the swept source, the node, the column and the unit: `VIN (V)`,
    `V(d) hand (V)`, …, `M1 region ngspice`.
    """
    curves = result.curves
    header: list[str] = [f"{result.source} ({result.source_unit})"]
    header += [f"V({result.output}) {COLUMN_TITLES[column]} (V)" for column in COLUMNS]
    region_columns: list[tuple[str, str]] = [(device, column) for device in result.devices for column in COLUMNS]
    header += [f"{device} region {COLUMN_TITLES[column]}" for device, column in region_columns]
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    for k, x in enumerate(result.x):
        row: list[str] = [_cell(float(x))]
        for column in COLUMNS:
            curve = curves[column]
            row.append(_cell(float(curve.output[k])) if curve is not None else "")
        for device, column in region_columns:
            curve = curves[column]
            regions: Sequence[str | None] = curve.regions.get(device, ()) if curve is not None else ()
            row.append((regions[k] or "") if k < len(regions) else "")
        writer.writerow(row)
    return buffer.getvalue()
