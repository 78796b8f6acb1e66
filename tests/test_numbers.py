"""SPICE number fields: the scale-factor rules of the ngspice manual, and ngspice itself."""

from __future__ import annotations

import math
import random
from decimal import ROUND_HALF_UP, Decimal

import pytest
from conftest import needs_ngspice, ngspice_batch_op

from bridge.netlist.numbers import SOLVER_RESOLUTION, NumberError, engineering, parse_number

# reference: ngspice manual (Debian ngspice-doc 39), section 2.1.4.2 "Numbers",
# Table 2.2 "Ngspice scale factors", and 2.1.4.3 "Letters following a number".
MANUAL_CASES = [
    ("12", 12.0),
    ("-44", -44.0),
    ("3.14159", 3.14159),
    ("1e-14", 1e-14),
    ("2.65e3", 2650.0),
    ("1T", 1e12),
    ("1G", 1e9),
    ("1Meg", 1e6),
    ("1MEG", 1e6),
    ("1K", 1e3),
    ("1mil", 25.4e-6),
    ("1m", 1e-3),
    ("1M", 1e-3),  # "Note that `M' or `m' denote `milli'"
    ("1u", 1e-6),
    ("1n", 1e-9),
    ("1p", 1e-12),
    ("1f", 1e-15),
    # "10, 10V, 10Volts, and 10Hz all represent the same number"
    ("10", 10.0),
    ("10V", 10.0),
    ("10Volts", 10.0),
    ("10Hz", 10.0),
    # "M, MA, MSec, and MMhos all represent the same scale factor"
    ("1MA", 1e-3),
    ("1MSec", 1e-3),
    ("1MMhos", 1e-3),
    # "1000, 1000.0, 1000Hz, 1e3, 1.0e3, 1kHz, and 1k all represent the same number"
    ("1000", 1000.0),
    ("1000.0", 1000.0),
    ("1000Hz", 1000.0),
    ("1e3", 1000.0),
    ("1.0e3", 1000.0),
    ("1kHz", 1000.0),
    ("1k", 1000.0),
    # unit letters after a scale factor, as designers write them
    ("10uF", 10e-6),
    ("1kOhm", 1e3),
    ("56Ohms", 56.0),
    ("20um", 20e-6),
    ("1MHz", 1e-3),  # one milli-hertz, exactly as the manual's rule says
    ("1F", 1e-15),  # one femto
    (".5", 0.5),
    ("5.", 5.0),
    ("+2.5e-3V", 2.5e-3),
]


@pytest.mark.parametrize("text, expected", MANUAL_CASES)
def test_number_follows_manual_scale_rules(text: str, expected: float) -> None:
    assert math.isclose(parse_number(text), expected, rel_tol=1e-15)


def test_scale_factor_is_exact_decimal() -> None:
    # 10u is the decimal 1e-05, not 10 * 1e-6 = 9.999999999999999e-06.
    assert parse_number("10u") == 1e-05
    assert parse_number("4.7k") == 4700.0


def test_atto_is_not_a_scale_factor_in_ngspice() -> None:
    # Table 2.2 has no atto, and ngspice 39 reads `1a` as 1 (see the ngspice check below).
    assert parse_number("1a") == 1.0


def test_mil_is_not_known_inside_expressions() -> None:
    # spice-syntax notes: inside {...} expressions MIL is not recognised; `m` still is.
    assert parse_number("1mil", allow_mil=False) == 1e-3


@pytest.mark.parametrize("text", ["1.2.3k", "abc", "", "1k%", "--1", "1e5.5", "k1", "1,5"])
def test_malformed_number_is_rejected(text: str) -> None:
    with pytest.raises(NumberError):
        parse_number(text)


def test_micro_sign_is_micro() -> None:
    # reference: ngspice 39 itself (see test_micro_sign_reads_as_ngspice_reads_it below).
    assert parse_number("10\u00b5F") == 1e-05
    assert parse_number("3\u00b5") == 3e-06
    assert parse_number("2.2\u00b5A") == 2.2e-06
    assert parse_number("1e3\u00b5") == 1e-03
    assert parse_number("1\u00b5", allow_mil=False) == 1e-06


