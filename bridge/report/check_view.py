"""How `biasbridge check` shows its result: a rich table per netlist, or one JSON line.

Formatting only. Disagreeing cells carry a `!` as well as a colour, so the table reads
the same with colour off (NO_COLOR, a pipe).

The table and the lines are laid out here exactly as rich's Table and Text lay them out (same
widths, same wrapping, same styles on the same characters), so the output is the same in a pipe
and in a terminal; a check prints hundreds of short cells and lines per netlist, and rich's
general machinery would otherwise cost more than the analyses. What this layout does not cover
(a table wider than the console, tabs or control characters, a caller's justify or overflow
setting, a theme that styles the table's frame) is handed to rich's own Table or Text.
"""

from __future__ import annotations

import math
import re
from functools import lru_cache
from typing import TYPE_CHECKING, Any

from rich import box
from rich.cells import cell_len
from rich.console import Console, ConsoleOptions, Group, RenderResult
from rich.control import strip_control_codes
from rich.measure import Measurement
from rich.segment import Segment
from rich.style import Style
from rich.text import Text

from ..compare import HAND_FLOOR, NOT_AMPLIFYING, CheckResult, Columns
from ..netlist.numbers import engineering
from ..vocabulary import COLUMN_NAMES, COLUMN_TITLES, COLUMNS, SAT_MARGIN, UNITS

if TYPE_CHECKING:
    from rich.table import Table

SEVERITY_STYLE = {"error": "bold red", "warning": "yellow", "info": "dim"}
QUANTITY_LABELS = {SAT_MARGIN: "vds − vov"}  # the saturation margin: negative is triode
# Finding lines in no style although info: the causes are the most useful text of a check.
PLAIN_INFO = {"cause"}

Cell = tuple[str, str]  # text and style name ("" for none)
_LAST_WORD_END = re.compile(r".*\S(?=\s)", re.DOTALL)  # up to the last word followed by space
_WORD_AFTER = re.compile(r"(\S+)\s*")  # the next word: its text, then the space after it
_ONE_CELL: set[str] = set()  # characters rich measures as one cell (its measure of one never changes)


def _simple(text: str) -> bool:
    """Text that rich's Text shows character for character: no newline, tab or control code."""
    return "\n" not in text and "\t" not in text and strip_control_codes(text) == text


def _single_cells(text: str) -> bool:
    """Every character one cell wide (no wide, combining or zero-width ones)."""
    if text.isascii():
        return True
    characters = set(text)
    if all(cell_len(character) == 1 for character in characters):
        _ONE_CELL.update(characters)
        return True
    return False


def _one_cell_each(text: str) -> bool:
    """``_simple(text) and _single_cells(text)``, at once for the usual text: printable text has no
    newline, tab or control code, and its characters were mostly measured before."""
    if text.isprintable() and (text.isascii() or _ONE_CELL.issuperset(text)):
        return True
    return _simple(text) and _single_cells(text)


def _breaks(text: str, width: int) -> list[int]:
    """Where rich's Text breaks `text` (single-cell characters) into lines of `width`
    (rich._wrap.divide_line): a word, its trailing space included, goes on the line when its text
    ends within the line; a word too long for any line is folded, a line's width at a time."""
    breaks: list[int] = []
    line = 0  # where the current line starts
    while line + width < len(text):
        # The last word that fits is the last followed by space within one character past the
        # line (a word the line cuts off is not), so the next word is the first that does not fit.
        last = _LAST_WORD_END.match(text, line, line + width + 1)
        fitted = last.end() if last else line
        word = _WORD_AFTER.search(text, fitted)
        if word is None:
            break  # only space is left: it may run past the line
        start = word.start() if fitted else 0  # the text's first word includes the space before it
        if word.end(1) - start > width:
            pieces = range(start, word.end(), width)
            breaks += [piece for piece in pieces if piece]
            line = pieces[-1]
        else:  # onto the next line (never the first word: that one fits or is folded)
            breaks.append(start)
            line = start
    return breaks


