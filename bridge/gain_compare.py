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
                    f"({_percent(change)}), beyond the {100 * tolerance:g} % tolerance", line, subject,
                    quantity=quantity,
                ))  # fmt: skip
        if level1 is not None and sim is not None and quantity in QUANTITIES and not (
            math.isinf(level1) and math.isinf(sim)
        ):
            change = relative(level1, sim)
            if abs(change) > LEVEL1_TOLERANCE:
                findings.append(Finding(
                    "error", "gain-solver-differs",
                    f"{name}: level-1 {_shown(level1, unit)} vs ngspice {_shown(sim, unit)} ({_percent(change)}), "
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
