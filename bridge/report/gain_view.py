"""How `biasbridge gain` shows its result: a table hand | level-1 | ngspice (gain signed and in
dB, Rin, Rout, the band edges), the choices made, the findings and the attribution; or one JSON
object in the issue's shape. Formatting only: a flagged cell carries `!` as well as a colour.
"""

from __future__ import annotations

import math
from typing import Any

from ..gain_compare import QUANTITY_UNITS
from ..gain_run import COLUMN_KEYS, GainResult, finite
from ..netlist.numbers import engineering
from ..vocabulary import COLUMN_TITLES, EFFECT_NAMES

SEVERITY_STYLE = {"error": "bold red", "warning": "yellow", "info": "dim"}
ROWS = (("gain", "gain (V/V)"), ("gain_db", "gain (dB)"), ("rin", "Rin"), ("rout", "Rout"),
        ("low_hz", "low band edge"), ("high_hz", "upper band edge"))  # fmt: skip


def _text(value: float | None, unit: str) -> str:
    if value is None:
        return "—"
    if math.isinf(value):
        return "∞"
    if unit == "V/V":
        return f"{value:.4g}"
    if unit == "dB":
        return f"{value:.2f} dB"
    return engineering(value, unit)


def _values(result: GainResult, key: str) -> dict[str, float | None]:
    if key == "gain_db":
        return {c: (20.0 * math.log10(abs(v)) if v not in (None, 0.0) and math.isfinite(v) else None)
                for c, v in result.gain.items()}  # fmt: skip
    if key in ("low_hz", "high_hz"):
        return {column: result.band[key].get(column) for column in COLUMN_KEYS}
    return getattr(result, key)


def gain_renderable(result: GainResult, *, steps: bool = False):
    """The rich renderable of one gain check."""
    from rich.console import Group
    from rich.table import Table
    from rich.text import Text

    flagged = {(f.quantity, "hand" if f.code == "gain-hand-differs" else "level1") for f in result.findings
               if f.code in ("gain-hand-differs", "gain-solver-differs")}  # fmt: skip
    parts: list[Any] = [Text(f"{result.file}: {result.title}", style="bold")]
    parts.append(Text(f"input {result.input.value or '—'} ({result.input.why}); output "
                      f"{result.output.value} ({result.output.why}); load for Rout: {result.load.why}"))
    if result.frequency is not None:
        parts.append(Text(f"midband {engineering(result.frequency, 'Hz')} ({result.frequency_why}); sweep "
                          f"{engineering(result.sweep[0], 'Hz')} to {engineering(result.sweep[1], 'Hz')}"
                          if result.sweep else ""))
    if result.topology:
        parts.append(Text(f"hand: closed form for the {result.topology}"))
    table = Table(show_header=True, header_style="bold")
    table.add_column("")
    for column in COLUMN_KEYS:
        table.add_column(COLUMN_TITLES[column], justify="right")
    for key, label in ROWS:
        values = _values(result, key)
        unit = "dB" if key == "gain_db" else QUANTITY_UNITS[key]
        cells = []
        for column in COLUMN_KEYS:
            quantity = "gain" if key == "gain_db" else key
            mark = (quantity, column) in flagged
            text = _text(values.get(column), unit) + (" !" if mark else "")
            cells.append(Text(text, style="red" if mark else ""))
        table.add_row(label, *cells)
    parts.append(table)
    simulator = result.simulator or {}
    if simulator.get("unavailable"):
        parts.append(Text(f"ngspice column empty: {simulator['unavailable']}", style="dim"))
    if steps and result.hand is not None:
        parts.append(Text("Hand working:", style="bold"))
        for number, step in enumerate(result.hand.steps, 1):
            parts.append(Text(f"  {number}. {step}"))
    for finding in result.findings:
        where = f" (line {finding.line})" if finding.line else ""
        parts.append(Text(f"{finding.severity}: {finding.message}{where} [{finding.code}]",
                          style=SEVERITY_STYLE.get(finding.severity, "")))
    if result.attribution:
        words = ", ".join(f"{EFFECT_NAMES.get(e, e)} {100 * c:+.1f} %" for e, c in result.attribution.items())
        parts.append(Text(f"attribution (hand gain, one effect on at a time): {words}"))
    verdict = "agree" if result.agree else "disagree" if result.compared else "nothing compared (see above)"
    parts.append(Text("verdict: " + verdict, style="bold"))
    return Group(*parts)


def gain_json(result: GainResult) -> dict[str, Any]:
    """The issue's JSON shape; null where a column gives no (finite) value."""

    def column(values: dict[str, float | None]) -> dict[str, float | None]:
        return {key: finite(value) for key, value in values.items()}

    return {
        "file": result.file,
        "title": result.title,
        "input": result.input.value,
        "output": result.output.value,
        "frequency": result.frequency,
        "simulator": result.simulator,
        "gain": column(result.gain),
        "rin": column(result.rin),
        "rout": column(result.rout),
        "band": {"low_hz": column(result.band["low_hz"]), "high_hz": column(result.band["high_hz"])},
        "attribution": {effect: finite(change) for effect, change in result.attribution.items()},
        "findings": [{"severity": f.severity, "code": f.code, "message": f.message, "line": f.line,
                      "subject": f.subject} for f in result.findings],  # fmt: skip
        "agree": result.agree,
    }