def test_greek_mu_gets_a_hint_naming_what_ngspice_would_read() -> None:
    # ngspice 39 reads `10μF` (Greek mu, U+03BC) as 10: refused, with the value it would be.
    with pytest.raises(NumberError, match="ngspice 39 would read 10, ignoring it; write `u`") as caught:
        parse_number("10\u03bcF")
    assert caught.value.offset == 2
    assert parse_number("10k\u03bc") == 1e4  # after the scale factor it is one more ignored letter


def test_undecodable_byte_after_a_number_is_refused() -> None:
    # A Latin-1 micro sign (byte 0xB5) decodes to U+FFFD; ngspice reads that byte as micro.
    with pytest.raises(NumberError, match="not UTF-8") as caught:
        parse_number("3\ufffd")
    assert caught.value.offset == 1


@needs_ngspice
def test_micro_sign_reads_as_ngspice_reads_it(tmp_path) -> None:
    # reference: ngspice 39 run directly in batch mode on UTF-8 text. 1 A into each resistor:
    # the node voltage is the resistance ngspice read. The micro sign (U+00B5) is micro in a
    # value, a `.param` and an expression; the Greek mu (U+03BC) is ignored as a unit letter.
    from bridge.netlist import read_netlist

    body = (
        ".param pa=3\u00b5\n"
        "I1 0 a 1\nR1 a 0 10\u00b5Ohm\n"
        "I2 0 b 1\nR2 b 0 {pa}\n"
        "I3 0 c 1\nR3 c 0 {2\u00b5*2}\n"
        "I4 0 d 1\nR4 d 0 2\u00b5meg\n"
    )
    deck = tmp_path / "micro.cir"
    deck.write_text("micro sign\n" + body + ".op\n.end\n", encoding="utf-8")
    measured = ngspice_batch_op(deck)
    circuit = read_netlist(deck)
    for node, resistor in (("a", "R1"), ("b", "R2"), ("c", "R3"), ("d", "R4")):
        assert math.isclose(circuit.element(resistor).value, measured[node], rel_tol=1e-9), resistor
    assert measured["a"] == pytest.approx(10e-6) and measured["c"] == pytest.approx(4e-6)

    greek = tmp_path / "greek.cir"
    greek.write_text("greek mu\nI1 0 a 1\nR1 a 0 3\u03bc\n.op\n.end\n", encoding="utf-8")
    assert ngspice_batch_op(greek)["a"] == pytest.approx(3.0)
    with pytest.raises(NumberError, match="would read 3,"):
        parse_number("3\u03bc")


@needs_ngspice
@pytest.mark.parametrize("text", ["1k", "1M", "1MEG", "1mil", "10uF", "2.2kOhm", "1a", "3e2m", "1g"])
def test_number_matches_ngspice_reading(tmp_path, text: str) -> None:
    # reference: ngspice 39 run directly in batch mode. A 1 A source into the resistor
    # makes the node voltage equal to the resistance ngspice read.
    deck = tmp_path / "r.cir"
    deck.write_text(f"suffix check\nI1 0 n 1\nR1 n 0 {text}\n.op\n.end\n")
    assert math.isclose(ngspice_batch_op(deck)["n"], parse_number(text), rel_tol=1e-6)


@pytest.mark.parametrize(
    "value, unit, shown",
    [
        (1e-3, "Ω", "1 mΩ"),
        (4700.0, "Ω", "4.7 kΩ"),
        (1e6, "Ω", "1 MΩ"),
        (999.96, "Ω", "1 kΩ"),
        (1e-15, "F", "1 fF"),
        (-0.0047, "A", "-4.7 mA"),
        (0.0, "V", "0 V"),
        (None, "V", "—"),
    ],
)
def test_engineering_notation_shows_the_prefix(value, unit, shown) -> None:
    assert engineering(value, unit) == shown


