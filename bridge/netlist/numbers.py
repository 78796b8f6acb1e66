"""SPICE numbers: scale suffixes in, engineering notation out.

The reading rules are ngspice's (manual, section 2.1.4.2 "Numbers" and 2.1.4.3
"Letters following a number", Table 2.2): an integer or decimal, an optional
exponent, then an optional scale factor T G MEG K MIL M U N P F (any case, `M` is
milli), then any letters, which are ignored (`10uF`, `1kOhm`, `5V`).

ngspice 39 has no atto suffix: `1a` reads as 1 (measured with the Debian build,
and absent from Table 2.2), so biasbridge reads it the same way — the simulator
must see the value the designer's simulator would see.

The notation written out follows from the same rules: below femto there is no prefix a
SPICE user reads right (no atto), so such values are written with an exponent; mega is
written with an exponent too (`150e6 V`), because to a SPICE user `M` is milli — except
for resistances, where `MΩ` is how a designer reads and writes a resistor. Digits are
rounded half away from zero on the value's decimal digits (12 significant, float noise
below that dropped), so 1.5625 and 1.5625000000000002 both show as 1.563.

The micro sign `µ` (U+00B5) is a scale factor like `u`: ngspice 39 reads `3µ`, `3µF`,
`W=20µ` and `{2µ*2}` as micro (measured with `ngspice -b`; not in Table 2.2). The Greek
letter `μ` (U+03BC), which looks the same, it does not: `3μ` is 3 there, the letter
ignored. That reading is refused here with a hint rather than followed silently.
"""

from __future__ import annotations

import math
import re

# Scale factors of ngspice's Table 2.2. Order matters: "meg" and "mil" are tested
# before the single letter "m".
# Powers of ten, so that `10u` is the exact decimal 1e-05 rather than 10 * 1e-6.
_SCALE_WORDS: dict[str, int] = {"meg": 6, "mil": -6}
_MIL_FACTOR = 25.4
_SCALE_LETTERS: dict[str, int] = {"t": 12, "g": 9, "k": 3, "m": -3, "u": -6, "n": -9, "p": -12, "f": -15}

_NUMBER = re.compile(
    r"""([+-]?(?:\d+\.?\d*|\.\d+))   # mantissa
        (?:[eE]([+-]?\d+))?             # exponent
        (.*)                            # letters
    """,
    re.VERBOSE | re.DOTALL,
)

# The micro sign, read as micro (see the module notes), and the look-alike that is not.
_MICRO_SIGN = "\u00b5"
_GREEK_MU = "\u03bc"
# What a byte that is not UTF-8 becomes when the netlist is decoded (source.decode_source).
_UNDECODABLE = "\ufffd"


# Fields already read with the default rules, and their values: the same few numbers (`0`, `5`,
# `2u`) stand on card after card. Bounded: past the limit nothing more is kept.
_READ: dict[str, float] = {}
_READ_LIMIT = 4096


class NumberError(ValueError):
    """A field that is not a SPICE number; `offset` is where it goes wrong."""

    def __init__(self, message: str, offset: int = 0) -> None:
        super().__init__(message)
        self.offset = offset


def parse_number(text: str, *, allow_mil: bool = True) -> float:
    """Value of a SPICE number field such as `4.7k`, `1MEG`, `10uF`, `2.5e-3V`.

    `allow_mil` is false inside `{...}` expressions, where ngspice's expression
    parser does not know MIL.
    """
    if allow_mil and text in _READ:
        return _READ[text]
    match = _NUMBER.fullmatch(text)
    if match is None:
        raise NumberError(f"`{text}` is not a number", 0)
    mantissa, exponent_text, letters = match.groups()
    exponent = int(exponent_text) if exponent_text else 0
    mil = False
    if letters:
        # Plain ASCII letters (`k`, `uF`, `Meg`) are always fine: look closer only otherwise.
        if not (letters.isascii() and letters.isalpha()):
            _check_letters(text, letters, match.start(3))
        lowered = letters.lower()
        word = lowered[:3]
        if word == "meg" or (word == "mil" and allow_mil):
            exponent += _SCALE_WORDS[word]
            mil = word == "mil"
        elif lowered[0] == _MICRO_SIGN:
            exponent -= 6
        else:
            exponent += _SCALE_LETTERS.get(lowered[0], 0)
    value = float(f"{mantissa}e{exponent}")
    if mil:
        value *= _MIL_FACTOR
    if not math.isfinite(value):
        raise NumberError(f"`{text}` is out of range", 0)
    if allow_mil and len(_READ) < _READ_LIMIT:
        _READ[text] = value
    return value


