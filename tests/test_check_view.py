"""The check view: what its table, colours and lines say, and that a whole check, laid out by
the table layout engine, prints exactly what rich's own Table and Text print for the same content
(built by tests/test_table_layout.py's `rich_equivalent`, not by the engine), in a pipe, in a
colour terminal and with NO_COLOR. The engine's own cases are in tests/test_table_layout.py."""

from __future__ import annotations

import io

import pytest
from conftest import EXAMPLES
from rich.console import Console
from test_table_layout import natural_width, rich_equivalent

from bridge.check import check_circuit
from bridge.netlist import parse_netlist, read_netlist
from bridge.report.check_view import check_renderable, print_check
from bridge.report.table_layout import Header, Line, Table, lays_out, plain_text

CONSOLES = [(None, False, False), ("standard", True, False), ("truecolor", True, False), ("truecolor", True, True)]
# A greenhouse sensor board's input stage, its title holding a control code (kept by rich, 0 cells).
SENSOR = (
    "greenhouse \x01 sensor input\nVDD vdd 0 3.3\nR1 vdd g 220k\nR2 g 0 100k\nRD vdd d 15k\n"
    "M1 d g 0 0 nch W=10u L=1u\n.model nch nmos (vto=0.6 kp=100u lambda=0.01)\n.op\n"
)


def printed(renderable, width: int, color_system: str | None, terminal: bool, no_color: bool = False) -> str:
    console = Console(file=io.StringIO(), width=width, color_system=color_system, force_terminal=terminal,
                      no_color=no_color, highlight=False, soft_wrap=False)
    console.print(renderable)
    return console.file.getvalue()


def laid_out(view, width: int) -> list[bool]:
    """Which of the view's parts the table layout lays out itself at `width`."""
    console = Console(file=io.StringIO(), width=width, color_system=None, highlight=False, soft_wrap=False)
    return [lays_out(part, console) for part in view.parts]


def assert_prints_as_rich(view, width: int) -> None:
    """The view prints what rich's own Table and Text of the same content print, in every console."""
    reference = rich_equivalent(view)
    for color_system, terminal, no_color in CONSOLES:
        assert printed(view, width, color_system, terminal, no_color) == printed(
            reference, width, color_system, terminal, no_color), (width, color_system, no_color)


@pytest.mark.parametrize("name", ["cs_divider.cir", "source_follower.cir", "pmos_cs.cir"])
@pytest.mark.parametrize("steps", [False, True])
def test_a_whole_check_is_laid_out_here_and_prints_as_rich_would(name, steps):
    result = check_circuit(read_netlist(EXAMPLES / name), None, tolerance=0.05)
    view = check_renderable(result, steps=steps)
    (table,) = [part for part in view.parts if isinstance(part, Table)]
    fits = natural_width(table)
    for width in (fits, fits + 1, 132):
        assert all(laid_out(view, width)), width
        assert_prints_as_rich(view, width)
    # Narrower than the table: the table is rich's own, the lines are still laid out here.
    for width in (30, fits - 1):
        assert laid_out(view, width) == [not isinstance(part, Table) for part in view.parts], width
        assert_prints_as_rich(view, width)


def test_a_check_of_two_transistors_is_laid_out_here_and_prints_as_rich_would():
    circuit = parse_netlist(
        "cascode\nVDD vdd 0 5\nVB b 0 2.5\nR1 vdd g 300k\nR2 g 0 100k\nRD vdd d 10k\nM2 d b x 0 nch W=20u L=2u\n"
        "M1 x g 0 0 nch W=20u L=2u\n.model nch nmos (vto=0.7 kp=120u lambda=0.02 gamma=0.4 phi=0.65)\n.op\n",
        "cascode.cir",
    )
    view = check_renderable(check_circuit(circuit, None, tolerance=0.05), steps=True)
    for width in (80, 100):
        assert all(laid_out(view, width)), width
        assert_prints_as_rich(view, width)
    assert_prints_as_rich(view, 40)


def test_a_title_with_a_control_code_prints_as_rich_would():
    view = check_renderable(check_circuit(parse_netlist(SENSOR, "sensor.cir"), None, tolerance=0.05))
    header = view.parts[0]
    assert isinstance(header, Header) and "\x01" in header.rest
    for width in range(20, 45):
        assert laid_out(view, width)[0] is False, width  # handed to rich's Text
        for color_system, terminal, no_color in CONSOLES:
            assert printed(header, width, color_system, terminal, no_color) == printed(
                rich_equivalent(header), width, color_system, terminal, no_color), width
    assert_prints_as_rich(view, 80)


def test_no_color_prints_the_bangs_and_no_colour(monkeypatch):
    # NO_COLOR (no-color.org): rich's Console reads it; the table's `!` says what red said.
    monkeypatch.setenv("NO_COLOR", "1")
    result = check_circuit(read_netlist(EXAMPLES / "cs_degenerated.cir"), None, tolerance=0.05)
    view = check_renderable(result)
    console = Console(file=io.StringIO(), width=120, force_terminal=True, color_system="truecolor", highlight=False)
    assert console.no_color and all(laid_out(view, 120))
    console.print(view)
    text = console.file.getvalue()
    reference = Console(file=io.StringIO(), width=120, force_terminal=True, color_system="truecolor", highlight=False)
    reference.print(rich_equivalent(view))
    assert text == reference.file.getvalue()
    assert " !" in text and "\x1b[31m" not in text and "\x1b[32m" not in text


@pytest.mark.parametrize("name", ["cs_divider.cir", "source_follower.cir", "pmos_cs.cir"])
@pytest.mark.parametrize("steps", [False, True])
def test_print_check_writes_what_two_console_prints_write(name, steps):
    """Plain text in one piece where the console prints plain text, rich's printing otherwise: the
    same characters either way, at widths where the table fits and where it does not."""
    view = check_renderable(check_circuit(read_netlist(EXAMPLES / name), None, tolerance=0.05), steps=steps)
    for width in (20, 30, 60, 80, 132):
        for color_system, terminal, no_color in CONSOLES:
            consoles = [Console(file=io.StringIO(), width=width, color_system=color_system, no_color=no_color,
                                force_terminal=terminal, highlight=False, soft_wrap=False) for _ in range(2)]
            consoles[0].print(view)
            consoles[0].print()
            print_check(consoles[1], view)
            assert consoles[1].file.getvalue() == consoles[0].file.getvalue(), (width, color_system)


def test_plain_text_only_for_a_plain_console_and_a_view_laid_out_here():
    view = check_renderable(check_circuit(read_netlist(EXAMPLES / "cs_divider.cir"), None, tolerance=0.05))
    plain = Console(file=io.StringIO(), width=100, color_system=None, highlight=False, soft_wrap=False)
    assert plain_text(view, plain) == printed(rich_equivalent(view), 100, None, False)
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
