"""The transfer-curve plot of `biasbridge sweep --plot FILE.png|.svg` (matplotlib, Agg: no display).

Formatting only: the curves, regions, edges and bias point come from bridge.analysis.sweep.
The figure is FIGURE_INCHES at FIGURE_DPI (800 × 500 px as PNG, 576 × 360 pt as SVG).
"""

from __future__ import annotations

import io
import math
import os
from pathlib import Path

import numpy as np

from ..analysis.sweep import COLUMNS, Curve, TransferCurve
from .files import write_atomically

FORMATS = {".png": "png", ".svg": "svg"}
FIGURE_INCHES = (8.0, 5.0)
FIGURE_DPI = 100
COLUMN_LABELS = {"hand": "hand (square law, λ = γ = 0)", "level1": "level-1 solver", "sim": "ngspice"}
COLUMN_STYLES = {
    "hand": {"color": "tab:blue", "linestyle": "--", "linewidth": 1.6},
    "level1": {"color": "tab:orange", "linestyle": "-", "linewidth": 1.6},
    "sim": {"color": "black", "linestyle": ":", "linewidth": 2.2},
}
REGION_COLOURS = {"cutoff": "#d9d9d9", "saturation": "#cdeccd", "triode": "#f6d5c0"}
EDGE_MARKERS = {"hand": "v", "level1": "^", "sim": "o"}


def plot_format(path: str | os.PathLike[str]) -> str:
    """'png' or 'svg' from the file name; ValueError otherwise."""
    suffix = Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise ValueError(f"--plot needs a .png or .svg file name, not `{Path(path).name}`")
    return FORMATS[suffix]


def _reference(result: TransferCurve) -> tuple[str, Curve] | None:
    """The column whose regions are shaded: ngspice when it ran, else the level-1 solver, else hand."""
    for column in ("sim", "level1", "hand"):
        curve = result.curves.get(column)
        if curve is not None and result.devices and result.devices[0] in curve.regions:
            return column, curve
    return None


def _spans(result: TransferCurve, curve: Curve, device: str) -> list[tuple[float, float, str]]:
    """Runs of one region as (left, right, region), split at the column's located edges."""
    x = result.x
    regions = curve.regions[device]
    crossings = curve.edges[device].crossings if device in curve.edges else ()
    spans: list[tuple[float, float, str]] = []
    start, current = float(x[0]), regions[0]
    for k in range(len(x) - 1):
        if regions[k + 1] == regions[k]:
            continue
        lo, hi = sorted((float(x[k]), float(x[k + 1])))
        inside = [c.at for c in crossings if lo <= c.at <= hi]
        edge = float(np.mean(inside)) if inside else 0.5 * (lo + hi)
        if current is not None:
            spans.append((start, edge, current))
        start, current = edge, regions[k + 1]
    if current is not None:
        spans.append((start, float(x[-1]), current))
    return spans


