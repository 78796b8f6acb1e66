"""Tables and lines laid out exactly as rich's Table and Text lay them out, without rich's
general machinery: same widths, same wrapping, same styles on the same characters, so the output
is the same in a pipe and in a terminal. A check prints hundreds of short cells and lines per
netlist, and rich's Table would otherwise cost more than the analyses (it takes about 25 times as
long as this for a check's table: 11 ms against 0.4 ms in a pipe, measured in issue 13).

This copies the behaviour of rich's private wrapping (rich._wrap.divide_line) and of its Table's
defaults, checked byte for byte by tests/test_table_layout.py against the rich versions pyproject.toml
allows. What this layout does not cover (a table wider than the console, tabs, control
characters or wide characters, a caller's justify or overflow setting, a theme that styles the
table's frame) is handed to rich's own Table or Text, which then prints it.
"""

from __future__ import annotations

import re
from functools import lru_cache
from typing import TYPE_CHECKING, Any

# rich is imported where a part is drawn or measured, not with this module: `check --json`
# builds no view and loads no rich (a console brings rich.console, and with it the rest).
if TYPE_CHECKING:
    from rich import box
    from rich.console import Console, ConsoleOptions, RenderResult
    from rich.measure import Measurement
    from rich.segment import Segment
    from rich.style import Style
    from rich.table import Table as RichTable
    from rich.text import Text

Cell = tuple[str, str]  # text and style name ("" for none)
_LAST_WORD_END = re.compile(r".*\S(?=\s)", re.DOTALL)  # up to the last word followed by space
_WORD_AFTER = re.compile(r"(\S+)\s*")  # the next word: its text, then the space after it
_ONE_CELL: set[str] = set()  # characters rich measures as one cell (its measure of one never changes)


def _simple(text: str) -> bool:
    """Text that rich's Text shows character for character: no newline, tab or control code."""
    from rich.control import strip_control_codes

    return "\n" not in text and "\t" not in text and strip_control_codes(text) == text


def _single_cells(text: str) -> bool:
    """Every character one cell wide (no wide, combining or zero-width ones, no control codes)."""
    if text.isascii() and text.isprintable():
        return True
    from rich.cells import cell_len

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
    from rich.segment import Segment

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


class Part:
    """A piece of a view: its runs as rich would render its fallback, or None to render that."""

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
        from rich.measure import Measurement

        return Measurement.get(console, options, self.fallback())


class Line(Part):
    """One line of text in one style, as a rich Text of it renders."""

    __slots__ = ("text", "style")

    def __init__(self, text: str, style: str = "") -> None:
        self.text = text
        self.style = style

    def fallback(self) -> Text:
        from rich.text import Text

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


class Header(Part):
    """A first line that starts in bold (`lead`, then `rest` in no style) over a second line in
    no style, as a rich Text assembled of them renders."""

    __slots__ = ("lead", "rest", "second")

    def __init__(self, lead: str, rest: str, second: str) -> None:
        self.lead, self.rest, self.second = lead, rest, second

    def fallback(self) -> Text:
        from rich.text import Text

        return Text.assemble((self.lead, "bold"), f"{self.rest}\n", self.second)

    def runs(self, console: Console, options: ConsoleOptions) -> list[Run] | None:
        first = _wrap(f"{self.lead}{self.rest}", options)
        second = _wrap(self.second, options)
        if first is None or second is None:
            return None
        bold = None if _plain_output(console) else console.get_style("bold")
        if not bold:  # one run: runs in no style are joined anyway (see _emit)
            return [("".join(f"{line}\n" for _, line in (*first, *second)), None)]
        runs: list[Run] = []
        for start, line in first:
            split = min(max(len(self.lead) - start, 0), len(line))  # the bold lead's part of this line
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


class Table(Part):
    """A table of labels and values: a first column of labels, then right-justified columns.

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

    def fallback(self) -> RichTable:
        from rich.table import Table as RichTable  # only for a table wider than the console
        from rich.text import Text

        table = RichTable(show_lines=False, title_justify="left")
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
        from rich import box

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


class View:
    """Parts printed one after the other (as a rich Group of them would be), the parts this
    layout does not cover handed to rich."""

    def __init__(self, parts: list[Part]) -> None:
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
        from rich.console import Group
        from rich.measure import Measurement

        return Measurement.get(console, options, Group(*(part.fallback() for part in self.parts)))


def lays_out(part: Part, console: Console) -> bool:
    """Whether ``console.print(part)`` is laid out here (False: the part is handed to rich's own
    Table or Text), at the console's width."""
    return part.runs(console, _print_options(console)) is not None


def _print_options(console: Console) -> ConsoleOptions:
    """The options Console.print renders with, its arguments left at their defaults."""
    return console.options.update(justify=None, overflow=None, height=None, no_wrap=None, markup=None,
                                  highlight=None)


def plain_text(view: View, console: Console) -> str | None:
    """What ``console.print(view)`` writes when that is plain text: a console without colour,
    recording or a terminal (a pipe, a file) and every part of the view laid out here. None
    otherwise, and rich must print it."""
    if (
        console.color_system is not None or console.record or console.quiet or console.soft_wrap
        or console.is_terminal or console.is_jupyter
    ):
        return None
    options = _print_options(console)
    if options.max_width < 1:
        return None  # rich renders nothing at all then
    texts: list[str] = []
    for part in view.parts:
        runs = part.runs(console, options)
        if runs is None:
            return None
        texts += [text for text, _ in runs]
    return "".join(texts)


def print_view(console: Console, view: View) -> None:
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