def _half_away(value: Decimal, digits: int) -> str:
    """`value` to `digits` significant digits, ties away from zero, written as %g writes it."""
    quantum = Decimal(1).scaleb(value.adjusted() - digits + 1)
    return f"{float(value.quantize(quantum, rounding=ROUND_HALF_UP)):.{digits}g}"


def _engineering_reference(value: float, unit: str, digits: int) -> str:
    """The notation computed the plain way, in decimal: the value to 12 significant digits, scaled
    exactly, rounded half away from zero, carried when the rounding reaches 1000; an exponent
    below femto, past tera and for mega (but for Ω)."""
    decimal = Decimal(f"{value:.11e}")
    if abs(value) < 1e-15 or abs(value) >= 1e15:
        return f"{_half_away(decimal, digits)} {unit}".rstrip()
    exponent = max(-15, math.floor(math.log10(abs(value)) / 3) * 3)
    text = _half_away(decimal.scaleb(-exponent), digits)
    if abs(float(text)) >= 1000:
        if exponent == 12:
            return f"{_half_away(decimal, digits)} {unit}".rstrip()
        exponent += 3
        text = _half_away(decimal.scaleb(-exponent), digits)
    if exponent == 6 and unit != "Ω":
        return f"{text}e6 {unit}".rstrip()
    prefix = {12: "T", 9: "G", 6: "M", 3: "k", 0: "", -3: "m", -6: "µ", -9: "n", -12: "p", -15: "f"}
    return f"{text} {prefix[exponent]}{unit}".rstrip()


def test_engineering_notation_rounds_and_carries_as_the_plain_computation() -> None:
    rng = random.Random(7)
    near_carry = [949.9999, 950.0, 950.0001, 999.4999, 999.5, 999.95, 999.96, 999.9999999]
    for _ in range(20000):
        value = rng.choice([rng.uniform(-1, 1) * 10 ** rng.uniform(-22, 16),
                            rng.choice(near_carry) * 10.0 ** (3 * rng.randint(-7, 5)) * rng.choice([1, -1])])
        for digits in (1, 2, 3, 4, 6):
            for unit in ("V", "", "Ω"):
                assert engineering(value, unit, digits) == _engineering_reference(value, unit, digits), (value, digits)


# reference: ngspice manual (Debian ngspice-doc 39), section 15.1.2 "OP and DC Solution Options":
# VNTOL = 1 µV, ABSTOL = 1 pA, GMIN = 1e-12 S are the defaults.
def test_solver_resolution_is_ngspice_default_tolerances() -> None:
    assert SOLVER_RESOLUTION == {"V": 1e-6, "A": 1e-12, "S": 1e-12}


@pytest.mark.parametrize(
    "value, unit, shown",
    [
        (-1.902e-27, "V", "0 V"),  # ngspice's reading of a node held at zero
        (1.713e-16, "V", "0 V"),
        (-0.0, "V", "0 V"),
        (4.4e-16, "V", "0 V"),
        (9.9e-7, "V", "0 V"),
        (1.2e-6, "V", "1.2 µV"),  # just above VNTOL: a value
        (-1.532e-10, "A", "-153.2 pA"),
        (3.31e-13, "A", "0 A"),
        (2e-12, "A", "2 pA"),
        (5e-13, "S", "0 S"),
    ],
)
def test_a_solved_value_at_the_solver_resolution_is_zero_of_its_unit(value, unit, shown) -> None:
    assert engineering(value, unit, resolution=SOLVER_RESOLUTION[unit]) == shown


def test_minus_zero_and_atto_are_never_written() -> None:
    assert engineering(-0.0, "V") == "0 V"
    # Without a resolution (an element value, say) a tiny value keeps its digits, with an exponent:
    # ngspice 39 has no atto suffix, so `171.3 aV` would not read back as the value.
    assert engineering(1.713e-16, "V") == "1.713e-16 V"
    assert engineering(-1.902e-27, "V") == "-1.902e-27 V"
    assert engineering(1e-18, "F") == "1e-18 F"
    assert parse_number(engineering(1.713e-16, "V").split()[0]) == 1.713e-16


