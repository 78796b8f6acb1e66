"""The check view lays out its table and lines itself: it must print exactly what rich's own
Table and Text print for the same content (the reference is rich, installed with the project),
in a pipe and in a colour terminal, at any width."""

from __future__ import annotations

import io
import random

import pytest
from conftest import EXAMPLES
from rich._wrap import divide_line
from rich.console import Console, Group

from bridge.check import check_circuit
from bridge.netlist import parse_netlist, read_netlist
from bridge.report.check_view import check_renderable, print_check
from bridge.report.table_layout import Header, Line, Table, _breaks, _one_cell_each, _simple, _single_cells, plain_text

# Plain words, the symbols the reports use, long words that must fold, odd spaces, and characters
# rich measures as wide or as zero width (those go to rich's own Text and Table).
PIECES = ["a", "bc", " ", "  ", "µ", "—", "Ω", "√", "λ", "−", "·", "→", "é", "!", "1.5 V", "x" * 9,
          "y" * 31, "\u00a0", "\u2003", "\u3000", "漢", "ﾐ", "e\u0301", "\u200d", "\ufe0f", "👍"]
CONSOLES = [(None, False), ("standard", True), ("truecolor", True)]


def printed(renderable, width: int, color_system: str | None, terminal: bool) -> str:
    console = Console(file=io.StringIO(), width=width, color_system=color_system, force_terminal=terminal,
                      highlight=False, soft_wrap=False)
    console.print(renderable)
    return console.file.getvalue()


def words(rng: random.Random, most: int) -> str:
    return "".join(rng.choice(PIECES) for _ in range(rng.randint(0, most)))


def test_one_cell_each_is_simple_and_single_cells():
    rng = random.Random(4)
    for _ in range(3000):
        text = words(rng, 8) + rng.choice(["", "\t", "\n", "\r", "\x01", "\x7f", "\u0085", "\u2028", "ä"])
        assert _one_cell_each(text) == (_simple(text) and _single_cells(text)), repr(text)


def test_breaks_are_where_rich_breaks_a_line():
    rng = random.Random(5)
    spaces = [" ", "  ", "\u00a0", "\u2003", "     "]
    for _ in range(3000):
        text = "".join(rng.choice(PIECES + spaces) for _ in range(rng.randint(0, 30)))
        if not _one_cell_each(text):
            continue
        for width in (1, 2, 3, 7, 10, 31, 32, 80):
            assert _breaks(text, width) == divide_line(text, width), (text, width)


def test_a_line_prints_as_rich_text_prints_it_at_any_width():
    rng = random.Random(1)
    for _ in range(600):
        line = Line(words(rng, 40), rng.choice(["", "dim", "bold red", "cyan"]))
        width = rng.randint(1, 60)
        for color_system, terminal in CONSOLES:
            assert printed(line, width, color_system, terminal) == printed(line.fallback(), width, color_system,
                                                                           terminal), (line.text, width)


def test_the_header_prints_as_rich_text_with_the_file_in_bold():
    rng = random.Random(2)
    for _ in range(300):
        header = Header(words(rng, 12), ": " + words(rng, 20), words(rng, 30))
        width = rng.randint(1, 70)
        for color_system, terminal in CONSOLES:
            assert printed(header, width, color_system, terminal) == printed(header.fallback(), width,
                                                                             color_system, terminal)


def test_the_table_prints_as_rich_table_prints_it_or_is_that_table():
    rng = random.Random(3)
    pieces = ["a", "b ", "µ", "—", "x" * 9, "1.5 V !", "  ", "\u00a0", "漢", "e\u0301"]
    for _ in range(300):
        columns = rng.randint(2, 5)
        table = Table(("quantity", *rng.sample(["hand", "level-1", "ngspice", "expected"], columns - 1)))
        for _ in range(rng.randint(0, 6)):
            if rng.random() < 0.3:
                table.add_section()
            table.add_row([("".join(rng.choice(pieces) for _ in range(rng.randint(1, 4))),
                            rng.choice(["", "red", "green", "dim"])) for _ in range(columns)])
        width = rng.randint(12, 90)
        for color_system, terminal in CONSOLES:
            assert printed(table, width, color_system, terminal) == printed(table.fallback(), width,
                                                                            color_system, terminal)


@pytest.mark.parametrize("name", ["cs_divider.cir", "source_follower.cir", "pmos_cs.cir"])
@pytest.mark.parametrize("steps", [False, True])
def test_a_whole_check_prints_as_the_rich_group_of_its_parts(name, steps):
    result = check_circuit(read_netlist(EXAMPLES / name), None, tolerance=0.05)
    view = check_renderable(result, steps=steps)
    group = Group(*(part.fallback() for part in view.parts))
    for width in (30, 60, 80, 132):
        for color_system, terminal in CONSOLES:
            assert printed(view, width, color_system, terminal) == printed(group, width, color_system, terminal)


