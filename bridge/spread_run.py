"""One netlist's spread: the tolerance bands solved at their corners and Monte-Carlo samples
(analysis/spread.py on dcbatch), the extremes' corners run in ngspice (sim/corners.py), and the
findings (spread_compare.py). The command layer reads the options into bands; the view formats
what this returns."""

from __future__ import annotations

from typing import TYPE_CHECKING

from .analysis.spread import spread
from .lint.rule import LintSettings
from .records import record
from .spread_compare import spread_findings

if TYPE_CHECKING:
    from collections.abc import Sequence

    from .analysis.spread import SpreadResult
    from .netlist.circuit import Circuit
    from .sim.client import NgspiceSession
    from .sim.corners import CornerCheck
    from .vocabulary import Finding


@record(frozen=True)
class SpreadRun:
    result: SpreadResult
    check: CornerCheck | None  # ngspice at the extremes' corners; None without ngspice
    findings: tuple[Finding, ...]


def run_spread(
    circuit: Circuit, bands: Sequence, *, samples: int, seed: int, distribution: str,
    session: NgspiceSession | None, timeout: float,
) -> SpreadRun:  # fmt: skip
    """Solve the corners and samples, run the extremes' corners in ngspice when `session` is
    given, and say what they show. Raises ValueError (the temperature phase refusing a card) and
    dcsolve.DcSolveError (a circuit the level-1 solver cannot take) as analysis.spread does."""
    result = spread(circuit, bands, samples=samples, seed=seed, distribution=distribution,
                    margin_threshold=LintSettings().saturation_margin)  # fmt: skip
    check = None
    if session is not None:
        from .sim.corners import prove_corners

        check = prove_corners(session, circuit, result, timeout=timeout)
    return SpreadRun(result, check, spread_findings(circuit, result, check))
