"""How `biasbridge check` shows its result: a rich table per netlist, or one JSON line.

Formatting only. Disagreeing cells carry a `!` as well as a colour, so the table reads
the same with colour off (NO_COLOR, a pipe).

The table and the lines are laid out by `table_layout`, exactly as rich's Table and Text would
lay them out; this module says only what they hold.
"""

from __future__ import annotations

import json
import math
from typing import TYPE_CHECKING, Any

from ..compare import HAND_FLOOR_TEXT, NOT_AMPLIFYING, REGION_CHANGE, CauseGroup, CheckResult, Columns, cause_groups
from ..netlist.numbers import engineering
from ..vocabulary import COLUMN_NAMES, COLUMN_TITLES, COLUMNS, EFFECT_NAMES, SAT_MARGIN, UNITS, Finding

if TYPE_CHECKING:
    from rich.console import Console

    # At run time table_layout is imported where a view is drawn: `check --json` needs none of it.
    from .table_layout import Cell, Line, Part, Table, View

SEVERITY_STYLE = {"error": "bold red", "warning": "yellow", "info": "dim"}
QUANTITY_LABELS = {SAT_MARGIN: "vds − vov"}  # the saturation margin: negative is triode
# Finding lines in no style although info: the causes are the most useful text of a check.
PLAIN_INFO = {"cause"}


def print_check(console: Console, view: View) -> None:
    """The check view and an empty line, as ``console.print(view)`` and ``console.print()`` print
    them (see ``table_layout.print_view``)."""
    from .table_layout import print_view

    print_view(console, view)


def _cell(value: float | None, unit: str, flagged: bool, compared: bool = True, resolution: float = 0.0) -> Cell:
    """A value: red with `!` when it differs from the reference, green when compared and within
    tolerance, no colour when not compared (the reference itself, a value assumed by the model)."""
    if value is None:
        return ("—", "dim")
    text = engineering(value, unit, resolution=resolution)
    return (text + (" !" if flagged else "  "), "red" if flagged else "green" if compared else "")


def _row(label: str, columns: Columns, unit: str, shown: tuple[str, ...]) -> list[Cell]:
    flagged, compared, resolution = columns.flagged, columns.compared, columns.resolution
    return [(label, ""), *[_cell(columns.get(column), unit, column in flagged, column in compared, resolution)
                           for column in shown]]


def _hand_solved(result: CheckResult) -> bool:
    """Whether the hand column holds a solution (it is empty when the hand model could not run)."""
    return any(columns.hand is not None for columns in result.nodes.values())


def _agreement(result: CheckResult) -> str:
    """The verdict when nothing is flagged, naming only the columns that hold values."""
    filled = [
        COLUMN_TITLES[column] for column in COLUMNS
        if any(columns.get(column) is not None for columns in result.nodes.values())
    ]
    if len(filled) == len(COLUMNS):
        return "all three agree within tolerance"
    if len(filled) > 1:
        return f"{' and '.join(filled)} agree within tolerance"
    if filled:
        return f"nothing flagged; only the {filled[0]} column holds values, so nothing was compared"
    return "nothing flagged; no column holds values, so nothing was compared"


def _legend(result: CheckResult) -> str:
    """What colour, `!`, 0 and a percentage mean in this table, said once under it."""
    reference = "ngspice" if result.simulator else COLUMN_NAMES["level1"]
    floors = ", ".join(HAND_FLOOR_TEXT[unit] for unit in ("V", "A", "S"))
    solver = "; level-1: 0.2 % or a smaller floor" if result.simulator else ""
    if result.fitted is not None and result.simulator:
        solver = "; level-1: 0.2 % plus what the fitted equivalent's error allows, or a smaller floor"
    return (
        f"legend: green = within tolerance of {reference} (hand: {result.tolerance * 100:g} % or {floors}{solver}); "
        f"red and ! = beyond it; no colour = not compared; 0 = zero at the solver's resolution; "
        f"% = (value − {reference})/|{reference}|"
    )


def _verdict(result: CheckResult, allow_region: bool) -> tuple[str, str]:
    """The last line and its style: the columns' agreement, and whether the stage amplifies."""
    verdict = _agreement(result) if result.agree else "disagreement flagged"
    if result.amplifies:
        return verdict, "bold green" if result.agree else "bold red"
    outside = [f"{f.subject} in {_region_of(result, f.subject)}" for f in result.findings if f.code == NOT_AMPLIFYING]
    verdict += f", {'but' if result.agree else 'and'} the stage is not biased to amplify ({', '.join(outside)})"
    if allow_region:
        return verdict + "; accepted by --allow-region", "bold green" if result.agree else "bold red"
    return verdict, "bold red"


