"""The table layout engine must print exactly what rich's own Table and Text print for the same
content (the reference is rich itself, built here from the content, not the engine's fallback),
in a pipe, in a colour terminal and with NO_COLOR, at any width. Every equivalence case first
asserts that the engine laid the part out itself (`lays_out`), so rich is never compared with
itself; the cases the engine hands to rich assert that too."""

from __future__ import annotations

import io
import random

from rich._wrap import divide_line
from rich.cells import cell_len
from rich.console import Console, Group
from rich.table import Table as RichTable
from rich.text import Text
from rich.theme import Theme

from bridge.report.table_layout import (
    Header,
    Line,
    Table,
    View,
    _breaks,
    _one_cell_each,
    _simple,
    _single_cells,
    lays_out,
    plain_text,
    print_view,
)

# Pieces rich measures one cell each: plain words, the symbols the reports use, long words that
# must fold, odd spaces.
ONE_CELL = ["a", "bc", " ", "  ", "µ", "—", "Ω", "√", "λ", "−", "·", "→", "é", "!", "1.5 V", "x" * 9,
            "y" * 31, "\u00a0", "\u2003", "ﾐ"]
# Characters rich measures as wide or as zero width, and control characters: handed to rich.
NOT_ONE_CELL = ["\u3000", "漢", "e\u0301", "\u200d", "\ufe0f", "👍", "\t", "\x01"]
# (colour system, terminal, no_color): a pipe, colour terminals, a terminal under NO_COLOR.
CONSOLES = [(None, False, False), ("standard", True, False), ("256", True, False), ("truecolor", True, False),
            ("truecolor", True, True)]
STYLES = ["", "dim", "bold red", "cyan", "red", "green", "yellow"]


def console_for(width: int, color_system: str | None, terminal: bool, no_color: bool, **extra) -> Console:
    return Console(file=io.StringIO(), width=width, color_system=color_system, force_terminal=terminal,
                   no_color=no_color, highlight=False, soft_wrap=False, **extra)


def printed(renderable, console: Console) -> str:
    console.print(renderable)
    return console.file.getvalue()


def same_as_rich(part, reference, width: int, **extra) -> bool:
    """Whether `part` lays itself out at `width` in every console; asserts that it prints what
    rich prints for `reference` in each."""
    laid_out = set()
    for color_system, terminal, no_color in CONSOLES:
        console = console_for(width, color_system, terminal, no_color, **extra)
        laid_out.add(lays_out(part, console))
        expected = printed(reference, console_for(width, color_system, terminal, no_color, **extra))
        assert printed(part, console) == expected, (width, color_system, no_color)
    assert len(laid_out) == 1, "laid out in one console and not in another"
    return laid_out.pop()


# rich's own renderables of the same content (built from the content, not from the engine).

def rich_line(line: Line) -> Text:
    return Text(line.text, style=line.style)


def rich_header(header: Header) -> Text:
    return Text.assemble((header.lead, "bold"), f"{header.rest}\n", header.second)


def rich_table(table: Table) -> RichTable:
    """rich's default Table: the first column left-justified, the others right-justified."""
    reference = RichTable()
    reference.add_column(table.headers[0])
    for header in table.headers[1:]:
        reference.add_column(header, justify="right")
    for index, cells in enumerate(table.rows):
        reference.add_row(*(Text(text, style=style) for text, style in cells), end_section=index in table.section_ends)
    return reference


def rich_equivalent(part):
    if isinstance(part, Line):
        return rich_line(part)
    if isinstance(part, Header):
        return rich_header(part)
    if isinstance(part, Table):
        return rich_table(part)
    if isinstance(part, View):
        return Group(*(rich_equivalent(each) for each in part.parts))
    raise TypeError(part)


def words(rng: random.Random, most: int, pieces: list[str] = ONE_CELL) -> str:
    return "".join(rng.choice(pieces) for _ in range(rng.randint(0, most)))


def natural_width(table: Table) -> int:
    """The console width at which the table's columns just fit at their natural widths."""
    columns = [[table.headers[column], *(cells[column][0] for cells in table.rows)]
               for column in range(len(table.headers))]
    return sum(max(map(len, column)) + 2 for column in columns) + len(table.headers) + 1


