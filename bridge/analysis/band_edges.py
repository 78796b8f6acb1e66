"""The band edges of a small-signal network, exactly: where the gain of the hand or the level-1
network falls to 1/√2 of midband (swept outwards from midband, each crossing refined by Brent's
method), and the evidence that says why the hand's short-circuit and Miller estimates differ
from them (the network's own −3 dB points, its low poles and the bypass zeros, each checked
before it is stated). The networks and the estimates themselves are ``smallsignal``'s."""

from __future__ import annotations

import contextlib
import math
from dataclasses import replace

import numpy as np

from ..netlist.circuit import Circuit
from ..records import record
from .hand import HandSolution
from .smallsignal import (
    HandColumn,
    LowBandTerm,
    SignalNetwork,
    SignalSetup,
    SmallSignalError,
    element_multiplier,
    element_value,
    hand_capacitances,
    hand_devices,
    level1_devices,
)

EDGE_POINTS_PER_DECADE = 40  # the grid searched outwards from midband, as ngspice's sweep
HALF_POWER = 1.0 / math.sqrt(2.0)


def network_band_edges(
    network: SignalNetwork, output: str, midband_hz: float, start_hz: float, stop_hz: float
) -> tuple[float | None, float | None]:
    """The −3 dB frequencies of `network`'s gain (every capacitor jωC) below and above
    `midband_hz`: going outwards from midband on a 40-a-decade grid, the first point where |gain|
    is at most |gain(midband)|/√2, then the crossing itself by Brent's method on log f. None on a
    side where it never falls that far between `start_hz` and `stop_hz`."""
    from .roots import brent_root

    step = 10.0 ** (1.0 / EDGE_POINTS_PER_DECADE)
    below = midband_hz / step ** np.arange(1, max(1, math.ceil(math.log(midband_hz / start_hz, step))) + 1)
    above = midband_hz * step ** np.arange(1, max(1, math.ceil(math.log(stop_hz / midband_hz, step))) + 1)
    grid = np.concatenate(([midband_hz], below, above))
    magnitude = np.abs(network.transfer(2j * math.pi * grid, output))
    middle = magnitude[0]
    if not (math.isfinite(middle) and middle > 0.0):
        return None, None
    target = middle * HALF_POWER

    def excess(log_f: float) -> float:
        value = abs(network.transfer(np.array([2j * math.pi * math.exp(log_f)]), output)[0])
        return value - target if math.isfinite(value) else math.inf

    def first_fall(frequencies: np.ndarray, values: np.ndarray) -> float | None:
        previous = midband_hz
        for f, value in zip(frequencies.tolist(), values.tolist()):
            if math.isfinite(value) and value <= target:
                try:
                    return math.exp(brent_root(excess, math.log(previous), math.log(f), xtol=1e-12, rtol=1e-10))
                except ValueError:
                    return f
            previous = f
        return None

    count = len(below)
    return first_fall(below, magnitude[1:count + 1]), first_fall(above, magnitude[count + 1:])


@record(frozen=True)
class BandEvidence:
    """What the hand band-edge estimates rest on, measured on the hand network itself: its own
    −3 dB points (every capacitor jωC, the hand gate capacitances at the hand bias point), its
    low-frequency poles where their sum was checked equal to the short-circuit estimate (Hz,
    largest first; None otherwise), the zeros of capacitors across a resistor that were checked
    to be zeros of its gain ((capacitor, resistor, Hz)), and the short-circuit terms largest first."""

    low_hz: float | None
    high_hz: float | None
    low_poles_hz: tuple[complex, ...] | None
    zeros: tuple[tuple[str, str, float], ...]
    terms: tuple[LowBandTerm, ...]
    miller: tuple[float, float] | None
    inductors: tuple[str, ...] = ()  # the netlist's inductors, which no estimate term covers


