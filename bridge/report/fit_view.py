"""`biasbridge fit`'s output: a table of the fitted values on a terminal (plain text in a pipe),
the JSON object, and the card. Formatting only: every number comes from ``bridge.fit.run``."""

from __future__ import annotations

from ..fit.least_squares import Level1Values
from ..fit.run import FitOutcome
from ..netlist.numbers import engineering

PARAMETERS = (("vto", "VTO", "V"), ("kp", "KP", "A/V²"), ("lambda", "LAMBDA", "1/V"), ("gamma", "GAMMA", "√V"),
              ("phi", "PHI", "V"))  # fmt: skip


def _signed(outcome: FitOutcome, values: Level1Values | None, key: str, uncertainty: bool = False) -> float | None:
    """A value as the card writes it (VTO negative for an enhancement PMOS; uncertainties unsigned)."""
    if values is None:
        return None
    value = {"vto": values.vto, "kp": values.kp, "lambda": values.lambda_, "gamma": values.gamma,
             "phi": values.phi}[key]  # fmt: skip
    if value is None:
        return None
    if key == "vto" and outcome.mos_type == "pmos" and not uncertainty:
        value = -value
    return float(value)


def fit_json(outcome: FitOutcome) -> dict[str, object]:
    """The JSON object of issue 15; card mode adds ``valid_range``."""
    document: dict[str, object] = {
        "model": {key: _signed(outcome, outcome.values, key) for key, _, _ in PARAMETERS},
        "uncertainty": {key: _signed(outcome, outcome.uncertainty, key, True) for key, _, _ in PARAMETERS},
        "card": outcome.card_text,
        "rms_rel_error": outcome.rms_rel_error,
        "points_used": outcome.points_used,
        "points_dropped": outcome.points_dropped,
        "sim_rms_rel_error": outcome.sim_rms_rel_error,
    }
    if outcome.mode == "card":
        holding = outcome.holding
        document["valid_range"] = None if holding is None else {"vgs": list(holding.vgs), "vds": list(holding.vds)}
    return document


def _percent(value: float | None) -> str:
    return "—" if value is None else f"{100 * value:.3g} %"


def fit_lines(outcome: FitOutcome) -> list[str]:
    """The report as plain lines below the table: fit quality, estimates, worst points, warnings."""
    lines: list[str] = []
    if outcome.mode != "datasheet":
        lines.append(f"points used: {outcome.points_used}; below the current floor of {outcome.floor:.3g} A and "
                     f"left out: {outcome.points_dropped}")  # fmt: skip
        lines.append(f"RMS relative error, level-1 model vs {'data' if outcome.mode == 'data' else 'the card'}: "
                     f"{_percent(outcome.rms_rel_error)}")  # fmt: skip
        against = "data" if outcome.mode == "data" else "the card"
        sim = ("— (ngspice not available)" if outcome.sim_rms_rel_error is None
               else _percent(outcome.sim_rms_rel_error))  # fmt: skip
        lines.append(f"RMS relative error, fitted card simulated in ngspice vs {against}: {sim}")
        for estimate in outcome.estimates:
            kp = "" if estimate.kp is None else f", KP = {estimate.kp:.4g} A/V²"
            lines.append(f"first estimate, {estimate.method}, VDS = {estimate.vds:.3g} V: "
                         f"VTO = {estimate.vto:.4g} V (device polarity){kp}")
        if outcome.worst:
            lines.append("worst points (device polarity):")
            reference = "measured" if outcome.mode == "data" else "ngspice"
            for point in outcome.worst:
                row = f"line {point.row}: " if outcome.mode == "data" else ""
                lines.append(f"  {row}vgs={point.vgs:g} vds={point.vds:g} vbs={point.vbs:g}  "
                             f"{reference} {point.measured:.4g} A  model {point.model:.4g} A  "
                             f"({100 * point.relative:+.3g} %)")
    if outcome.mode == "card":
        if outcome.holding is not None:
            lines.append(f"holds within 5 % of ngspice at every grid point above the floor for VGS "
                         f"{outcome.holding.vgs[0]:g}..{outcome.holding.vgs[1]:g} V and VDS "
                         f"{outcome.holding.vds[0]:g}..{outcome.holding.vds[1]:g} V (device polarity)")
        lines.append(f"share of the grid points above the floor within 5 %: {_percent(outcome.within_share)}")
    lines += [f"warning: {w}" for w in outcome.warnings]
    return lines


def fit_text(outcome: FitOutcome) -> str:
    """The whole report as plain text (a pipe)."""
    head = [f"{outcome.source}: level-1 {outcome.mos_type} card `{outcome.name}` "
            f"(W = {engineering(outcome.geometry.w, 'm')}, L = {engineering(outcome.geometry.l, 'm')})"]
    for key, label, unit in PARAMETERS:
        value = _signed(outcome, outcome.values, key)
        spread = _signed(outcome, outcome.uncertainty, key, True)
        if value is None:
            head.append(f"  {label:<7} not fitted")
        else:
            head.append(f"  {label:<7} {value:.5g} {unit}" + ("" if spread is None else f"  ± {spread:.2g}"))
    return "\n".join(head + fit_lines(outcome) + ["", outcome.card_text.rstrip("\n")]) + "\n"


def fit_renderable(outcome: FitOutcome):
    """A rich renderable for a terminal: the table of values, the lines, the card."""
    from rich.console import Group
    from rich.table import Table
    from rich.text import Text

    size = f"W = {engineering(outcome.geometry.w, 'm')}, L = {engineering(outcome.geometry.l, 'm')}"
    table = Table(title=f"{outcome.source}: level-1 {outcome.mos_type} card `{outcome.name}` ({size})")
    table.add_column("parameter")
    table.add_column("value", justify="right")
    table.add_column("± 1σ", justify="right")
    table.add_column("unit")
    for key, label, unit in PARAMETERS:
        value = _signed(outcome, outcome.values, key)
        spread = _signed(outcome, outcome.uncertainty, key, True)
        table.add_row(label, "not fitted" if value is None else f"{value:.5g}",
                      "" if spread is None else f"{spread:.2g}", unit)  # fmt: skip
    return Group(table, *(Text(line) for line in fit_lines(outcome)), Text(""), Text(outcome.card_text.rstrip("\n")))