def _region_of(result: CheckResult, name: str | None) -> str:
    device = result.devices.get(name or "")
    region = device.region.get(device.reference_column) if device else None
    return region or "another region"


def check_renderable(result: CheckResult, steps: bool = False, *, allow_region: bool = False) -> View:
    from .table_layout import Header, Line, Table, View

    shown = COLUMNS + (("expect",) if result.has_expect else ())
    simulator = f"{result.simulator[0]} {result.simulator[1]}" if result.simulator else "no simulator"
    # Solved numerically only when there is a hand column at all (not when the hand model failed).
    numeric = not result.closed_form and _hand_solved(result)
    header = Header(
        f"{result.file}", f": {result.title}",
        f"topology: {result.topology}" + (" (no closed form: solved numerically)" if numeric else "")
        + f"   simulator: {simulator}",
    )
    table = Table(("quantity", *(COLUMN_TITLES[column] for column in shown)))
    for node, columns in result.nodes.items():
        table.add_row(_row(f"V({node})", columns, "V", shown))
    _add_supply_rows(table, result, shown)
    for device in result.devices.values():
        table.add_section()
        region_cells = [(f"{device.name} region ({device.type})", "")]
        for column in shown:
            value = device.expect_region if column == "expect" else device.region.get(column)
            differs = column in device.region_flagged
            compared = column in device.region_compared
            region_cells.append(((value or "—") + (" !" if differs else "  "),
                                 "red" if differs else "green" if compared else "dim" if value is None else ""))
        table.add_row(region_cells)
        for quantity, columns in device.quantities.items():
            label = QUANTITY_LABELS.get(quantity, quantity)
            table.add_row(_row(f"{device.name} {label}", columns, UNITS[quantity], shown))
    parts: list[Part] = [header, table, *_equivalent_lines(result), Line(_legend(result))]
    if steps and result.steps:
        parts.append(Line("Hand analysis, step by step:", "bold"))
        for number, step in enumerate(result.steps, start=1):
            parts.append(Line(f"  {number:>2}. {step.text}"))
            if step.equation:
                parts.append(Line(f"      {step.equation}", "cyan"))
    parts += finding_lines(result, allow_region)
    verdict, style = _verdict(result, allow_region)
    parts.append(Line(f"→ {verdict}", style))
    return View(parts)


def _finding_line(finding: Finding, allow_region: bool, indent: str = "") -> Line:
    from .table_layout import Line

    where = f"line {finding.line}: " if finding.line else ""
    severity = "info" if finding.code == NOT_AMPLIFYING and allow_region else finding.severity
    style = "" if finding.code in PLAIN_INFO else SEVERITY_STYLE.get(severity, "")
    return Line(f"{indent}{severity}: {where}{finding.message} [{finding.code}]", style)


def finding_lines(result: CheckResult, allow_region: bool = False) -> list[Line]:
    """The findings in their order, but each cause group (``compare.cause_groups``) together, where
    its first finding would be: a heading naming the cause, the lines that state it, then the
    differences it explains, indented under it."""
    from .table_layout import Line

    groups = cause_groups(result)
    first = {min((*group.stated_by, *group.findings)): group for group in groups}
    grouped = {index for group in groups for index in (*group.stated_by, *group.findings)}
    lines: list[Line] = []
    for index, finding in enumerate(result.findings):
        group = first.get(index)
        if group is not None:
            lines.append(Line(_group_heading(result, group), "bold"))
            lines += [_finding_line(result.findings[i], allow_region, "  ") for i in group.stated_by]
            lines += [_finding_line(result.findings[i], allow_region, "  ") for i in group.findings]
        elif index not in grouped:
            lines.append(_finding_line(finding, allow_region))
    return lines


