"""The words every layer shares: findings and their severities, derivation steps, the effects
the hand model leaves out, the columns of a check, the device quantities, the designer's
expectations, and the findings said the same way wherever they arise.

A leaf: it imports nothing of biasbridge's but `bridge.records` (how every record is made, itself
importing only the standard library), so the analyses, the comparison, the rules and the reports
all import these names from here and none from a module above it.
"""

from __future__ import annotations

from dataclasses import field

from bridge.records import record

# Severities, most serious first: an error or a warning is a disagreement (exit status 1).
SEVERITIES = ("error", "warning", "info")


@record(frozen=True)
class Finding:
    """One thing a check or a sweep tells the designer, at the element's source line when an
    element is its subject."""

    severity: str  # one of SEVERITIES
    code: str
    message: str
    line: int | None = None
    subject: str | None = None
    column: int | None = None  # 1-based, where the finding points inside its line (lint)
    fix: str | None = None  # one line on what to change (lint)
    quantity: str | None = None  # the compared quantity (`M1 id`, `V(d)`) of a column comparison
    effect: str | None = None  # the one effect of EFFECTS a `cause` finding speaks of (None: several)


@record(frozen=True)
class Step:
    """One line of the working: what is done, the equation with its numbers, and the result."""

    text: str
    equation: str | None = None
    value: float | None = None
    unit: str = ""

    def __str__(self) -> str:
        return f"{self.text}: {self.equation}" if self.equation else self.text


# Second-order effects the hand model leaves out; the attribution switches each on alone.
EFFECTS = ("lambda", "gamma")
EFFECT_NAMES = {"lambda": "channel-length modulation (LAMBDA)", "gamma": "body effect (GAMMA)"}

# The three columns of every result: the designer's square law, our level-1 solver, ngspice.
COLUMNS = ("hand", "level1", "sim")
# In the text of a finding ("the level-1 solver puts it in triode") ...
COLUMN_NAMES = {"hand": "hand analysis", "level1": "level-1 solver", "sim": "ngspice"}
# ... and as a table's column heading (with the designer's own targets beside them).
COLUMN_TITLES = {"hand": "hand", "level1": "level-1", "sim": "ngspice", "expect": "expected"}
# ... and as the solution a value was found in ("in the level-1 solution", "in ngspice's solution").
COLUMN_SOLUTIONS = {"hand": "hand analysis", "level1": "level-1 solution", "sim": "ngspice's solution"}

# What each column gives per transistor, in device polarity, and their units.
DEVICE_QUANTITIES = ("id", "vgs", "vds", "vth", "vov", "gm", "gds")
UNITS = {"id": "A", "vgs": "V", "vds": "V", "vth": "V", "vov": "V", "gm": "S", "gds": "S", "sat_margin": "V"}
# The saturation margin vds − vov per device (the table's `vds − vov` row): negative is triode.
SAT_MARGIN = "sat_margin"


@record(frozen=True, eq=False)
class Expectation:
    """The designer's own target for one quantity, with its tolerance (relative)."""

    value: float | str
    tolerance: float
    line: int | None = None


@record(frozen=True, eq=False)
class Expectations:
    """The designer's targets from an `--expect` file: per node, and per device and quantity."""

    nodes: dict[str, Expectation] = field(default_factory=dict)
    devices: dict[str, dict[str, Expectation]] = field(default_factory=dict)
    file: str | None = None


def not_level1_finding(other_levels, why: str | None = None) -> Finding:
    """Hand and level-1 columns left empty: both read level-1 cards only (KP, VTO, LAMBDA, GAMMA),
    and a card of another level has none of them to read; its defaults would be numbers of a
    device the netlist does not hold. ngspice still solves the circuit as written.
    `other_levels`: ``Circuit.other_level_mosfets()``, not empty; `why`: why no level-1
    equivalent of the card stands in for it (see ``fitted_equivalent_finding``)."""
    cards = other_level_cards(other_levels)
    first = other_levels[0][0]
    one = len(other_levels) == 1
    message = (
        f"{cards}: the hand and level-1 columns need level-1 model cards and are left empty; "
        "ngspice solves the card as written"
    )
    if why:
        message += f" (no level-1 equivalent: {why})"
    return Finding("info", "not-level-1", message, first.origin.line if one else None, first.name if one else None)


FITTED_EQUIVALENT = "fitted-equivalent"
# The cause the attribution adds for a device on a fitted equivalent: what the card does beyond it.
BEYOND_LEVEL1 = "beyond_level1"
BEYOND_LEVEL1_NAME = "model beyond level 1 (the card against its fitted level-1 equivalent)"


def fitted_equivalent_finding(
    device: str, line: int | None, model: str, level: int, card: str, values: str, where: str, around: str,
    rms_around: str, at_point: str, error: str, below_floor: bool = False,
) -> Finding:  # fmt: skip
    """The hand and level-1 columns of `device` rest on a level-1 equivalent of its card, fitted by
    biasbridge to ngspice's I–V of the card around ngspice's operating point; the level-1 column is
    judged against ngspice within what that fit's error allows, not 0.2 %. (The numbers come formatted.)"""
    message = (
        f"{device}: model {model} is LEVEL={level}: the hand and level-1 columns rest on its level-1 "
        f"equivalent {card} ({values}), fitted by biasbridge to ngspice's drain current of the card at {where}, "
        f"weighted around ngspice's operating point ({around}; GAMMA not fitted, so VTO is the threshold at that "
        f"VBS); its RMS error there is {rms_around}, at the operating point itself {at_point}"
    )
    if below_floor:
        message += (" (ngspice's current there is below the fit's floor, in weak inversion, where the square law "
                    "has no current: the level-1 id of this device is not compared)")
    message += (f": the level-1 column is judged against ngspice within what a {error} current error moves each "
                "value, plus 0.2 %, and its vth, vov, gm and gds (the equivalent's, not the card's) are not compared")
    return Finding("info", FITTED_EQUIVALENT, message, line, device)


def other_level_cards(other_levels) -> str:
    """`model NB3 of M1 is LEVEL=49`, for each MOSFET of ``Circuit.other_level_mosfets()``."""
    return ", ".join(f"model {card.name} of {element.name} is LEVEL={card.level}" for element, card in other_levels)


def simulator_failure(error: Exception) -> Finding:
    """ngspice gave no answer: the error (``bridge.sim.client.SimulatorError`` or a subclass) as
    the finding `check` and `sweep` both report.

    Told apart by what the errors carry, so that this module needs none of ours: a timeout is a
    ``TimeoutError`` with the ``timeout`` it waited (the worker is then killed); a failed
    simulation has the ``kind`` of failure and ngspice's own ``messages`` (the first three are
    quoted); anything else is the worker's failure as the error states it.
    """
    if isinstance(error, TimeoutError):
        waited = getattr(error, "timeout", None)
        within = f" within {waited:g} s" if isinstance(waited, (int, float)) else ""
        return Finding("error", "sim-timeout", f"ngspice did not answer{within}; the worker was stopped")
    kind = getattr(error, "kind", None)
    if kind is not None:
        code = "sim-no-convergence" if kind == "no_convergence" else "sim-failed"
        said = "; ".join(getattr(error, "messages", ())[:3])
        return Finding("error", code, f"ngspice: {error}" + (f" ({said})" if said else ""))
    return Finding("error", "sim-crashed", f"ngspice worker failed: {error}")
