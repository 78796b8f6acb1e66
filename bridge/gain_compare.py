"""The small-signal columns side by side: hand against ngspice within the tolerance, the level-1
column against ngspice within 0.5 %, and the attribution (the hand model re-solved with one
effect on at a time), as findings in check's vocabulary.

The reference is ngspice; without it, the level-1 column (as in `check`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from .netlist.numbers import engineering
from .vocabulary import COLUMN_NAMES, Finding

LEVEL1_TOLERANCE = 0.005  # the level-1 linearisation against ngspice's .ac: 0.5 %
QUANTITIES = ("gain", "rin", "rout")
QUANTITY_NAMES = {"gain": "midband gain", "rin": "Rin", "rout": "Rout", "low_hz": "low band edge",
                  "high_hz": "upper band edge"}  # fmt: skip
QUANTITY_UNITS = {"gain": "V/V", "rin": "Ω", "rout": "Ω", "low_hz": "Hz", "high_hz": "Hz"}


def relative(value: float, reference: float) -> float:
    """(value − reference)/reference: for a signed gain, −4 % is 4 % smaller in magnitude (a value of
    the other sign is below −100 %); infinite when the reference is 0 and the value is not."""
    if reference == 0.0:
        return 0.0 if value == 0.0 else math.inf
    return (value - reference) / reference


def _shown(value: float, unit: str) -> str:
    if math.isinf(value):
        return "∞"
    return f"{value:.4g}" if unit == "V/V" else engineering(value, unit)


def _percent(change: float) -> str:
    return f"{100.0 * change:+.1f} %" if math.isfinite(change) else "from 0"


def _difference(value: float, reference: float, change: float) -> str:
    """The relative difference in words: a percentage, or why there is none."""
    if math.isfinite(change):
        return _percent(change)
    if reference == 0.0:
        return "from 0"
    return "infinite against a finite value"


def compare_columns(
    columns: Mapping[str, Mapping[str, float | None]], tolerance: float, subject: str | None, line: int | None,
) -> list[Finding]:  # fmt: skip
    """`columns`: quantity → {"hand", "level1", "sim"}. Each hand value beyond `tolerance` of the
    reference, and each level-1 value beyond 0.5 % of ngspice's, as a finding."""
    findings: list[Finding] = []
    for quantity, values in columns.items():
        hand, level1, sim = values.get("hand"), values.get("level1"), values.get("sim")
        reference_column = "sim" if sim is not None else "level1"
        reference = sim if sim is not None else level1
        unit = QUANTITY_UNITS[quantity]
        name = QUANTITY_NAMES[quantity]
        if hand is not None and reference is not None and not (math.isinf(hand) and math.isinf(reference)):
            change = relative(hand, reference)
            if abs(change) > tolerance:
                findings.append(Finding(
                    "warning", "gain-hand-differs",
                    f"{name}: hand {_shown(hand, unit)} vs {COLUMN_NAMES[reference_column]} {_shown(reference, unit)} "
                    f"({_difference(hand, reference, change)}), beyond the {100 * tolerance:g} % tolerance",
                    line, subject, quantity=quantity,
                ))  # fmt: skip
        if level1 is not None and sim is not None and quantity in QUANTITIES and not (
            math.isinf(level1) and math.isinf(sim)
        ):
            change = relative(level1, sim)
            if abs(change) > LEVEL1_TOLERANCE:
                findings.append(Finding(
                    "error", "gain-solver-differs",
                    f"{name}: level-1 {_shown(level1, unit)} vs ngspice {_shown(sim, unit)} "
                    f"({_difference(level1, sim, change)}), "
                    "beyond 0.5 %: a defect of ours or a model feature the level-1 linearisation does not cover",
                    line, subject, quantity=quantity,
                ))  # fmt: skip
    return findings


def attribution(hand_gain: float | None, with_effect: Mapping[str, float]) -> dict[str, float]:
    """Per effect, the relative change of the hand gain it causes alone, largest first."""
    if hand_gain is None or hand_gain == 0.0 or not math.isfinite(hand_gain):
        return {}
    changes = {effect: relative(value, hand_gain) for effect, value in with_effect.items()}
    return dict(sorted(changes.items(), key=lambda item: -abs(item[1])))


# --- the band edges: estimates by construction ------------------------------------------------

# The hand band edges are estimates (short-circuit time constants, Miller): beyond --tol but within
# this of the reference, with the hand network's own −3 dB point within --tol, the difference is
# the estimate's and an info says why (common practice, no source).
BAND_TOLERANCE = 0.5
BAND_NAMES = {"low_hz": "low band edge", "high_hz": "upper band edge"}


def _hz(value: float) -> str:
    return engineering(value, "Hz")