def _group_heading(result: CheckResult, group: CauseGroup) -> str:
    """What one cause explains, said before its lines: from the group's data, nothing computed."""
    count = len(group.findings)
    differences = f"{count} difference{'s' if count > 1 else ''}"
    if group.cause == REGION_CHANGE:
        return (f"cause: the region of {group.subject} — the hand analysis puts it in another region than "
                f"{_reference_name(result)} and no effect switched on alone moves it there; "
                f"{'its ' + differences + ' below come' if count > 1 else 'its difference below comes'} with that "
                "region:")
    which = f"each of the {differences}" if count > 1 else "the difference"
    return (f"cause: {EFFECT_NAMES.get(group.cause, group.cause)} — switched on alone in the hand model, it removes "
            f"{which} below (none is flagged with it):")


def _reference_name(result: CheckResult) -> str:
    """The column every other is judged against: ngspice, else the level-1 solver."""
    device = next(iter(result.devices.values()), None)
    return COLUMN_NAMES[device.reference_column if device is not None else "sim"]


def _add_supply_rows(table: Table, result: CheckResult, shown: tuple[str, ...]) -> None:
    """Each supply's current (as delivered) and power, in a section of their own under the nodes."""
    if not result.supplies:
        return
    table.add_section()
    for supply in result.supplies.values():
        table.add_row(_row(f"I({supply.name})", supply.current, "A", shown))
        table.add_row(_row(f"P({supply.name})", supply.power, "W", shown))


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
        if result.fitted is not None and device.name in result.fitted.equivalents:
            entry["equivalent"] = _equivalent_json(result.fitted.equivalents[device.name])
        devices[device.name] = entry
    return {
        "file": result.file,
        "title": result.title,
        "simulator": {"name": result.simulator[0], "version": result.simulator[1]} if result.simulator else None,
        "topology": result.topology,
        "closed_form": result.closed_form,
        "nodes": {node: _triple(columns, with_expect) for node, columns in result.nodes.items()},
        "devices": devices,
        "supplies": {
            supply.name: {"current": _triple(supply.current, False), "power": _triple(supply.power, False)}
            for supply in result.supplies.values()
        },
        "findings": [
            {"severity": f.severity, "code": f.code, "message": f.message, "line": f.line, "subject": f.subject}
            for f in result.findings
        ],
        "agree": result.agree,
        "amplifies": result.amplifies,
        "groups": [group_json(group) for group in cause_groups(result)],
    }


# One encoder for every line of `check --json` (json.dumps makes one a call); without the circular
# reference check, which a tree that check_json has just built cannot need.
_LINE_ENCODER = json.JSONEncoder(allow_nan=False, check_circular=False)


def check_json_line(result: CheckResult) -> str:
    """The `check --json` line of `result` (without its newline): ``check_json`` as
    ``json.dumps(..., allow_nan=False)`` writes it."""
    return _LINE_ENCODER.encode(check_json(result))


def group_json(group: CauseGroup) -> dict[str, Any]:
    """One cause group of `check --json`: the cause (an effect, or "region" with its device), and
    the indices into "findings" of the lines that state it and of the findings it explains."""
    return {"cause": group.cause, "subject": group.subject, "stated_by": list(group.stated_by),
            "findings": list(group.findings)}


def _equivalent_lines(result: CheckResult) -> list[Line]:
    """One line per device whose hand and level-1 columns rest on a fitted level-1 equivalent."""
    if result.fitted is None:
        return []
    from .table_layout import Line

    return [
        Line(f"{e.device}: hand and level-1 columns on {e.card}, a level-1 equivalent of {e.model} (level {e.level}) "
             f"fitted around ngspice's operating point: VTO = {engineering(e.vto, 'V')}, KP = "
             f"{engineering(e.kp, 'A/V²')}, LAMBDA = {e.lambda_:.4g} /V; RMS error {100 * e.rms_around:.1f} % there",
             "bold")
        for e in result.fitted.equivalents.values()
    ]  # fmt: skip


def _equivalent_json(equivalent) -> dict[str, Any]:
    """A fitted equivalent in `check --json` (device polarity, SI units, errors relative)."""
    return {
        "model": equivalent.model, "level": equivalent.level, "card": equivalent.card,
        "vto": equivalent.vto, "kp": equivalent.kp, "lambda": equivalent.lambda_,
        "w": equivalent.w, "l": equivalent.l, "temperature": equivalent.temperature, "vbs": equivalent.vbs,
        "around": {"vgs": equivalent.around[0], "vds": equivalent.around[1]},
        "rms_rel_error": equivalent.rms_around, "rel_error_at_point": _finite(equivalent.at_point),
        "tolerance": equivalent.error, "points_used": equivalent.points_used,
    }  # fmt: skip