def hand_band_evidence(circuit: Circuit, hand: HandSolution, column: HandColumn, setup: SignalSetup,
                       start_hz: float, stop_hz: float) -> BandEvidence:  # fmt: skip
    """The hand network's own band edges and what explains its estimates (see BandEvidence)."""
    devices = hand_devices(circuit, hand)
    caps = hand_capacitances(circuit, hand)
    with_caps = {name: (replace(device, capacitances=caps[name]) if name in caps else device)
                 for name, device in devices.items()}  # fmt: skip
    low = high = None
    with contextlib.suppress(SmallSignalError):
        low, high = network_band_edges(SignalNetwork(circuit, with_caps, setup.input_source), setup.output_node,
                                       setup.midband_hz, start_hz, stop_hz)  # fmt: skip
    bare = SignalNetwork(circuit, devices, setup.input_source)
    terms = tuple(sorted((t for t in column.low_terms if 0.0 < t.pole_hz < math.inf), key=lambda t: -t.pole_hz))
    poles = _checked_low_poles(bare, column.low_hz) if column.low_hz else None
    zeros = _checked_zeros(circuit, bare, setup)
    if not caps:
        high = None
    inductors = tuple(e.name for e in circuit.elements_of("inductor"))
    return BandEvidence(low, high, poles, zeros, terms, column.miller, inductors)


def _checked_low_poles(network: SignalNetwork, estimate: float) -> tuple[complex, ...] | None:
    """The natural frequencies of the network with only the netlist's capacitors (Hz, −s/2π: a real
    pole's value is positive; largest first, a complex pair as two conjugates), when the sum of
    their real parts equals `estimate` to 1e-6 (the s-coefficient identity); None when it does not
    or they cannot be found."""
    if network.circuit.elements_of("inductor"):
        return None
    try:
        matrices, _, _, size, _ = network.assemble(np.array([0.0, 1.0], dtype=complex))
    except SmallSignalError:
        return None
    if not size:
        return None
    g, c = matrices[0], matrices[1] - matrices[0]
    shift = 2.0 * math.pi * estimate * (0.37 + 0.61j)
    try:
        mu = np.linalg.eigvals(np.linalg.solve(g + shift * c, c))
    except np.linalg.LinAlgError:
        return None
    mu = mu[np.abs(mu) > 1e-12 * max(1e-300, float(np.max(np.abs(mu))))]
    poles = -(shift - 1.0 / mu) / (2.0 * math.pi)
    # A pair whose imaginary parts are below 1e-9 of its size is taken as real (rounding).
    hz = [complex(p.real, 0.0) if abs(p.imag) <= 1e-9 * abs(p) else complex(p) for p in poles]
    hz.sort(key=lambda p: (-p.real, -p.imag))
    if not hz or not math.isclose(sum(p.real for p in hz), estimate, rel_tol=1e-6):
        return None
    return tuple(hz)


def _checked_zeros(circuit: Circuit, network: SignalNetwork, setup: SignalSetup) -> tuple[tuple[str, str, float], ...]:
    """Each capacitor with a resistor across the same two nodes whose 1/(2π·R·C) is a zero of the
    gain (|gain| there below 1e-6 of midband's, checked on the network)."""
    found = []
    try:
        middle = abs(network.transfer(np.array([2j * math.pi * setup.midband_hz]), setup.output_node)[0])
    except SmallSignalError:
        return ()
    for cap in circuit.elements_of("capacitor"):
        ends = {cap.nodes[0], cap.nodes[1]}
        for resistor in circuit.elements_of("resistor"):
            if {resistor.nodes[0], resistor.nodes[1]} != ends or element_value(resistor) == 0.0:
                continue
            r = element_value(resistor) / element_multiplier(resistor)
            zero_hz = 1.0 / (2.0 * math.pi * r * element_value(cap) * element_multiplier(cap))
            at_zero = abs(network.transfer(np.array([-2.0 * math.pi * zero_hz + 0j]), setup.output_node)[0])
            if math.isfinite(at_zero) and at_zero <= 1e-6 * middle:
                found.append((cap.name, resistor.name, zero_hz))
    return tuple(found)


def level1_band_edges(circuit: Circuit, level1, setup: SignalSetup, start_hz: float,
                      stop_hz: float) -> tuple[float | None, float | None]:  # fmt: skip
    """The level-1 column's band edges: its linearised network (every capacitor jωC, the Meyer gate
    capacitances where the card gives them) swept for its −3 dB points."""
    network = SignalNetwork(circuit, level1_devices(circuit, level1), setup.input_source)
    return network_band_edges(network, setup.output_node, setup.midband_hz, start_hz, stop_hz)