def render_plot(result: TransferCurve, fmt: str) -> bytes:
    """The figure as PNG or SVG bytes."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    from matplotlib.figure import Figure

    figure = Figure(figsize=FIGURE_INCHES, dpi=FIGURE_DPI, layout="constrained")
    axes = figure.add_subplot()
    x = result.x
    unit = result.source_unit
    reference = _reference(result)
    shaded_by = ""
    if reference is not None:
        column, curve = reference
        device = result.devices[0]
        shaded_by = f"{device}, {COLUMN_LABELS[column].split(' (')[0]}"
        for left, right, region in _spans(result, curve, device):
            lo, hi = sorted((left, right))
            axes.axvspan(lo, hi, color=REGION_COLOURS.get(region, "#eeeeee"), alpha=0.8, linewidth=0, zorder=0)
            if hi - lo > 0.06 * float(np.ptp(x) or 1.0):
                axes.text(0.5 * (lo + hi), 0.975, region, transform=axes.get_xaxis_transform(), ha="center",
                          va="top", fontsize=9, color="#444444", zorder=6,
                          bbox={"facecolor": REGION_COLOURS.get(region, "#eeeeee"), "edgecolor": "none", "pad": 1.5})
                # fmt: skip

    for column in COLUMNS:
        curve = result.curves.get(column)
        if curve is None:
            continue
        axes.plot(x, curve.output, label=COLUMN_LABELS[column], zorder=3, **COLUMN_STYLES[column])

    # Region edges: every column's, as markers on its own curve (ngspice's hollow and underneath),
    # and a line for the shaded column's.
    edge_ticks: list[float] = []
    for column in reversed(COLUMNS):
        curve = result.curves.get(column)
        if curve is None:
            continue
        colour = COLUMN_STYLES[column]["color"]
        for device, edges in curve.edges.items():
            for crossing in edges.crossings:
                y = float(np.interp(crossing.at, *_ascending(x, curve.output)))
                if not math.isfinite(y):
                    continue
                hollow = column == "sim"
                axes.plot([crossing.at], [y], marker=EDGE_MARKERS[column], color=colour,
                          markersize=9 if hollow else 6, markerfacecolor="none" if hollow else colour,
                          markeredgewidth=1.4 if hollow else 1.0, linestyle="none", zorder=4)  # fmt: skip
                if reference is not None and column == reference[0] and device == result.devices[0]:
                    axes.axvline(crossing.at, color="#555555", linestyle="--", linewidth=0.8, zorder=2)
                    edge_ticks.append(crossing.at)

    lo, hi = sorted((float(x[0]), float(x[-1])))
    if lo <= result.bias <= hi:
        axes.axvline(result.bias, color="tab:purple", linestyle="-.", linewidth=1.0, zorder=2,
                     label=f"bias point {result.source} = {result.bias:.4g} {unit}")  # fmt: skip
        for column in COLUMNS:
            curve = result.curves.get(column)
            if curve is None:
                continue
            y = float(np.interp(result.bias, *_ascending(x, curve.output)))
            if math.isfinite(y):
                axes.plot([result.bias], [y], marker="D", color="tab:purple", markersize=5, zorder=5)
    symbols = {"hand": "▼ hand", "level1": "▲ level-1", "sim": "○ ngspice"}
    present = [symbols[c] for c in COLUMNS if result.curves.get(c) is not None and result.curves[c].edges]
    if present:
        axes.plot([], [], marker="v", color="#555555", linestyle="none", label="region edges: " + " ".join(present))
    if shaded_by:
        shown = dict.fromkeys(region for _, _, region in _spans(result, reference[1], result.devices[0]))
        for region in shown:
            axes.fill_between([], [], color=REGION_COLOURS.get(region, "#eeeeee"), label=f"{region} ({shaded_by})")

    axes.set_xlabel(f"{result.source} ({unit})")
    axes.set_ylabel(f"V({result.output}) (V)")
    axes.set_xlim(lo, hi if hi > lo else lo + 1.0)
    title = " ".join(result.title.split()) or Path(result.file).name
    axes.set_title(title if len(title) <= 90 else title[:87] + "…", fontsize=11)
    # Headroom above the highest curve for the region labels.
    finite = [curve.output[np.isfinite(curve.output)] for curve in result.curves.values() if curve is not None]
    values = np.concatenate(finite) if finite else np.array([0.0])
    if values.size:
        bottom, top = float(values.min()), float(values.max())
        pad = 0.05 * (top - bottom or 1.0)
        axes.set_ylim(bottom - pad, top + 2.5 * pad)
    if edge_ticks:
        # The shaded column's edges as ticks on a top axis, so the values never cover a curve.
        top_axis = axes.secondary_xaxis("top")
        top_axis.set_xticks(edge_ticks, [f"{at:.4g} {unit}" for at in edge_ticks], fontsize=8, color="#333333")
        top_axis.tick_params(length=3, pad=1)
    axes.grid(True, color="#bbbbbb", linewidth=0.5, alpha=0.7)
    axes.legend(loc="best", fontsize=8, framealpha=0.9)
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else {}
    figure.savefig(buffer, format=fmt, dpi=FIGURE_DPI, metadata=metadata)
    return buffer.getvalue()


def _ascending(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    order = np.argsort(x)
    return x[order], y[order]


def write_plot(result: TransferCurve, path: str | os.PathLike[str]) -> Path:
    """Render and write the plot atomically; the format follows the file name."""
    fmt = plot_format(path)
    data = render_plot(result, fmt)
    return write_atomically(path, lambda handle: handle.write(data))