def _wrap(text: str, options: ConsoleOptions) -> list[tuple[int, str]] | None:
    """`text` cut into lines as a Text of it wraps at the options' width (default justify and
    fold overflow), each with where it starts in `text`; None where that is not the case and
    Text itself must do it."""
    width = options.max_width
    if options.justify not in (None, "default") or not _one_cell_each(text):
        return None
    if len(text) <= width:
        return [(0, text)]
    if options.no_wrap or options.overflow not in (None, "fold") or width < 1:
        return None
    bounds = [0, *_breaks(text, width), len(text)]
    # A line longer than the width is one that ends in space: Text strips that space down to the
    # width (rstrip_end) and then cuts the line at the width (truncate), which is the cut alone.
    return [(start, text[start:min(end, start + width)]) for start, end in zip(bounds, bounds[1:])]


Run = tuple[str, "Style | None"]  # text and the style it prints in


def _plain_output(console: Console) -> bool:
    """Whether every run prints as plain text: a console without colour (a pipe) that does not record."""
    return console.color_system is None and not console.record


def _emit(console: Console, runs: list[Run]) -> list[Segment]:
    """Segments for (text, style) runs. Unstyled runs print as plain text, and in a console
    without colour (a pipe) every run does, so those are joined: the output is the same."""
    plain_output = _plain_output(console)
    segments: list[Segment] = []
    pending: list[str] = []
    for text, style in runs:
        if style and not plain_output:
            if pending:
                segments.append(Segment("".join(pending)))
                pending.clear()
            segments.append(Segment(text, style))
        else:
            pending.append(text)
    if pending:
        segments.append(Segment("".join(pending)))
    return segments


class _Part:
    """A piece of the view: its runs as rich would render its fallback, or None to render that."""

    def runs(self, console: Console, options: ConsoleOptions) -> list[Run] | None:
        raise NotImplementedError

    def fallback(self) -> Any:
        raise NotImplementedError

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        runs = self.runs(console, options)
        if runs is None:
            yield self.fallback()
        else:
            yield from _emit(console, runs)

    def __rich_measure__(self, console: Console, options: ConsoleOptions) -> Measurement:
        return Measurement.get(console, options, self.fallback())


class _Line(_Part):
    """One line of text in one style, as a rich Text of it renders."""

    __slots__ = ("text", "style")

    def __init__(self, text: str, style: str = "") -> None:
        self.text = text
        self.style = style

    def fallback(self) -> Text:
        return Text(self.text, style=self.style)

    def runs(self, console: Console, options: ConsoleOptions) -> list[Run] | None:
        lines = _wrap(self.text, options)
        if lines is None:
            return None
        style = console.get_style(self.style) if self.style and not _plain_output(console) else None
        if not style:  # one run: runs in no style are joined anyway (see _emit)
            return [("".join(f"{line}\n" for _, line in lines), None)]
        runs: list[Run] = []
        for _, line in lines:
            runs += [(line, style), ("\n", None)]
        return runs


class _Header(_Part):
    """`FILE: title` (the file in bold) over the topology line."""

    __slots__ = ("file", "title", "second")

    def __init__(self, file: str, title: str, second: str) -> None:
        self.file, self.title, self.second = file, title, second

    def fallback(self) -> Text:
        return Text.assemble((self.file, "bold"), f": {self.title}\n", self.second)

    def runs(self, console: Console, options: ConsoleOptions) -> list[Run] | None:
        first = _wrap(f"{self.file}: {self.title}", options)
        second = _wrap(self.second, options)
        if first is None or second is None:
            return None
        bold = None if _plain_output(console) else console.get_style("bold")
        if not bold:  # one run: runs in no style are joined anyway (see _emit)
            return [("".join(f"{line}\n" for _, line in (*first, *second)), None)]
        runs: list[Run] = []
        for start, line in first:
            split = min(max(len(self.file) - start, 0), len(line))  # the file name's part of this line
            if split:
                runs.append((line[:split], bold))
            if line[split:]:
                runs.append((line[split:], None))
            runs.append(("\n", None))
        for _, line in second:
            runs += [(line, None), ("\n", None)]
        return runs


@lru_cache(maxsize=16)
def _frame_lines(frame: box.Box, widths: tuple[int, ...]) -> tuple[str, str, str, str]:
    """The table's top, its line under the header, a section line and its bottom for these column
    widths (a check of many netlists prints tables of a few widths, over and over)."""
    return (frame.get_top(widths), frame.get_row(widths, "head", edge=True), frame.get_row(widths, "row", edge=True),
            frame.get_bottom(widths))