def random_table(rng: random.Random, pieces: list[str]) -> Table:
    columns = rng.randint(2, 5)
    table = Table(("quantity", *rng.sample(["hand", "level-1", "ngspice", "expected"], columns - 1)))
    for _ in range(rng.randint(0, 7)):
        if rng.random() < 0.3:
            table.add_section()
        table.add_row([("".join(rng.choice(pieces) for _ in range(rng.randint(1, 4))), rng.choice(STYLES))
                       for _ in range(columns)])
    if rng.random() < 0.2:
        table.add_section()  # after the last row: no line
    return table


def test_one_cell_each_is_simple_and_single_cells():
    rng = random.Random(4)
    for _ in range(3000):
        text = words(rng, 8, ONE_CELL + NOT_ONE_CELL) + rng.choice(
            ["", "\t", "\n", "\r", "\x01", "\x7f", "\u0085", "\u2028", "ä"])
        assert _one_cell_each(text) == (_simple(text) and _single_cells(text)), repr(text)


def test_single_cells_is_where_rich_measures_every_character_one_cell():
    # reference: rich.cells.cell_len (control codes such as \x01 and \x7f measure 0 cells)
    characters = [chr(code) for code in range(0x300)] + ONE_CELL + NOT_ONE_CELL
    for character in characters:
        assert _single_cells(character) == all(cell_len(each) == 1 for each in character), repr(character)
        assert _single_cells(f"ab{character}") == _single_cells(character), repr(character)


def test_a_title_with_a_control_code_wraps_as_rich_wraps_it():
    # \x01 is kept by rich's Text and measures 0 cells: it was counted as one cell, so the line
    # broke one character early (at width 32, after "greenhouse " instead of after "\x01").
    header = Header("/tmp/table_ctrl.cir", ": greenhouse \x01 sensor", "topology: common source")
    for width in (9, 11, 16, 32, 39):
        assert not same_as_rich(header, rich_header(header), width), width


def test_breaks_are_where_rich_breaks_a_line():
    # reference: rich._wrap.divide_line, the private function rich's Text.wrap calls
    rng = random.Random(5)
    spaces = [" ", "  ", "\u00a0", "\u2003", "     "]
    for _ in range(3000):
        text = "".join(rng.choice(ONE_CELL + spaces) for _ in range(rng.randint(0, 30)))
        for width in (1, 2, 3, 7, 10, 31, 32, 80):
            assert _breaks(text, width) == divide_line(text, width), (text, width)


def test_a_line_is_laid_out_here_and_prints_as_rich_text_at_any_width():
    rng = random.Random(1)
    for _ in range(300):
        line = Line(words(rng, 40), rng.choice(STYLES))
        width = rng.randint(1, 60)
        assert same_as_rich(line, rich_line(line), width), (line.text, width)


def test_a_line_that_wraps_near_the_width_prints_as_rich_text():
    # A legend-like line: words and symbols, at widths around its length and where a word ends.
    text = ("legend: green = within tolerance of ngspice (hand: 5 % or 5 mV, 1 nA, 10 nS); red and ! = beyond "
            "it; no colour = not compared; % = (value − ngspice)/|ngspice|")
    for style in ("", "dim"):
        line = Line(text, style)
        for width in (len(text) - 1, len(text), len(text) + 1, 7, 8, 9, 40, 41, 79, 80):
            assert same_as_rich(line, rich_line(line), width), width


def test_a_line_with_wide_or_control_characters_is_handed_to_rich():
    rng = random.Random(6)
    for _ in range(150):
        text = words(rng, 10) + rng.choice(NOT_ONE_CELL) + words(rng, 10)
        line = Line(text, rng.choice(STYLES))
        assert not same_as_rich(line, rich_line(line), rng.randint(1, 40)), text


def test_the_header_is_laid_out_here_and_prints_as_rich_text_with_the_lead_in_bold():
    rng = random.Random(2)
    for _ in range(200):
        header = Header(words(rng, 12), ": " + words(rng, 20), words(rng, 30))
        width = rng.randint(1, 70)
        assert same_as_rich(header, rich_header(header), width), (header.lead, width)


