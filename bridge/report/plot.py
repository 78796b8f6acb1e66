"""The transfer-curve plot of `biasbridge sweep --plot FILE.png|.svg` (matplotlib, Agg: no display).

Formatting only: the curves, regions, edges and bias point come from the sweep (bridge.sweep_run).
The figure is FIGURE_INCHES at FIGURE_DPI (800 × 500 px as PNG, 576 × 360 pt as SVG); with the
detail panel of the active region below the whole sweep, DETAIL_FIGURE_INCHES (800 × 800 px).
"""

from __future__ import annotations

import io
import math
import os
from pathlib import Path

import numpy as np

from ..curves import Curve
from ..sweep_run import TransferCurve
from ..vocabulary import COLUMNS
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
EDGE_MARKER_SIZE = 11  # points; ngspice's hollow circle is 4 larger, around the others
EDGE_LABEL_NAMES = {"hand": "hand", "level1": "level-1"}
X_MARGIN = 0.03  # of the shown span, on each side
# The detail panel: shown when the active region is less than DETAIL_WHEN of the sweep, with
# DETAIL_MARGIN of its width on each side; the figure is then DETAIL_FIGURE_INCHES.
DETAIL_WHEN = 0.25
DETAIL_MARGIN = 0.3
DETAIL_FIGURE_INCHES = (8.0, 8.0)


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


def active_window(result: TransferCurve) -> tuple[float, float] | None:
    """The x range the detail panel shows: the shaded device's saturation runs (the active region)
    with a margin, when they cover less than DETAIL_WHEN of the sweep; None otherwise."""
    reference = _reference(result)
    if reference is None or len(result.x) < 2:
        return None
    runs = [(lo, hi) for left, right, region in _spans(result, reference[1], result.devices[0])
            if region == "saturation" for lo, hi in [sorted((left, right))]]  # fmt: skip
    if not runs:
        return None
    lo, hi = sorted((float(result.x[0]), float(result.x[-1])))
    first, last = min(a for a, _ in runs), max(b for _, b in runs)
    width = last - first
    if width <= 0.0 or width >= DETAIL_WHEN * (hi - lo):
        return None
    margin = DETAIL_MARGIN * width
    return max(lo, first - margin), min(hi, last + margin)


def render_plot(result: TransferCurve, fmt: str) -> bytes:
    """The figure as PNG or SVG bytes."""
    figure = plot_figure(result)
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else {}
    figure.savefig(buffer, format=fmt, dpi=FIGURE_DPI, metadata=metadata)
    return buffer.getvalue()