class _CheckTable(_Part):
    """The quantity table: a first column of labels, then one right-justified column per source.

    Laid out as rich's Table lays it out (default box, header, padding 1, sections) when every
    column fits at its natural width; otherwise it is that Table.
    """

    def __init__(self, headers: tuple[str, ...]) -> None:
        self.headers = headers  # plain ASCII
        self.rows: list[list[Cell]] = []
        self.section_ends: set[int] = set()  # rows followed by a section line

    def add_row(self, cells: list[Cell]) -> None:
        self.rows.append(cells)

    def add_section(self) -> None:
        """Like Table.add_section: a line under the last row so far (if there is one)."""
        if self.rows:
            self.section_ends.add(len(self.rows) - 1)

    def fallback(self) -> Table:
        from rich.table import Table  # only for a table wider than the console

        table = Table(show_lines=False, title_justify="left")
        table.add_column(self.headers[0])
        for header in self.headers[1:]:
            table.add_column(header, justify="right")
        for index, cells in enumerate(self.rows):
            table.add_row(*(Text(text, style=style) for text, style in cells), end_section=index in self.section_ends)
        return table

    def runs(self, console: Console, options: ConsoleOptions) -> list[Run] | None:
        headers, rows = self.headers, self.rows
        # Column by column (a row has a cell per header).
        texts = [[cells[column][0] for cells in rows] for column in range(len(headers))]
        # A column's text at once passes where each of its cells does (the usual case), or each is tried.
        if not all(_one_cell_each("".join(column)) or all(map(_one_cell_each, column)) for column in texts):
            return None
        widths = [max(map(len, [header, *column])) + 2 for header, column in zip(headers, texts)]  # padding (0, 1)
        edges = len(headers) + 1  # the box's verticals, outer edges included
        if sum(widths) > options.max_width - edges:
            return None  # rich shrinks and wraps columns
        get_style = console.get_style
        # The styles rich's Table gives each part. The frame (style "none" + "") and the padding
        # ("none") print as plain text, unless a theme gives those styles attributes: then rich does it.
        if get_style("none") + get_style(""):
            return None
        header_style = get_style("table.header") + get_style("")
        # The cells' styles; none without colour, where they do not show (see _emit).
        styles: dict[str, Style | None] = {} if _plain_output(console) else {
            name: get_style(name) if name else None for name in {style for cells in rows for _, style in cells}
        }
        frame = box.HEAVY_HEAD.substitute(options, safe=console.safe_box)
        # Text's justification in a cell: the first column is left-justified and padded; the others
        # strip the end and pad the front.
        inner = [width - 2 for width in widths]
        first, *others = texts
        bodies = [[text.ljust(inner[0]) for text in first]]
        bodies += [[text.rstrip().rjust(width) for text in column] for column, width in zip(others, inner[1:])]

        top, head_row, section, bottom = _frame_lines(frame, tuple(widths))
        runs: list[Run] = [(f"{top}\n{frame.head_left}", None)]
        for column, header in enumerate(headers):
            if column:
                runs.append((frame.head_vertical, None))
            text = header.ljust(inner[0]) if column == 0 else header.rstrip().rjust(inner[column])
            # Three segments, as rich's padded cell gives them: in colour each is styled on its own.
            runs += [(" ", header_style), (text, header_style), (" ", header_style)]
        runs.append((f"{frame.head_right}\n{head_row}\n", None))
        last = len(rows) - 1
        pending = ""  # unstyled text not yet in a run: runs in no style are joined anyway (see _emit)
        for index, (cells, row) in enumerate(zip(rows, zip(*bodies))):
            if index == last:
                left, right, divider = frame.foot_left, frame.foot_right, frame.foot_vertical
            else:
                left, right, divider = frame.mid_left, frame.mid_right, frame.mid_vertical
            gap = f" {divider} "
            row_styles = [styles[name] for _, name in cells] if styles else ()
            if any(row_styles):
                pending += f"{left} "
                for column, (body, style) in enumerate(zip(row, row_styles)):
                    if column:
                        pending += gap
                    if style:
                        runs += [(pending, None), (body, style)]
                        pending = ""
                    else:
                        pending += body
                pending += f" {right}\n"
            else:
                pending += f"{left} {gap.join(row)} {right}\n"
            if index in self.section_ends and index != last:
                pending += f"{section}\n"
        runs.append((f"{pending}{bottom}\n", None))
        return runs