def test_a_header_with_wide_characters_is_handed_to_rich():
    header = Header("漢字.cir", ": greenhouse sensor bias", "topology: common source")
    assert not same_as_rich(header, rich_header(header), 40)


def test_a_table_that_fits_is_laid_out_here_and_prints_as_rich_table():
    rng = random.Random(3)
    pieces = ["a", "b ", "µ", "—", "x" * 9, "1.5 V !", "0 S  ", "  ", "\u00a0", "Ω", "−", "saturation  "]
    for _ in range(80):
        table = random_table(rng, pieces)
        width = natural_width(table) + rng.choice([0, 0, 1, 2, 7, 40])  # at the terminal's width and over it
        assert same_as_rich(table, rich_table(table), width), (table.headers, table.rows, width)


def test_a_table_one_column_too_wide_is_handed_to_rich():
    rng = random.Random(7)
    pieces = ["a", "b ", "µ", "x" * 9, "1.5 V !", "  "]
    for _ in range(25):
        table = random_table(rng, pieces)
        width = natural_width(table) - rng.choice([1, 1, 2, 10])
        assert not same_as_rich(table, rich_table(table), width), (table.rows, width)


def test_a_table_with_wide_or_zero_width_characters_is_handed_to_rich():
    rng = random.Random(8)
    for _ in range(25):
        table = random_table(rng, ["a", "b ", "1.5 V !"])
        odd = rng.choice(["漢", "e\u0301", "👍", "a\u200db", "b\x01"])
        table.add_row([(odd, "red")] + [("1", "")] * (len(table.headers) - 1))
        assert not same_as_rich(table, rich_table(table), natural_width(table) + 10), table.rows


def test_sections_draw_a_line_between_rows_only():
    table = Table(("quantity", "hand", "level-1"))
    table.add_section()  # before any row: nothing
    table.add_row([("V(d)", ""), ("2.31 V  ", "green"), ("2.30 V  ", "")])
    table.add_section()
    table.add_section()  # twice: one line
    table.add_row([("M1 id", ""), ("270 µA !", "red"), ("301 µA  ", "")])
    table.add_section()  # after the last row: nothing
    assert same_as_rich(table, rich_table(table), 40)
    assert printed(table, console_for(40, None, False, False)).count("├") == 1  # one section line


def test_a_theme_that_styles_the_frame_is_handed_to_rich():
    table = Table(("quantity", "hand"))
    table.add_row([("V(d)", ""), ("2.31 V  ", "green")])
    assert not same_as_rich(table, rich_table(table), 40, theme=Theme({"none": "magenta"}))
    assert same_as_rich(table, rich_table(table), 40, theme=Theme({"green": "blue"}))  # a cell's colour: here


def test_a_view_prints_as_the_rich_group_of_its_parts_and_as_plain_text_in_a_pipe():
    table = Table(("quantity", "hand", "level-1"))
    table.add_row([("V(out)", ""), ("1.20 V  ", "green"), ("1.19 V  ", "")])
    view = View([Header("dynamo_light.cir", ": bicycle dynamo light driver", "topology: common source"), table,
                 Line("legend: green = within tolerance", "dim"), Line("→ all agree", "bold green")])
    for width in (40, 80):
        assert same_as_rich(view.parts[1], rich_table(table), width)
        for color_system, terminal, no_color in CONSOLES:
            console = console_for(width, color_system, terminal, no_color)
            assert printed(view, console) == printed(rich_equivalent(view), console_for(width, color_system,
                                                                                          terminal, no_color))
            consoles = [console_for(width, color_system, terminal, no_color) for _ in range(2)]
            consoles[0].print(view)
            consoles[0].print()
            print_view(consoles[1], view)
            assert consoles[1].file.getvalue() == consoles[0].file.getvalue()
    pipe = console_for(80, None, False, False)
    assert plain_text(view, pipe) == printed(rich_equivalent(view), console_for(80, None, False, False))
    assert plain_text(view, console_for(80, "standard", True, False)) is None  # colour: rich prints it
    assert plain_text(view, console_for(20, None, False, False)) is None  # the table does not fit