def _check_letters(text: str, letters: str, start: int) -> None:
    """The letters after a number must be letters: say which character is not, and where."""
    # Only the first letter can be a scale factor: the rest are ignored, as in ngspice.
    if letters[0] == _GREEK_MU:
        raise NumberError(
            f"`{text}`: the Greek letter `\u03bc` (U+03BC) is not a scale factor — ngspice 39 "
            f"would read {text[:start]}, ignoring it; write `u` or the micro sign `\u00b5` (U+00B5) for micro",
            start,
        )
    if letters[0] == _UNDECODABLE:
        raise NumberError(
            f"`{text}`: a byte that is not UTF-8 follows the number (ngspice 39 reads a Latin-1 "
            "micro sign there as micro and refuses other such bytes); write `u` for micro",
            start,
        )
    for index, char in enumerate(letters):
        if not (char.isalpha() or ord(char) > 127):
            raise NumberError(
                f"`{text}` is not a number (unexpected `{char}` after `{text[:start + index]}`)",
                start + index,
            )


_PREFIXES: tuple[tuple[int, str], ...] = (
    (12, "T"),
    (9, "G"),
    (6, "M"),
    (3, "k"),
    (0, ""),
    (-3, "m"),
    (-6, "µ"),
    (-9, "n"),
    (-12, "p"),
    (-15, "f"),
)
_PREFIX_OF = dict(_PREFIXES)
_SCALE_OF = {exponent: 10.0**exponent for exponent, _ in _PREFIXES}  # the very floats 10.0**exponent gives


# What a solved operating point resolves, per unit: ngspice's defaults (ngspice manual, section
# 15.1.2 "OP and DC Solution Options"): VNTOL = 1 µV, the absolute voltage error tolerance;
# ABSTOL = 1 pA, the absolute current error tolerance; GMIN = 1e-12 S, the conductance ngspice
# puts in parallel with every junction (a conductance below it is below what the solver adds).
# A solved value within these of zero is zero of its unit: its digits are the solver's noise.
VNTOL = 1e-6
ABSTOL = 1e-12
GMIN = 1e-12
SOLVER_RESOLUTION: dict[str, float] = {"V": VNTOL, "A": ABSTOL, "S": GMIN}

_NOISE_DIGITS = 12  # significant digits kept before rounding: float noise sits below these


def _round_half_away(scaled: float, digits: int) -> str:
    """`scaled` to `digits` significant digits (as %g writes them), ties away from zero, on the
    decimal value with float noise dropped: 1.5625 and 1.5625000000000002 both give 1.563."""
    text = f"{scaled:.{digits}g}"
    # Cheap first look: far from a tie (in float arithmetic, with room for its noise) %g is right.
    magnitude = abs(scaled)
    shift = digits - 1 - math.floor(math.log10(magnitude))
    if shift < 300:  # beyond, 10**shift overflows (a subnormal value): the exact look below decides
        kept = magnitude * 10.0 ** shift
        if abs(kept - math.floor(kept) - 0.5) > 1e-9 * kept:
            return text
    decimal = f"{scaled:.{_NOISE_DIGITS - 1}e}"
    mantissa, _, power = decimal.partition("e")
    if mantissa.lstrip("-").replace(".", "")[digits:].rstrip("0") != "5":
        return text  # not a tie: %g's rounding of the binary value is the decimal rounding
    from decimal import ROUND_HALF_UP, Decimal  # here alone: only a tie needs it (~1 ms to import)

    quantum = Decimal(1).scaleb(int(power) - digits + 1)
    return f"{float(Decimal(decimal).quantize(quantum, rounding=ROUND_HALF_UP)):.{digits}g}"


def engineering(value: float | None, unit: str = "", digits: int = 4, *, resolution: float = 0.0) -> str:
    """`value` in engineering notation with an SI prefix: 1e-3 Ω → `1 mΩ`.

    A value within `resolution` of zero (see SOLVER_RESOLUTION), and zero itself, is `0 unit`
    (never `-0`). Below femto, above tera and at mega (but for Ω) the value is written with an
    exponent.
    """
    if value is None:
        return "—"
    if not math.isfinite(value):
        return f"{value:g} {unit}".rstrip()
    if value == 0 or abs(value) <= resolution:
        return f"0 {unit}".rstrip()
    exponent = math.floor(math.log10(abs(value)) / 3) * 3
    if exponent > 12 or exponent < -15:
        # Past tera or below femto: no prefix a SPICE user reads right (none above T, no atto in
        # ngspice), so a power of ten instead.
        return f"{_round_half_away(value, digits)} {unit}".rstrip()
    scaled = value / _SCALE_OF[exponent]
    text = _round_half_away(scaled, digits)
    # Rounding may carry into the next decade group (999.96 → 1000), which it can only from 950 up
    # (one significant digit; 949.5 leaves room for the float noise of the scaling); below that
    # the text need not be read back.
    if abs(scaled) >= 949.5 and abs(float(text)) >= 1000:
        if exponent == 12:
            return f"{_round_half_away(value, digits)} {unit}".rstrip()
        exponent += 3
        text = _round_half_away(value / _SCALE_OF[exponent], digits)
    if exponent == 6 and unit != "Ω":  # `M` reads as milli in SPICE: mega as a power of ten
        return f"{text}e6 {unit}".rstrip()
    return f"{text} {_PREFIX_OF[exponent]}{unit}".rstrip()
