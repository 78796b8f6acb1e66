"""How `biasbridge check` shows its result: a rich table per netlist, or one JSON line.

Formatting only. Disagreeing cells carry a `!` as well as a colour, so the table reads
the same with colour off (NO_COLOR, a pipe).
"""

from __future__ import annotations

import math
from typing import Any

from rich.console import Group
from rich.table import Table
from rich.text import Text

from ..compare import COLUMNS, UNITS, CheckResult, Columns
from ..netlist.numbers import engineering

SEVERITY_STYLE = {"error": "bold red", "warning": "yellow", "info": "dim"}
COLUMN_TITLES = {"hand": "hand", "level1": "level-1", "sim": "ngspice", "expect": "expected"}


def _cell(value: float | None, unit: str, flagged: bool) -> Text:
    if value is None:
        return Text("—", style="dim")
    text = engineering(value, unit)
    return Text(text + (" !" if flagged else "  "), style="red" if flagged else "green")


def _row(label: str, columns: Columns, unit: str, shown: tuple[str, ...]) -> list[Text]:
    cells = [Text(label)]
    for column in shown:
        cells.append(_cell(columns.get(column), unit, column in columns.flagged))
    return cells


def check_renderable(result: CheckResult, steps: bool = False) -> Group:
    shown = COLUMNS + (("expect",) if result.has_expect else ())
    simulator = f"{result.simulator[0]} {result.simulator[1]}" if result.simulator else "no simulator"
    header = Text.assemble(
        (f"{result.file}", "bold"), f": {result.title}\n",
        f"topology: {result.topology}" + ("" if result.closed_form else " (no closed form: solved numerically)"),
        f"   simulator: {simulator}",
    )
    table = Table(show_lines=False, title_justify="left")
    table.add_column("quantity")
    for column in shown:
        table.add_column(COLUMN_TITLES[column], justify="right")
    for node, columns in result.nodes.items():
        table.add_row(*_row(f"V({node})", columns, "V", shown))
    for device in result.devices.values():
        table.add_section()
        region_cells = [Text(f"{device.name} region ({device.type})")]
        reference = device.region.get("sim") or device.region.get("level1")
        for column in shown:
            value = device.expect_region if column == "expect" else device.region.get(column)
            differs = value is not None and reference is not None and value != reference
            region_cells.append(
                Text((value or "—") + (" !" if differs else "  "), style="red" if differs else "green")
            )
        table.add_row(*region_cells)
        for quantity, columns in device.quantities.items():
            table.add_row(*_row(f"{device.name} {quantity}", columns, UNITS[quantity], shown))
    parts: list[Any] = [header, table]
    if steps and result.steps:
        parts.append(Text("Hand analysis, step by step:", style="bold"))
        for number, step in enumerate(result.steps, start=1):
            parts.append(Text(f"  {number:>2}. {step.text}"))
            if step.equation:
                parts.append(Text(f"      {step.equation}", style="cyan"))
    for finding in result.findings:
        where = f"line {finding.line}: " if finding.line else ""
        parts.append(Text(f"{finding.severity}: {where}{finding.message} [{finding.code}]",
                          style=SEVERITY_STYLE.get(finding.severity, "")))
    verdict = "all three agree within tolerance" if result.agree else "disagreement flagged"
    parts.append(Text(f"→ {verdict}", style="bold green" if result.agree else "bold red"))
    return Group(*parts)


def _finite(value: float | None) -> float | None:
    """JSON has no infinity or NaN: such a value is reported as null."""
    return value if value is not None and math.isfinite(value) else None


def _triple(columns: Columns, with_expect: bool) -> dict[str, float | None]:
    values = {"hand": _finite(columns.hand), "level1": _finite(columns.level1), "sim": _finite(columns.sim)}
    if with_expect:
        values["expect"] = _finite(columns.expect)
    return values


def check_json(result: CheckResult) -> dict[str, Any]:
    """The `check --json` object (one per netlist, one per line)."""
    with_expect = result.has_expect
    devices: dict[str, Any] = {}
    for device in result.devices.values():
        entry: dict[str, Any] = {"type": device.type, "model": device.model, "region": dict(device.region)}
        if with_expect:
            entry["region"]["expect"] = device.expect_region
        for quantity, columns in device.quantities.items():
            entry[quantity] = _triple(columns, with_expect)
        entry["attribution"] = {effect: _finite(change) for effect, change in device.attribution.items()}
        devices[device.name] = entry
    return {
        "file": result.file,
        "title": result.title,
        "simulator": {"name": result.simulator[0], "version": result.simulator[1]} if result.simulator else None,
        "topology": result.topology,
        "closed_form": result.closed_form,
        "nodes": {node: _triple(columns, with_expect) for node, columns in result.nodes.items()},
        "devices": devices,
        "findings": [
            {"severity": f.severity, "code": f.code, "message": f.message, "line": f.line, "subject": f.subject}
            for f in result.findings
        ],
        "agree": result.agree,
    }
