"""The drain current of one MOSFET card in ngspice: at arbitrary bias points (one `.op`) and over a
VGS × VDS grid at a few VBS (one nested `.dc`), each in one worker call.

    simulate_bias_points(session, card, w, l, vgs, vds, vbs, timeout) -> ids
    simulate_grid(session, card, w, l, vgs_axis, vds_axis, vbs_values, timeout) -> DeviceGrid

Voltages and currents are in device polarity (a conducting PMOS: positive vgs, vds, id); the deck
applies them with the card's sign. The decks are Circuits emitted by ``bridge.netlist.emit``: the
card's parameters as the netlist reader read them, never the user's text.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..netlist.circuit import Analysis, Circuit, DcSweep, Directive, Element, ModelCard, Origin
from ..netlist.emit import SpiceDeck, emit
from ..records import record
from .client import NgspiceSession

ORIGIN = Origin("<device-iv>", 0)


@record(frozen=True)
class DeviceGrid:
    """Drain currents over a grid, flattened: one entry per (vbs, vds, vgs) point (device polarity)."""

    vgs: np.ndarray
    vds: np.ndarray
    vbs: np.ndarray
    id: np.ndarray


def _polarity(card: ModelCard) -> int:
    return -1 if card.type.lower() == "pmos" else 1


def _source(name: str, positive: str, value: float) -> Element:
    return Element(name, "vsource", (positive, "0"), float(value), ORIGIN)


def _mosfet(name: str, nodes: tuple[str, str, str, str], card: ModelCard, w: float, l: float,  # noqa: E741
            extra: dict[str, float] | None = None) -> Element:  # fmt: skip
    return Element(name, "mosfet", nodes, None, ORIGIN, model=card.name,
                   params={"w": float(w), "l": float(l), **(extra or {})})  # fmt: skip


def bias_point_deck(
    card: ModelCard, w: float, l: float, vgs: np.ndarray, vds: np.ndarray, vbs: np.ndarray  # noqa: E741
) -> tuple[SpiceDeck, list[str]]:
    """One device per bias point, each with its own drain, gate and bulk sources (source at 0 V),
    solved together by one `.op`; the drain sources' branch currents are the answer."""
    sign = _polarity(card)
    elements: list[Element] = []
    wanted: list[str] = []
    for k, (g, d, b) in enumerate(zip(np.asarray(vgs, float).tolist(), np.asarray(vds, float).tolist(),
                                      np.asarray(vbs, float).tolist())):
        elements += [
            _source(f"vd{k}", f"d{k}", sign * d), _source(f"vg{k}", f"g{k}", sign * g),
            _source(f"vb{k}", f"b{k}", sign * b), _mosfet(f"m{k}", (f"d{k}", f"g{k}", "0", f"b{k}"), card, w, l),
        ]  # fmt: skip
        wanted.append(f"i(vd{k})")
    circuit = Circuit("device bias points", ORIGIN.file, tuple(elements), {card.name: card})
    return emit(circuit, analyses=[Analysis("op", ORIGIN)], saves=wanted), wanted


def simulate_bias_points(
    session: NgspiceSession, card: ModelCard, w: float, l: float,  # noqa: E741
    vgs: np.ndarray, vds: np.ndarray, vbs: np.ndarray, timeout: float = 30.0,
) -> np.ndarray:  # fmt: skip
    """ngspice's drain current (device polarity) at each bias point, from one `.op`."""
    deck, wanted = bias_point_deck(card, w, l, vgs, vds, vbs)
    result = session.run(deck, vectors=wanted, timeout=timeout)
    # The drain source's branch current flows into its + terminal: minus the current into the drain.
    return np.array([-_polarity(card) * result.scalar(name) for name in wanted])


def _axis_sweep(source: str, axis: np.ndarray, sign: int) -> DcSweep:
    values = sign * np.asarray(axis, dtype=float)
    step = float(values[1] - values[0]) if values.size > 1 else 1.0
    return DcSweep(source, float(values[0]), float(values[-1]), step)


def grid_deck(
    card: ModelCard, w: float, l: float, vgs_axis: np.ndarray, vds_axis: np.ndarray,  # noqa: E741
    vbs_values: Sequence[float], directives: Sequence[Directive] = (), instance: dict[str, float] | None = None,
) -> tuple[SpiceDeck, list[str]]:  # fmt: skip
    """One device per body bias, drains and gates shared through zero-volt ammeters, swept by one
    nested `.dc` (VGS inside, VDS outside). `directives` (`.temp`, `.options tnom`) and `instance`
    (TEMP, DTEMP) put the device at a circuit's temperature."""
    sign = _polarity(card)
    elements = [_source("vgate", "g", 0.0), _source("vdrain", "d", 0.0)]
    wanted = ["v(g)", "v(d)"]
    for k, body in enumerate(vbs_values):
        elements += [
            Element(f"vsense{k}", "vsource", ("d", f"d{k}"), 0.0, ORIGIN),
            _source(f"vb{k}", f"b{k}", sign * body),
            _mosfet(f"m{k}", (f"d{k}", "g", "0", f"b{k}"), card, w, l, instance),
        ]  # fmt: skip
        wanted.append(f"i(vsense{k})")
    circuit = Circuit("device grid", ORIGIN.file, tuple(elements), {card.name: card}, directives=tuple(directives))
    sweeps = (_axis_sweep("vgate", vgs_axis, sign), _axis_sweep("vdrain", vds_axis, sign))
    return emit(circuit, analyses=[Analysis("dc", ORIGIN, sweeps)], saves=wanted), wanted


def simulate_grid(
    session: NgspiceSession, card: ModelCard, w: float, l: float,  # noqa: E741
    vgs_axis: np.ndarray, vds_axis: np.ndarray, vbs_values: Sequence[float] = (0.0,), timeout: float = 30.0,
    directives: Sequence[Directive] = (), instance: dict[str, float] | None = None,
) -> DeviceGrid:  # fmt: skip
    """ngspice's drain current over VGS × VDS at each VBS, from one `.dc` (evenly spaced axes)."""
    deck, wanted = grid_deck(card, w, l, vgs_axis, vds_axis, vbs_values, directives, instance)
    result = session.run(deck, vectors=wanted, timeout=timeout)
    sign = _polarity(card)
    vgs = sign * result["v(g)"]
    vds = sign * result["v(d)"]
    # The ammeter's branch current flows from the shared drain into the device's drain.
    columns = [(np.full(vgs.shape, float(body)), sign * result[f"i(vsense{k})"]) for k, body in enumerate(vbs_values)]
    return DeviceGrid(
        np.tile(vgs, len(columns)), np.tile(vds, len(columns)),
        np.concatenate([c[0] for c in columns]), np.concatenate([c[1] for c in columns]),
    )  # fmt: skip