class CheckView:
    """One check result as printed: header, table, steps, findings and verdict, one after the
    other (as a rich Group of them would be), the parts rich lays out itself handed to it."""

    def __init__(self, parts: list[_Part]) -> None:
        self.parts = parts

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        runs: list[Run] = []
        for part in self.parts:
            own = part.runs(console, options)
            if own is None:
                yield from _emit(console, runs)
                runs = []
                yield part.fallback()
            else:
                runs += own
        yield from _emit(console, runs)

    def __rich_measure__(self, console: Console, options: ConsoleOptions) -> Measurement:
        return Measurement.get(console, options, Group(*(part.fallback() for part in self.parts)))


def plain_text(view: CheckView, console: Console) -> str | None:
    """What ``console.print(view)`` writes when that is plain text: a console without colour,
    recording or a terminal (a pipe, a file) and every part of the view laid out here. None
    otherwise, and rich must print it."""
    if (
        console.color_system is not None or console.record or console.quiet or console.soft_wrap
        or console.is_terminal or console.is_jupyter
    ):
        return None
    # The options Console.print renders with, its arguments left at their defaults.
    options = console.options.update(justify=None, overflow=None, height=None, no_wrap=None, markup=None,
                                     highlight=None)
    if options.max_width < 1:
        return None  # rich renders nothing at all then
    texts: list[str] = []
    for part in view.parts:
        runs = part.runs(console, options)
        if runs is None:
            return None
        texts += [text for text, _ in runs]
    return "".join(texts)


def print_check(console: Console, view: CheckView) -> None:
    """``console.print(view)`` and then ``console.print()``: the view and an empty line.

    Plain text (see ``plain_text``) is written to the console's file in one piece, as rich would
    write it (the view's lines all fit the width, so there is nothing to crop); the rest is
    printed by rich."""
    text = plain_text(view, console)
    if text is None:
        console.print(view)
        console.print()
        return
    try:
        console.file.write(text + "\n")
        console.file.flush()
    except BrokenPipeError:
        console.on_broken_pipe()
    except UnicodeEncodeError as error:  # with the hint rich adds to it
        error.reason = f"{error.reason}\n*** You may need to add PYTHONIOENCODING=utf-8 to your environment ***"
        raise


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
    floors = ", ".join(engineering(HAND_FLOOR[unit], unit) for unit in ("V", "A", "S"))
    solver = "; level-1: 0.2 % or a smaller floor" if result.simulator else ""
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


def check_renderable(result: CheckResult, steps: bool = False, *, allow_region: bool = False) -> CheckView:
    shown = COLUMNS + (("expect",) if result.has_expect else ())
    simulator = f"{result.simulator[0]} {result.simulator[1]}" if result.simulator else "no simulator"
    # Solved numerically only when there is a hand column at all (not when the hand model failed).
    numeric = not result.closed_form and _hand_solved(result)
    header = _Header(
        f"{result.file}", result.title,
        f"topology: {result.topology}" + (" (no closed form: solved numerically)" if numeric else "")
        + f"   simulator: {simulator}",
    )
    table = _CheckTable(("quantity", *(COLUMN_TITLES[column] for column in shown)))
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
    parts: list[_Part] = [header, table, _Line(_legend(result))]
    if steps and result.steps:
        parts.append(_Line("Hand analysis, step by step:", "bold"))
        for number, step in enumerate(result.steps, start=1):
            parts.append(_Line(f"  {number:>2}. {step.text}"))
            if step.equation:
                parts.append(_Line(f"      {step.equation}", "cyan"))
    for finding in result.findings:
        where = f"line {finding.line}: " if finding.line else ""
        severity = "info" if finding.code == NOT_AMPLIFYING and allow_region else finding.severity
        style = "" if finding.code in PLAIN_INFO else SEVERITY_STYLE.get(severity, "")
        parts.append(_Line(f"{severity}: {where}{finding.message} [{finding.code}]", style))
    verdict, style = _verdict(result, allow_region)
    parts.append(_Line(f"→ {verdict}", style))
    return CheckView(parts)


def _add_supply_rows(table: _CheckTable, result: CheckResult, shown: tuple[str, ...]) -> None:
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
    }
