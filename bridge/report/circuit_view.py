"""How `biasbridge parse` shows a circuit: rich tables, or one JSON object.

Formatting only: everything shown was computed by the front end.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from rich.console import Group
from rich.table import Table
from rich.text import Text

from ..netlist.circuit import VALUE_UNIT, Analysis, Circuit, Directive, Element, Origin
from ..netlist.numbers import engineering
from ..netlist.source import NOTICE_SEVERITY

# Units of the instance and model parameters a bias circuit uses, for display.
PARAM_UNITS: dict[str, str] = {
    "w": "m", "l": "m", "ad": "m²", "as": "m²", "pd": "m", "ps": "m",
    "vto": "V", "kp": "A/V²", "lambda": "1/V", "gamma": "√V", "phi": "V", "tox": "m", "ld": "m",
    "uo": "cm²/Vs", "nsub": "cm⁻³", "is": "A", "rs": "Ω", "rd": "Ω", "cj0": "F", "cjo": "F",
    "ac_mag": "", "ac_phase": "°", "temp": "°C", "dtemp": "°C",
}
PLAIN_PARAMS = {"m", "area", "level", "n", "bf", "br", "nrd", "nrs", "tpg", "ac_mag"}


def _param(name: str, value: float | str) -> str:
    if isinstance(value, str):
        return f"{name}={value}"
    if name in PLAIN_PARAMS:
        return f"{name}={value:g}"
    return f"{name}={engineering(value, PARAM_UNITS.get(name, '')).replace(' ', '')}"


def _place(origin: Origin, circuit: Circuit) -> str:
    """`12`, or `models.lib:12` for a card from an included file."""
    if origin.file == circuit.source_file:
        return str(origin.line)
    return f"{Path(origin.file).name}:{origin.line}"


def _value(element: Element) -> str:
    if element.value is None:
        return element.model or ""
    return engineering(element.value, VALUE_UNIT.get(element.kind, ""))


def _analysis_text(analysis: Analysis) -> str:
    if analysis.kind == "op":
        return ".op  operating point"
    parts = [
        f"{s.source} {engineering(s.start, 'V')} → {engineering(s.stop, 'V')} step {engineering(s.step, 'V')}"
        for s in analysis.sweeps
    ]
    return ".dc  " + ";  ".join(parts)


def _directive_text(directive: Directive) -> str:
    return directive.text


def circuit_renderable(circuit: Circuit) -> Group:
    """The parse view: title, elements, models, analyses, directives, warnings."""
    parts: list[Any] = [Text(f"{circuit.source_file}: {circuit.title}", style="bold")]
    elements = Table(title="Elements", title_justify="left", expand=False)
    for column in ("name", "kind", "nodes", "value / model", "parameters", "line"):
        elements.add_column(column, justify="right" if column == "line" else "left")
    for element in circuit.elements:
        elements.add_row(
            element.name,
            element.kind,
            " ".join(element.nodes),
            _value(element),
            " ".join([_param(k, v) for k, v in element.params.items()] + list(element.flags)),
            _place(element.origin, circuit),
        )
    parts.append(elements)
    if circuit.models:
        models = Table(title="Models", title_justify="left")
        for column in ("name", "type", "level", "parameters", "line"):
            models.add_column(column, justify="right" if column == "line" else "left")
        for model in circuit.models.values():
            models.add_row(
                model.name,
                model.type,
                str(model.level),
                " ".join(f"{k}={v}" if isinstance(v, str) else f"{k}={v:.6g}" for k, v in model.params.items()),
                _place(model.origin, circuit),
            )
        parts.append(models)
    if circuit.parameters:
        parts.append(
            Text("Parameters: " + ", ".join(f"{p.name} = {p.value:g}" for p in circuit.parameters))
        )
    parts.append(
        Text("Analyses: " + ("; ".join(_analysis_text(a) for a in circuit.analyses) or "none"))
    )
    if circuit.directives:
        parts.append(Text("Kept: " + "; ".join(_directive_text(d) for d in circuit.directives)))
    for notice in circuit.notices:
        parts.append(Text(f"{NOTICE_SEVERITY}: {notice}", style="yellow"))
    return Group(*parts)


def circuit_json(circuit: Circuit) -> dict[str, Any]:
    """The `parse --json` object."""
    return {
        "file": circuit.source_file,
        "title": circuit.title,
        "elements": [
            {
                "name": e.name,
                "kind": e.kind,
                "nodes": list(e.nodes),
                "value": e.value,
                "params": dict(e.params) | ({"model": e.model} if e.model else {})
                | {flag: 1.0 for flag in e.flags},
                "line": e.origin.line,
            }
            for e in circuit.elements
        ],
        "models": {
            m.name: {"type": m.type, "level": m.level, "params": dict(m.params)} for m in circuit.models.values()
        },
        "analyses": [
            {
                "kind": a.kind,
                "line": a.origin.line,
                "sweeps": [
                    {"source": s.source, "start": s.start, "stop": s.stop, "step": s.step} for s in a.sweeps
                ],
            }
            for a in circuit.analyses
        ],
        "parameters": {p.name: p.value for p in circuit.parameters},
        "directives": [{"kind": d.kind, "text": d.text, "line": d.origin.line} for d in circuit.directives],
        "warnings": [
            {"code": n.code, "message": n.message, "file": n.file, "line": n.line} for n in circuit.notices
        ],
    }
