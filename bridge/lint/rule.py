"""What a lint rule is handed: the circuit, its solutions (any may be missing) and the
thresholds, and the one signature every rule module follows."""

from __future__ import annotations

from collections.abc import Callable

from ..analysis.dcsolve import OperatingPoint
from ..netlist.circuit import Circuit
from ..records import record
from ..sim.operating_point import SimOperatingPoint
from ..vocabulary import Finding


@record(frozen=True)
class LintSettings:
    """Thresholds a designer may set (command line or `[tool.biasbridge.lint]`). Each default
    is a rule of thumb: common practice, no source."""

    saturation_margin: float = 0.1  # V: vds − vov below this is too close to triode
    weak_overdrive: float = 0.05  # V: an overdrive below this leaves the square law doubtful
    resistor_rating: float = 0.25  # W: a resistor dissipating more needs a bigger part


@record(frozen=True)
class LintContext:
    """One netlist as the rules see it. `level1` is the project's own level-1 solution (None
    when it cannot be solved or the cards are not level 1); `sim` ngspice's `.op` when it ran."""

    circuit: Circuit
    settings: LintSettings
    level1: OperatingPoint | None = None
    sim: SimOperatingPoint | None = None


Rule = Callable[[LintContext], list[Finding]]