def test_a_check_of_two_transistors_prints_as_the_rich_group_of_its_parts():
    circuit = parse_netlist(
        "cascode\nVDD vdd 0 5\nVB b 0 2.5\nR1 vdd g 300k\nR2 g 0 100k\nRD vdd d 10k\nM2 d b x 0 nch W=20u L=2u\n"
        "M1 x g 0 0 nch W=20u L=2u\n.model nch nmos (vto=0.7 kp=120u lambda=0.02 gamma=0.4 phi=0.65)\n.op\n",
        "cascode.cir",
    )
    view = check_renderable(check_circuit(circuit, None, tolerance=0.05), steps=True)
    group = Group(*(part.fallback() for part in view.parts))
    for width in (40, 80):
        for color_system, terminal in CONSOLES:
            assert printed(view, width, color_system, terminal) == printed(group, width, color_system, terminal)


@pytest.mark.parametrize("name", ["cs_divider.cir", "source_follower.cir", "pmos_cs.cir"])
@pytest.mark.parametrize("steps", [False, True])
def test_print_check_writes_what_two_console_prints_write(name, steps):
    """Plain text in one piece where the console prints plain text, rich's printing otherwise: the
    same characters either way, at widths where the table fits and where it does not."""
    view = check_renderable(check_circuit(read_netlist(EXAMPLES / name), None, tolerance=0.05), steps=steps)
    for width in (20, 30, 60, 80, 132):
        for color_system, terminal in CONSOLES:
            consoles = [Console(file=io.StringIO(), width=width, color_system=color_system,
                                force_terminal=terminal, highlight=False, soft_wrap=False) for _ in range(2)]
            consoles[0].print(view)
            consoles[0].print()
            print_check(consoles[1], view)
            assert consoles[1].file.getvalue() == consoles[0].file.getvalue(), (width, color_system)


def test_plain_text_only_for_a_plain_console_and_a_view_laid_out_here():
    view = check_renderable(check_circuit(read_netlist(EXAMPLES / "cs_divider.cir"), None, tolerance=0.05))
    plain = Console(file=io.StringIO(), width=100, color_system=None, highlight=False, soft_wrap=False)
    assert plain_text(view, plain) == printed(view, 100, None, False)
    assert plain_text(view, Console(file=io.StringIO(), width=100, color_system="standard", force_terminal=True,
                                    highlight=False)) is None
    assert plain_text(view, Console(file=io.StringIO(), width=100, color_system=None, record=True)) is None
    assert plain_text(view, Console(file=io.StringIO(), width=100, color_system=None, soft_wrap=True)) is None
    assert plain_text(view, Console(file=io.StringIO(), width=20, color_system=None)) is None  # table too wide


# What the colours say. reference: README, `check` (the legend under the table).

def _table_cells(view) -> dict[str, list[tuple[str, str]]]:
    (table,) = [part for part in view.parts if isinstance(part, Table)]
    return {cells[0][0]: cells[1:] for cells in table.rows}


def test_a_value_not_compared_is_not_green():
    # cs_divider in saturation: the hand gds is 0 S by its own assumption (λ = 0), not compared with
    # the level-1 solver's 4.8 µS; the reference column is not compared with itself.
    result = check_circuit(read_netlist(EXAMPLES / "cs_divider.cir"), None, tolerance=0.05)
    cells = _table_cells(check_renderable(result))
    hand, level1, _ = cells["M1 gds"]
    assert hand == ("0 S  ", "") and level1[1] == ""
    assert result.devices["M1"].quantities["gds"].level1 > 1e-6
    assert cells["M1 id"][0][1] == "green" and cells["M1 id"][1][1] == ""  # the reference (no ngspice here)
    assert cells["M1 region (nmos)"][0][1] == "green" and cells["M1 region (nmos)"][1][1] == ""
    assert all(style == "" for text, style in cells["M1 vds − vov"] if text != "—")  # derived, not compared


def test_a_disagreeing_cell_is_red_with_a_bang():
    result = check_circuit(read_netlist(EXAMPLES / "cs_degenerated.cir"), None, tolerance=0.05)
    cells = _table_cells(check_renderable(result))
    assert cells["V(d)"][0][0].endswith(" !") and cells["V(d)"][0][1] == "red"


def test_one_legend_line_says_what_colour_bang_zero_and_percent_mean():
    result = check_circuit(read_netlist(EXAMPLES / "cs_divider.cir"), None, tolerance=0.07)
    text = printed(check_renderable(result, steps=True), 400, None, False)
    legend = [line for line in text.splitlines() if line.startswith("legend:")]
    assert legend == [
        "legend: green = within tolerance of level-1 solver (hand: 7 % or 5 mV, 1 nA, 10 nS); red and ! = beyond it; "
        "no colour = not compared; 0 = zero at the solver's resolution; "
        "% = (value − level-1 solver)/|level-1 solver|"
    ]


def test_cause_lines_are_not_dim():
    result = check_circuit(read_netlist(EXAMPLES / "cs_degenerated.cir"), None, tolerance=0.05)
    lines = [part for part in check_renderable(result).parts if isinstance(part, Line)]
    causes = [line for line in lines if line.text.endswith("[cause]")]
    assert causes and all(line.style == "" for line in causes)