def plot_figure(result: TransferCurve):
    """The matplotlib Figure: the whole sweep, and below it the active region enlarged when that
    is a small part of the sweep (`active_window`)."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    from matplotlib.figure import Figure

    window = active_window(result)
    inches = FIGURE_INCHES if window is None else DETAIL_FIGURE_INCHES
    figure = Figure(figsize=inches, dpi=FIGURE_DPI, layout="constrained")
    if window is None:
        _draw_panel(figure.add_subplot(), result, None, labels=True)
    else:
        top, bottom = figure.subplots(2, 1, height_ratios=(1.0, 1.0))
        _draw_panel(top, result, None, labels=False)
        top.axvspan(*window, facecolor="none", edgecolor="tab:purple", linewidth=1.2, linestyle="--", zorder=7)
        _draw_panel(bottom, result, window, labels=True)
        unit = result.source_unit
        bottom.set_title(f"active region enlarged: {result.source} {window[0]:.4g} … {window[1]:.4g} {unit} "
                         "(dashed frame above)", fontsize=9)  # fmt: skip
    title = " ".join(result.title.split()) or Path(result.file).name
    figure.suptitle(title if len(title) <= 90 else title[:87] + "…", fontsize=11)
    return figure


def _draw_panel(axes, result: TransferCurve, window: tuple[float, float] | None, labels: bool) -> None:
    """One panel: curves, shaded regions, edges and bias point over the sweep or over `window`.
    With `labels`, the hand and level-1 edges carry their values beside their markers."""
    x = result.x
    unit = result.source_unit
    lo, hi = sorted((float(x[0]), float(x[-1])))
    view_lo, view_hi = window if window is not None else (lo, hi if hi > lo else lo + 1.0)
    view_span = view_hi - view_lo
    reference = _reference(result)
    shaded_by = ""
    if reference is not None:
        column, curve = reference
        device = result.devices[0]
        shaded_by = f"{device}, {COLUMN_LABELS[column].split(' (')[0]}"
        for left, right, region in _spans(result, curve, device):
            a, b = sorted((left, right))
            axes.axvspan(a, b, color=REGION_COLOURS.get(region, "#eeeeee"), alpha=0.8, linewidth=0, zorder=0)
            shown_lo, shown_hi = max(a, view_lo), min(b, view_hi)
            if shown_hi - shown_lo > 0.06 * view_span:
                axes.text(0.5 * (shown_lo + shown_hi), 0.975, region, transform=axes.get_xaxis_transform(),
                          ha="center", va="top", fontsize=9, color="#444444", zorder=6,
                          bbox={"facecolor": REGION_COLOURS.get(region, "#eeeeee"), "edgecolor": "none", "pad": 1.5})
                # fmt: skip

    for column in COLUMNS:
        curve = result.curves.get(column)
        if curve is None:
            continue
        axes.plot(x, curve.output, label=COLUMN_LABELS[column], zorder=3, **COLUMN_STYLES[column])

    # Region edges: every column's, as markers on its own curve (ngspice's hollow and around the
    # others), a line for the shaded column's, and the hand and level-1 values written beside theirs.
    edge_ticks: list[float] = []
    for column in reversed(COLUMNS):
        curve = result.curves.get(column)
        if curve is None:
            continue
        colour = COLUMN_STYLES[column]["color"]
        hollow = column == "sim"
        for device, edges in curve.edges.items():
            for crossing in edges.crossings:
                y = float(np.interp(crossing.at, *_ascending(x, curve.output)))
                if not math.isfinite(y):
                    continue
                axes.plot([crossing.at], [y], marker=EDGE_MARKERS[column], color=colour,
                          markersize=EDGE_MARKER_SIZE + (4 if hollow else 0),
                          markerfacecolor="none" if hollow else colour, markeredgecolor=colour if hollow else "white",
                          markeredgewidth=2.0 if hollow else 0.8, linestyle="none", zorder=5 if hollow else 4)
                # fmt: skip
                if reference is not None and column == reference[0] and device == result.devices[0]:
                    axes.axvline(crossing.at, color="#555555", linestyle="--", linewidth=0.8, zorder=2)
                    edge_ticks.append(crossing.at)
                if labels and not hollow and view_lo <= crossing.at <= view_hi:
                    _edge_label(axes, column, crossing.at, y, unit, crossing.at > view_lo + 0.6 * view_span)

    if lo <= result.bias <= hi:
        axes.axvline(result.bias, color="tab:purple", linestyle="-.", linewidth=1.0, zorder=2,
                     label=f"bias point {result.source} = {result.bias:.4g} {unit}")  # fmt: skip
        for column in COLUMNS:
            curve = result.curves.get(column)
            if curve is None:
                continue
            y = float(np.interp(result.bias, *_ascending(x, curve.output)))
            if math.isfinite(y):
                axes.plot([result.bias], [y], marker="D", color="tab:purple", markersize=8,
                          markeredgecolor="white", markeredgewidth=0.8, zorder=6)  # fmt: skip
    symbols = {"hand": "▼ hand", "level1": "▲ level-1", "sim": "○ ngspice"}
    present = [symbols[c] for c in COLUMNS if result.curves.get(c) is not None
               and any(edges.crossings for edges in result.curves[c].edges.values())]  # fmt: skip
    if present:
        axes.plot([], [], marker="v", color="#555555", linestyle="none", label="region edges: " + " ".join(present))
    if shaded_by:
        shown = dict.fromkeys(region for _, _, region in _spans(result, reference[1], result.devices[0]))
        for region in shown:
            axes.fill_between([], [], color=REGION_COLOURS.get(region, "#eeeeee"), label=f"{region} ({shaded_by})")

    axes.set_xlabel(f"{result.source} ({unit})")
    axes.set_ylabel(f"V({result.output}) (V)")
    # A margin on both sides, so a bias point or an edge at the end of the sweep is not cut by the frame.
    axes.set_xlim(view_lo - X_MARGIN * view_span, view_hi + X_MARGIN * view_span)
    # Headroom above the highest curve (in view) for the region labels.
    inside = (x >= view_lo) & (x <= view_hi)
    finite = [curve.output[inside & np.isfinite(curve.output)] for curve in result.curves.values() if curve is not None]
    values = np.concatenate(finite) if finite else np.array([0.0])
    if values.size:
        bottom, top = float(values.min()), float(values.max())
        pad = 0.05 * (top - bottom or 1.0)
        axes.set_ylim(bottom - 1.5 * pad, top + 2.5 * pad)
    if edge_ticks:
        # The shaded column's edges as ticks on a top axis, so the values never cover a curve.
        ticks = [at for at in edge_ticks if view_lo <= at <= view_hi]
        top_axis = axes.secondary_xaxis("top")
        top_axis.set_xticks(ticks, [f"{at:.4g} {unit}" for at in ticks], fontsize=8, color="#333333")
        top_axis.tick_params(length=3, pad=1)
    axes.grid(True, color="#bbbbbb", linewidth=0.5, alpha=0.7)
    if labels:
        # Below the plot, where it covers no curve, edge or region label.
        handles, texts = axes.get_legend_handles_labels()
        axes.figure.legend(handles, texts, loc="outside lower center", ncols=3, fontsize=8, frameon=False)


def _edge_label(axes, column: str, at: float, y: float, unit: str, leftwards: bool) -> None:
    """A hand or level-1 edge's value beside its marker: hand above, level-1 below."""
    dx = -9 if leftwards else 9
    dy = 9 if column == "hand" else -11
    axes.annotate(
        f"{EDGE_LABEL_NAMES[column]} {at:.4g} {unit}", (at, y), xytext=(dx, dy), textcoords="offset points",
        ha="right" if leftwards else "left", va="bottom" if dy > 0 else "top", fontsize=8,
        color=COLUMN_STYLES[column]["color"], zorder=8,
        bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.0},
    )


def _ascending(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    order = np.argsort(x)
    return x[order], y[order]


def write_plot(result: TransferCurve, path: str | os.PathLike[str]) -> Path:
    """Render and write the plot atomically; the format follows the file name."""
    fmt = plot_format(path)
    data = render_plot(result, fmt)
    return write_atomically(path, lambda handle: handle.write(data))
