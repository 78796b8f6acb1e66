"""The operating-point check of one circuit: run the three analyses, then compare.

hand (square law, λ = γ = 0) · level1 (own MNA/Newton solver) · sim (ngspice .op via the
worker). A failure of one column becomes a finding; the others still report.
"""

from __future__ import annotations

from .analysis.dcsolve import DcSolveError, OperatingPoint, solve_operating_point
from .analysis.hand import HandSolution, hand_analysis
from .compare import CheckResult, Expectations, Finding, compare
from .netlist.circuit import Circuit
from .sim.client import NgspiceSession, SimulationFailed, SimulatorError, SimulatorTimeout
from .sim.operating_point import SimOperatingPoint, simulate_operating_point


class NotASingleStage(ValueError):
    """A circuit the check cannot take (no MOSFET at all, say)."""


def check_circuit(
    circuit: Circuit,
    session: NgspiceSession | None,
    *,
    tolerance: float,
    sim_timeout: float = 10.0,
    expect: Expectations | None = None,
    unavailable_hint: str | None = None,
) -> CheckResult:
    if not circuit.elements_of("mosfet"):
        raise NotASingleStage("the netlist has no MOSFET: biasbridge checks MOSFET bias points")
    findings: list[Finding] = [
        Finding("info", n.code, n.message, n.line, None) for n in circuit.notices
    ]
    hand = hand_analysis(circuit)
    if not hand.closed_form:
        findings.append(
            Finding("info", "hand-numeric", f"hand analysis: {hand.topology}; no closed form was used, the "
                    "simplified model was solved numerically", None, None)
        )

    def with_effect(effect: str) -> HandSolution:
        return hand_analysis(circuit, effects=frozenset({effect}))

    level1: OperatingPoint | None = None
    try:
        level1 = solve_operating_point(circuit)
        for caveat in level1.caveats:
            findings.append(Finding("info", "solver-caveat", caveat, None, None))
        if level1.method != "newton":
            findings.append(
                Finding("info", "solver-method", f"level-1 solver converged by {level1.method}", None, None)
            )
    except DcSolveError as exc:
        findings.append(Finding("error", "solver-failed", f"level-1 solver: {exc}", None, None))

    sim: SimOperatingPoint | None = None
    simulator: tuple[str, str] | None = None
    if session is None:
        findings.append(Finding("info", "no-simulator", unavailable_hint or "ngspice not available", None, None))
    else:
        try:
            simulator = ("ngspice", session.version)
            sim = simulate_operating_point(session, circuit, timeout=sim_timeout)
            for message in sim.messages:
                findings.append(Finding("info", "ngspice-says", message, None, None))
        except SimulatorTimeout:
            findings.append(Finding("error", "sim-timeout", f"ngspice did not answer within {sim_timeout:g} s; "
                                    "the worker was restarted", None, None))
        except SimulationFailed as exc:
            code = "sim-no-convergence" if exc.kind == "no_convergence" else "sim-failed"
            detail = "; ".join(exc.messages[:3]) if getattr(exc, "messages", None) else ""
            findings.append(Finding("error", code, f"ngspice: {exc}" + (f" ({detail})" if detail else ""), None, None))
        except SimulatorError as exc:
            findings.append(Finding("error", "sim-crashed", f"ngspice worker failed: {exc}; restarted for the "
                                    "next netlist", None, None))
    return compare(
        circuit, hand, level1, sim,
        simulator=simulator, tolerance=tolerance, attribution=with_effect, expect=expect,
        findings=tuple(findings),
    )
