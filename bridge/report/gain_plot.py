"""The plot of `biasbridge gain --plot FILE.png|.svg`: ngspice's magnitude (dB) and phase against log
frequency, with the hand midband gain and the hand band edges drawn on it (matplotlib, Agg).

Formatting only: the response comes from bridge.sim.ac (`AcMeasurement`), the hand numbers from the
caller. matplotlib is imported only when a plot is drawn.
"""

from __future__ import annotations

import io
import math
import os
from pathlib import Path

import numpy as np

from ..netlist.numbers import engineering
from ..sim.ac import AcMeasurement
from .files import write_atomically

FIGURE_INCHES = (8.0, 6.5)
FIGURE_DPI = 100
SIM_STYLE = {"color": "black", "linewidth": 1.8}
HAND_STYLE = {"color": "tab:blue", "linestyle": "--", "linewidth": 1.4}
EDGE_STYLE = {"color": "tab:blue", "linestyle": ":", "linewidth": 1.4}


def plot_gain(
    path: str | os.PathLike[str],
    measurement: AcMeasurement,
    hand_gain: float | None,
    hand_low_hz: float | None,
    hand_high_hz: float | None,
    title: str,
) -> Path:
    """Draw and write the plot atomically (a reader never sees half a file); the format follows the
    file name (.png or .svg, else ValueError). A hand value that is None is not drawn."""
    from .plot import plot_format

    fmt = plot_format(path)
    figure = gain_figure(measurement, hand_gain, hand_low_hz, hand_high_hz, title)
    buffer = io.BytesIO()
    figure.savefig(buffer, format=fmt, dpi=FIGURE_DPI, metadata={"Date": None} if fmt == "svg" else {})
    data = buffer.getvalue()
    return write_atomically(path, lambda handle: handle.write(data))


def gain_figure(
    measurement: AcMeasurement,
    hand_gain: float | None,
    hand_low_hz: float | None,
    hand_high_hz: float | None,
    title: str,
):
    """The matplotlib Figure: magnitude above, phase below, sharing the log frequency axis."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    from matplotlib.figure import Figure

    f = np.asarray(measurement.frequency, dtype=float)
    response = np.asarray(measurement.response, dtype=complex)
    magnitude = np.abs(response)
    with np.errstate(divide="ignore"):
        decibels = 20.0 * np.log10(magnitude)
    phase = np.degrees(np.unwrap(np.angle(response)))

    figure = Figure(figsize=FIGURE_INCHES, dpi=FIGURE_DPI, layout="constrained")
    top, bottom = figure.subplots(2, 1, sharex=True, height_ratios=(3.0, 2.0))
    top.semilogx(f, decibels, label="ngspice .ac", **SIM_STYLE)
    bottom.semilogx(f, phase, label="ngspice .ac", **SIM_STYLE)

    midband_db = _decibels(abs(measurement.gain))
    if midband_db is not None:
        top.plot([measurement.midband_hz], [midband_db], marker="o", color="black", linestyle="none",
                 markersize=6, label=f"ngspice midband {_gain_text(measurement.gain)} at "
                 f"{_hertz(measurement.midband_hz)}")  # fmt: skip
    for name, edge in (("f_L", measurement.low_hz), ("f_H", measurement.high_hz)):
        if edge is not None and midband_db is not None:
            top.plot([edge], [midband_db - 20.0 * math.log10(math.sqrt(2.0))], marker="s", color="black",
                     linestyle="none", markersize=6, markerfacecolor="none",
                     label=f"ngspice −3 dB {name} = {_hertz(edge)}")  # fmt: skip

    hand_db = _decibels(abs(hand_gain)) if hand_gain is not None else None
    if hand_db is not None:
        top.axhline(hand_db, label=f"hand midband gain {hand_gain:.4g} ({hand_db:.2f} dB)", **HAND_STYLE)
    for name, edge in (("f_L", hand_low_hz), ("f_H", hand_high_hz)):
        if edge is not None and math.isfinite(edge) and edge > 0.0:
            label = f"hand {name} = {_hertz(edge)}"
            top.axvline(edge, label=label, **EDGE_STYLE)
            bottom.axvline(edge, **EDGE_STYLE)

    top.set_ylabel("|v(out) / v(in)| (dB)")
    bottom.set_ylabel("phase (°)")
    bottom.set_xlabel("frequency (Hz)")
    for axes in (top, bottom):
        axes.grid(True, which="major", color="#bbbbbb", linewidth=0.5, alpha=0.7)
    handles, texts = top.get_legend_handles_labels()
    figure.legend(handles, texts, loc="outside lower center", ncols=2, fontsize=8, frameon=False)
    text = " ".join(title.split())
    figure.suptitle(text if len(text) <= 90 else text[:87] + "…", fontsize=11)
    return figure


def _decibels(magnitude: float) -> float | None:
    return 20.0 * math.log10(magnitude) if magnitude > 0.0 and math.isfinite(magnitude) else None


def _gain_text(gain: complex) -> str:
    return f"{abs(gain):.4g} ∠ {math.degrees(math.atan2(gain.imag, gain.real)):.1f}°"


def _hertz(value: float) -> str:
    return engineering(value, "Hz")
