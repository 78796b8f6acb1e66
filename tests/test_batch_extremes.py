"""Stages with values far outside any design (a slipped exponent, tera read for a size): the
check answers what it can and says what it could not, and the batch goes on. Each of these
raised out of `check` and ended the batch (tests/batch_corpus/extreme_*.cir run them there)."""

from __future__ import annotations

from pathlib import Path

from bridge.analysis.hand import HandModel
from bridge.check import solve_own_columns
from bridge.netlist import read_netlist
from bridge.netlist.numbers import engineering

CORPUS = Path(__file__).resolve().parent / "batch_corpus"


def test_a_value_below_the_smallest_normal_double_is_written():
    # It raised OverflowError (10.0 ** 312) while rounding 1.5e-309 to four digits.
    assert engineering(1.5e-309, "A/V²") == "1.5e-309 A/V²"
    assert engineering(-2.5e-310, "A") == "-2.5e-310 A"
    assert engineering(5e-324, "A") == "4.941e-324 A"  # the smallest subnormal, 4.94065645841e-324


def test_a_hand_gain_factor_below_the_smallest_normal_double_is_shown_in_the_working():
    hand = HandModel(read_netlist(CORPUS / "extreme_length.cir")).solve()
    assert str(hand.steps[0]) == "M1: gain factor K = KP·W/L: K = 150 µA/V²·10 µm/1e+300 m = 1.5e-309 A/V²"


def test_an_effect_with_which_the_hand_model_has_no_solution_is_left_out_with_a_finding():
    own = solve_own_columns(read_netlist(CORPUS / "extreme_supply.cir"))
    left_out = [f for f in own.findings if "left out of the causes" in f.message]
    assert left_out and all(f.code == "hand-unavailable" for f in left_out)
    assert own.with_effect is not None
    assert len(own.with_effect) + len(left_out) == 2  # λ and γ: each solved or said to be left out


def test_a_closed_form_that_loses_its_precision_gives_way_to_the_numerical_path():
    # At 1 TV the closed form's drain current and the device equations' differ in the tenth digit;
    # that raised RuntimeError.
    hand = HandModel(read_netlist(CORPUS / "extreme_diode_supply.cir")).solve()
    assert not hand.closed_form
    assert hand.devices["M1"].id > 4.5e7
