"""The emitter: Circuit → canonical SPICE text, the only text the simulator receives.

Canonical means: one card per line, lower-case keywords, values as exact decimal
numbers in SI (no suffixes to misread), models before elements, parameters already
resolved. emit → parse → emit is a fixed point for what the reader makes (an `.ac` analysis,
made only by bridge.sim.ac, reads back as a kept card). Nothing of the user's own text
passes through except names and text-valued model parameters (`version=3.3.0`),
which the grammar has already read as single fields, and the title line.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Sequence

from ..records import record
from .circuit import AC_VARIATIONS, Analysis, Circuit, Directive, Element, ModelCard

# Directives that change the operating point or its convergence: emitted. The rest
# (.save, .print, .meas, .tran, ...) belong to the user's own runs: not emitted.
EMITTED_DIRECTIVES = ("options", "temp", "ic", "nodeset")

_VECTOR = re.compile(r"^(?:@[\w.+\-]+\[[a-z0-9_]+\]|all|[vi]\([\w.+\-#]+\))$", re.IGNORECASE)
# Vector names already checked against _VECTOR: the same few are asked for deck after deck.
_VECTORS_SEEN: set[str] = set()


@record(frozen=True, eq=False)
class SpiceDeck:
    """SPICE text made by `emit` from a Circuit; the simulator bridge accepts nothing else."""

    text: str
    title: str


def number(value: float) -> str:
    """Shortest exact decimal for a float, as SPICE reads it (`1e-05`, `1000`)."""
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text


def _params(params: dict[str, float | str], skip: Iterable[str] = ()) -> str:
    skipped = set(skip)
    return "".join(
        f" {key}={number(value)}" for key, value in params.items() if key not in skipped and not isinstance(value, str)
    )


def _title(title: str) -> str:
    # The title is free text on line 1; keep it on one line. A title that itself starts
    # with `.title` is written behind one, since the reader strips one `.title`.
    text = " ".join(title.split()) or "untitled"
    return f".title {text}" if text.lower().startswith(".title") else text


def _model_value(value: float | str) -> str:
    # Text values (`version=3.3.0` on a BSIM card) are single fields the grammar has read: as written.
    return value if isinstance(value, str) else number(value)


def model_card(model: ModelCard) -> str:
    body = " ".join([f"level={model.level}"] + [f"{k}={_model_value(v)}" for k, v in model.params.items()])
    return f".model {model.name} {model.type} ({body})"


def element_card(element: Element) -> str:
    name, nodes = element.name, " ".join(element.nodes)
    kind = element.kind
    if kind in {"resistor", "capacitor", "inductor"}:
        return f"{name} {nodes} {number(element.value or 0.0)}{_params(element.params)}"
    if kind in {"vsource", "isource"}:
        text = f"{name} {nodes} dc {number(element.value or 0.0)}"
        if "ac_mag" in element.params:
            text += f" ac {number(element.params['ac_mag'])} {number(element.params.get('ac_phase', 0.0))}"
        if element.waveform is not None:
            args = " ".join(number(a) for a in element.waveform.args)
            text += f" {element.waveform.kind}({args})"
        return text
    if kind in {"vcvs", "vccs"}:
        return f"{name} {nodes} {number(element.value or 0.0)}"
    if kind in {"cccs", "ccvs"}:
        return f"{name} {nodes} {element.controlling_source} {number(element.value or 0.0)}"
    if kind in {"diode", "mosfet", "bjt"}:
        flags = "".join(f" {flag}" for flag in element.flags)
        return f"{name} {nodes} {element.model}{_params(element.params)}{flags}"
    raise ValueError(f"cannot emit element kind {kind}")


def directive_card(directive: Directive) -> str:
    if directive.kind == "options":
        items = " ".join(k if v is None else f"{k}={number(float(v))}" for k, v in directive.settings)
        return f".options {items}"
    if directive.kind == "temp":
        return ".temp " + " ".join(number(float(v)) for _, v in directive.settings if v is not None)
    items = " ".join(f"v({node})={number(float(v))}" for node, v in directive.settings if v is not None)
    return f".{directive.kind} {items}"


def analysis_card(analysis: Analysis) -> str:
    if analysis.kind == "op":
        return ".op"
    if analysis.kind == "ac":
        return ac_card(analysis)
    sweeps = " ".join(
        f"{s.source} {number(s.start)} {number(s.stop)} {number(s.step)}" for s in analysis.sweeps
    )
    return f".dc {sweeps}"


def ac_card(analysis: Analysis) -> str:
    """`.ac dec|oct|lin points fstart fstop` (ngspice 39 manual, 15.3.1 ".AC: Small-Signal AC Analysis")."""
    sweep = analysis.ac
    if sweep is None:
        raise ValueError("an .ac analysis needs its frequencies (Analysis.ac)")
    if sweep.variation not in AC_VARIATIONS:
        raise ValueError(f".ac variation must be one of {', '.join(AC_VARIATIONS)}, not {sweep.variation!r}")
    if sweep.points < 1 or not 0.0 < sweep.start <= sweep.stop or not math.isfinite(sweep.stop):
        raise ValueError(f".ac needs points ≥ 1 and 0 < fstart ≤ fstop, not {sweep.points} points from "
                         f"{sweep.start!r} to {sweep.stop!r} Hz")
    return f".ac {sweep.variation} {sweep.points} {number(sweep.start)} {number(sweep.stop)}"


def emit(
    circuit: Circuit,
    analyses: Sequence[Analysis] | None = None,
    saves: Sequence[str] = (),
) -> SpiceDeck:
    """Canonical SPICE for `circuit`; `analyses` replaces the circuit's own, `saves`
    adds a `.save` card of vector names (`all`, `@m1[id]`, `v(out)`)."""
    for vector in saves:
        if vector in _VECTORS_SEEN:
            continue
        if not _VECTOR.match(vector):
            raise ValueError(f"not a vector name: {vector!r}")
        if len(_VECTORS_SEEN) < 4096:
            _VECTORS_SEEN.add(vector)
    lines = [_title(circuit.title)]
    lines += [model_card(m) for m in circuit.models.values()]
    lines += [element_card(e) for e in circuit.elements]
    lines += [directive_card(d) for d in circuit.directives if d.kind in EMITTED_DIRECTIVES and d.settings]
    if saves:
        lines.append(".save " + " ".join(saves))
    lines += [analysis_card(a) for a in (circuit.analyses if analyses is None else analyses)]
    lines.append(".end")
    return SpiceDeck("\n".join(lines) + "\n", circuit.title)
