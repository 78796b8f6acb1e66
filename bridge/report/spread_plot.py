"""The histograms of `biasbridge spread --plot FILE.png|.svg` (matplotlib, Agg: no display).

Formatting only: per MOSFET a row of two panels, the Monte-Carlo drain current and saturation
margin (vds − vov), with the corners' extremes marked (dashed: the level-1 minimum and maximum
over the corners searched) and, on the margin, the saturation edge (vds − vov = 0) and the
margin threshold. Written atomically; the same result gives the same bytes (SVG without a date,
a fixed hash salt).
"""

from __future__ import annotations

import io
import math
import os

import numpy as np

from ..analysis.spread import SpreadResult
from .files import write_atomically
from .plot import FIGURE_DPI, plot_format

PANEL_INCHES = (4.5, 3.0)
BINS = 60
QUANTITIES = (("id", "drain current (mA)", 1e3), ("margin", "saturation margin vds − vov (V)", 1.0))


def render_spread_plot(result: SpreadResult, fmt: str) -> bytes:
    """The figure as PNG or SVG bytes."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    from matplotlib.figure import Figure

    devices = list(result.devices)
    figure = Figure(figsize=(2 * PANEL_INCHES[0], PANEL_INCHES[1] * max(1, len(devices))), dpi=FIGURE_DPI,
                    layout="constrained")  # fmt: skip
    axes = figure.subplots(max(1, len(devices)), 2, squeeze=False)
    for row, name in enumerate(devices):
        for column, (quantity, label, scale) in enumerate(QUANTITIES):
            axis = axes[row][column]
            values = result.sample_solution.ids[name] if quantity == "id" else result.sample_solution.margins[name]
            values = values[np.isfinite(values)] * scale
            if values.size:
                axis.hist(values, bins=BINS, color="tab:blue", alpha=0.75, label=f"{result.samples:,} samples")
            extremes = result.devices[name][quantity]
            for value, corner, colour in ((extremes.min, "corner min", "tab:red"),
                                          (extremes.max, "corner max", "tab:purple")):  # fmt: skip
                if math.isfinite(value):
                    axis.axvline(value * scale, color=colour, linestyle="--", linewidth=1.4, label=corner)
            if quantity == "margin":
                axis.axvline(0.0, color="black", linewidth=1.6, label="saturation edge")
                axis.axvline(result.margin_threshold, color="tab:orange", linestyle=":", linewidth=1.4,
                             label=f"margin threshold {result.margin_threshold:g} V")  # fmt: skip
            axis.set_xlabel(label)
            axis.set_ylabel("samples")
            axis.set_title(f"{name}: {'drain current' if quantity == 'id' else 'saturation margin'}", fontsize=10)
            axis.legend(fontsize=7)
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else {}
    with matplotlib.rc_context({"svg.hashsalt": "biasbridge"}):
        figure.savefig(buffer, format=fmt, dpi=FIGURE_DPI, metadata=metadata)
    return buffer.getvalue()


def write_spread_plot(result: SpreadResult, path: str | os.PathLike[str]) -> None:
    """Render and write the plot atomically (PNG or SVG by the file name)."""
    data = render_spread_plot(result, plot_format(path))
    write_atomically(path, lambda handle: handle.write(data))
