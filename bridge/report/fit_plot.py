"""The plot of `biasbridge fit --plot FILE.png|.svg`: measured points and the fitted level-1 curve,
ID against VGS, one colour per VDS / VBS (matplotlib, Agg). Formatting only."""

from __future__ import annotations

import io
import os
from pathlib import Path

from ..fit.run import FitOutcome
from .files import write_atomically
from .plot import FIGURE_DPI, FIGURE_INCHES, plot_format


def render_fit_plot(outcome: FitOutcome, fmt: str) -> bytes:
    import matplotlib

    matplotlib.use("Agg", force=True)
    from matplotlib.figure import Figure

    figure = Figure(figsize=FIGURE_INCHES, dpi=FIGURE_DPI)
    axes = figure.add_subplot(1, 1, 1)
    colours = matplotlib.colormaps["viridis"]
    count = max(1, len(outcome.curves) - 1)
    for index, curve in enumerate(outcome.curves):
        colour = colours(index / count)
        label = f"VDS = {curve.vds:.3g} V" + (f", VBS = {curve.vbs:.3g} V" if curve.vbs else "")
        axes.plot(curve.vgs, curve.measured, "o", color=colour, markersize=3, label=label)
        axes.plot(curve.model_vgs, curve.model, "-", color=colour, linewidth=1.2)
    measured = "ngspice (the card)" if outcome.mode == "card" else "measured"
    title = f"{outcome.name}: {measured} (points) and the fitted level-1 card (lines)"
    if outcome.curves_left_off:
        title += f"; {outcome.curves_left_off} curves not drawn"
    axes.set_title(title, fontsize=9)
    axes.set_xlabel("VGS (V, device polarity)")
    axes.set_ylabel("ID (A, device polarity)")
    axes.grid(True, alpha=0.3)
    if outcome.curves:
        axes.legend(fontsize=7, loc="upper left")
    buffer = io.BytesIO()
    figure.savefig(buffer, format=fmt, dpi=FIGURE_DPI, metadata={"Date": None} if fmt == "svg" else {})
    return buffer.getvalue()


def write_fit_plot(outcome: FitOutcome, path: str | os.PathLike[str]) -> Path:
    """Render and write the plot atomically; the format follows the file name."""
    fmt = plot_format(path)
    data = render_fit_plot(outcome, fmt)
    return write_atomically(path, lambda handle: handle.write(data))