def test_past_tera_is_a_power_of_ten_not_a_prefix_with_digits_to_spare() -> None:
    # ngspice has no prefix above T (manual, Table 2.2): a forward-biased junction's 9e69 A
    # was shown as `9.002e+57 TA`; a carry out of T as `1000 TA`.
    assert engineering(9.002e69, "A") == "9.002e+69 A"
    assert engineering(999.96e12, "A") == "1e+15 A"
    assert engineering(999.4e12, "A") == "999.4 TA"
    assert parse_number(engineering(9.002e69, "A").split()[0]) == 9.002e69


def test_mega_cannot_be_read_as_milli() -> None:
    # SPICE's `M` is milli (manual, Table 2.2): a voltage of 150 MV would read as 150 mV.
    assert engineering(150e6, "V") == "150e6 V"
    assert engineering(1.5e6, "A") == "1.5e6 A"
    assert engineering(2.2e6, "") == "2.2e6"
    assert parse_number(engineering(150e6, "V").split()[0]) == 150e6
    # A resistance keeps MΩ: that is how a designer reads a resistor (and `parse` shows `1M` as 1 mΩ).
    assert engineering(150e6, "Ω") == "150 MΩ"


@pytest.mark.parametrize("value", [1.5625, 1.5625000000000002, 1.5624999999999998])
def test_a_tie_rounds_half_away_from_zero_the_same_in_every_column(value) -> None:
    # Three float neighbours of the decimal 1.5625 (one column's closed form, another's Newton):
    # one text, the decimal tie rounded away from zero.
    assert engineering(value, "V") == "1.563 V"
    assert engineering(-value, "V") == "-1.563 V"


def test_rounding_half_away_from_zero_on_the_decimal_value() -> None:
    assert engineering(2.5, "V", digits=1) == "3 V"
    assert engineering(0.0125, "A", digits=2) == "13 mA"
    assert engineering(999.95, "Ω") == "1 kΩ"  # the tie carries into the next prefix
    assert engineering(1.23449, "V") == "1.234 V"  # no tie: plain rounding


@needs_ngspice
def test_latin1_micro_byte_is_micro_to_ngspice_and_refused_here(tmp_path) -> None:
    # reference: ngspice 39 (`ngspice -b`) reads the lone byte 0xB5 after a number as micro, and
    # stops with "UTF-8 syntax error" on other bytes that are not UTF-8 (0x80, 0xE9, 0xFF, ...).
    # Decoded, every such byte is U+FFFD: which one it was is lost, so the number is refused.
    from bridge.netlist import NetlistError, read_netlist

    deck = tmp_path / "latin1.cir"
    deck.write_bytes(b"latin-1 micro\nI1 0 a 1\nR1 a 0 3\xb5\n.op\n.end\n")
    assert ngspice_batch_op(deck)["a"] == pytest.approx(3e-6)
    with pytest.raises(NetlistError, match="not UTF-8"):
        read_netlist(deck)


def test_a_number_read_before_reads_the_same_and_mil_only_where_allowed() -> None:
    # Numbers already read are kept (parse_number's memo): the rules must not change with it.
    # MIL (25.4 µ) is a scale outside expressions only; inside `{...}` `5mil` is 5 milli.
    for _ in range(2):
        assert parse_number("5mil") == pytest.approx(5 * 25.4e-6)
        assert parse_number("5mil", allow_mil=False) == pytest.approx(5e-3)
        assert parse_number("2u") == 2e-6 and parse_number("2u", allow_mil=False) == 2e-6
    for wrong in ("k1", "1..2"):
        for _ in range(2):
            with pytest.raises(NumberError):
                parse_number(wrong)