def band_findings(
    band: Mapping[str, Mapping[str, float | None]],
    evidence,
    tolerance: float,
    band_tolerance: float,
    places: Mapping[str, tuple[int | None, str | None]],
    *,
    junction_capacitances: bool = False,
    swept: str | None = None,
    sweep: tuple[float, float] | None = None,
) -> list[Finding]:
    """The band edges side by side. `band`: "low_hz"/"high_hz" → {"hand", "level1", "sim"};
    `evidence`: ``band_edges.BandEvidence`` of the hand network (or None); `places`: per edge the
    (line, subject) a finding points at (the dominant capacitor's for the low edge, the MOSFET's
    for the upper one).

    A level-1 edge beyond 0.5 % of ngspice's is an error (not judged when the card gives bulk
    junction capacitances, which the level-1 column leaves out). A hand estimate beyond
    `tolerance` of the reference is a warning, unless the hand network's own −3 dB point is
    within `tolerance` (the difference is then the estimate's alone) and the estimate within
    `band_tolerance`: then an info. Either way a cause line says what the estimate assumed and
    what this circuit's numbers are. A hand estimate of an edge the reference column's response
    (`swept`: "sim" or "level1", over `sweep`) never shows is a warning too."""
    findings: list[Finding] = []
    for key in ("low_hz", "high_hz"):
        values = band.get(key) or {}
        hand, level1, sim = values.get("hand"), values.get("level1"), values.get("sim")
        line, subject = places.get(key, (None, None))
        name = BAND_NAMES[key]
        if level1 is not None and sim is not None and not junction_capacitances:
            change = relative(level1, sim)
            if abs(change) > LEVEL1_TOLERANCE:
                findings.append(Finding(
                    "error", "gain-solver-differs",
                    f"{name}: level-1 {_hz(level1)} vs ngspice {_hz(sim)} ({_percent(change)}), beyond 0.5 %: a "
                    "defect of ours or a model feature the level-1 linearisation does not cover", line, subject,
                    quantity=key,
                ))  # fmt: skip
        reference_column = "sim" if sim is not None else "level1"
        reference = sim if sim is not None else level1
        if hand is not None and reference is None and swept is not None and sweep is not None:
            exact = getattr(evidence, key, None) if evidence is not None else None
            findings.append(Finding(
                "warning", "gain-hand-differs",
                f"{name}: hand estimate {_hz(hand)}, but the {COLUMN_NAMES[swept]} response never falls 3 dB below "
                f"its midband gain " + (f"down to {_hz(sweep[0])}" if key == "low_hz" else f"up to {_hz(sweep[1])}")
                + ": the circuit has no such edge there",
                line, subject, quantity=key,
            ))  # fmt: skip
            cause = (_low_cause if key == "low_hz" else _high_cause)(hand, exact, evidence)
            cause += ("; the hand network's own response has no such edge either" if exact is None else
                      f"; the hand network's own −3 dB point is {_hz(exact)}")
            findings.append(Finding("info", "band-cause", "cause: " + cause, line, subject, quantity=key))
            continue
        if hand is None or reference is None or not (math.isfinite(hand) and math.isfinite(reference)):
            continue
        change = relative(hand, reference)
        if abs(change) <= tolerance:
            continue
        exact = getattr(evidence, key, None) if evidence is not None else None
        model_change = relative(exact, reference) if exact else None
        estimate_only = model_change is not None and abs(model_change) <= tolerance
        said = (f"{name}: hand estimate {_hz(hand)} vs {COLUMN_NAMES[reference_column]} {_hz(reference)} "
                f"({_percent(change)}), beyond the {100 * tolerance:g} % tolerance")
        if estimate_only and abs(change) <= band_tolerance:
            findings.append(Finding(
                "info", "band-estimate",
                f"{said}, within the {100 * band_tolerance:g} % estimate tolerance (--band-tol): the hand network's "
                f"own −3 dB point is {_hz(exact)} ({_percent(model_change)}), so the difference is the estimate's",
                line, subject, quantity=key,
            ))  # fmt: skip
        else:
            beyond = f" and the {100 * band_tolerance:g} % estimate tolerance" if abs(change) > band_tolerance else ""
            findings.append(Finding("warning", "gain-hand-differs", said + beyond, line, subject, quantity=key))
        cause = (_low_cause if key == "low_hz" else _high_cause)(hand, exact, evidence)
        if model_change is not None:
            cause += (f"; the hand network's own −3 dB point is {_hz(exact)} (the estimate "
                      f"{_percent(relative(hand, exact))} from it, {_percent(model_change)} from "
                      f"{COLUMN_NAMES[reference_column]})")
            if abs(model_change) > tolerance:
                cause += (", so beyond the estimate the hand model itself (ro infinite, no body effect, the hand "
                          "bias point) differs there")
        findings.append(Finding("info", "band-cause", "cause: " + cause, line, subject, quantity=key))
    return findings


def _low_cause(hand: float, exact: float | None, evidence) -> str:
    words = ("the short-circuit time-constant estimate Σ 1/(2π·Rk·Ck) assumes one dominant pole")
    if evidence is None:
        return words
    if evidence.low_poles_hz and len(evidence.low_poles_hz) == 1 and len(evidence.terms) == 1:
        term = evidence.terms[0]
        return (f"the short-circuit time-constant estimate: one capacitor, {term.capacitor}, so it is the hand "
                f"network's one low-frequency pole, {_hz(term.pole_hz)} (found numerically), exact for that network")
    if evidence.low_poles_hz:
        poles = ", ".join(_pole(p) for p in evidence.low_poles_hz if p.imag >= 0.0)
        words += (f"; it is exactly the sum of the hand network's low-frequency poles (here {poles}, found "
                  "numerically), and the −3 dB point lies below that sum where several are comparable or zeros "
                  "sit near them")
    terms = evidence.terms
    if len(terms) >= 2:
        words += (f"; here the two largest terms are {_hz(terms[0].pole_hz)} ({terms[0].capacitor}) and "
                  f"{_hz(terms[1].pole_hz)} ({terms[1].capacitor})")
    elif len(terms) == 1:
        words += f"; here one term, {_hz(terms[0].pole_hz)} ({terms[0].capacitor})"
    for capacitor, resistor, zero in evidence.zeros:
        words += f"; {capacitor} across {resistor} puts a zero at 1/(2π·{resistor}·{capacitor}) = {_hz(zero)}"
    if evidence.inductors:
        words += f"; it takes capacitors only, and {', '.join(evidence.inductors)} (inductance) is left out of it"
    return words


def _pole(pole: complex) -> str:
    """A pole in Hz (the magnitude of its real part), a complex pair as `a ± jb Hz`."""
    if pole.imag == 0.0:
        return _hz(pole.real)
    return f"{engineering(pole.real, '')} ± j{_hz(abs(pole.imag))}".strip()


def _high_cause(hand: float, exact: float | None, evidence) -> str:
    words = ("the Miller estimate assumes one dominant pole: it holds the gain across Cgd at its midband value "
             "and adds the time constants at the gate and at the drain")
    if evidence is not None and evidence.miller:
        tau_in, tau_out = evidence.miller
        words += (f" (here τin = {engineering(tau_in, 's')}, τout = {engineering(tau_out, 's')}, "
                  f"{100 * tau_in / (tau_in + tau_out):.0f} % at the gate)")
        if tau_in == 0.0:
            words += "; τin is 0 because the gate is driven through no resistance"
    return words


# --- phases at midband: a signed magnitude says the truth only near 0° or 180° ------------------

# A midband gain more than this far from 0° or 180°, or an impedance more than 45° from the real
# axis, is not what a signed magnitude shows (common practice, no source).
MIDBAND_PHASE_DEGREES = 10.0
REACTIVE_DEGREES = 45.0


def _off_axis(value: complex) -> float:
    """How far `value`'s phase is from the real axis (0° or 180°), in degrees."""
    angle = abs(math.degrees(math.atan2(value.imag, value.real)))
    return min(angle, 180.0 - angle)


def phase_findings(values: Mapping[str, complex | None], column: str, frequency: float, line: int | None,
                   subject: str | None) -> tuple[list[Finding], set[str]]:  # fmt: skip
    """The reference column's complex midband values (`values`: "gain", "rin", "rout"): a gain
    whose phase is far from 0°/180° is a `not-midband` warning (the frequency is not in a flat
    band); an impedance mostly reactive is an info and is not compared with the hand column (which
    has every device capacitance open and every netlist capacitor shorted). Returns the findings
    and the quantities not to compare."""
    findings: list[Finding] = []
    skip: set[str] = set()
    where = engineering(frequency, "Hz")
    gain = values.get("gain")
    if gain is not None and gain != 0 and math.isfinite(abs(gain)) and _off_axis(gain) > MIDBAND_PHASE_DEGREES:
        findings.append(Finding(
            "warning", "not-midband",
            f"at {where} the {COLUMN_NAMES[column]} gain's phase is "
            f"{math.degrees(math.atan2(gain.imag, gain.real)):.1f}° "
            f"({_off_axis(gain):.1f}° from 0° or 180°): this is not a flat midband, and the signed magnitudes shown "
            "hide the phase; choose --freq inside the flat band (the ngspice sweep, --plot, shows it)",
            line, subject, quantity="gain",
        ))  # fmt: skip
    for key in ("rin", "rout"):
        value = values.get(key)
        if value is None or value == 0 or not math.isfinite(abs(value)) or _off_axis(value) <= REACTIVE_DEGREES:
            continue
        skip.add(key)
        findings.append(Finding(
            "info", "reactive-impedance",
            f"{QUANTITY_NAMES[key]} at {where} is mostly reactive in the {COLUMN_NAMES[column]} column (|Z| = "
            f"{engineering(abs(value), 'Ω')}, phase {math.degrees(math.atan2(value.imag, value.real)):.1f}°): "
            "not a resistance, so the hand value is not compared with it", line, subject, quantity=key,
        ))  # fmt: skip
    return findings, skip
