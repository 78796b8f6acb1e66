"""The operating-point check of one circuit: run the three analyses, then compare.

hand (square law, λ = γ = 0) · level1 (own MNA/Newton solver) · sim (ngspice .op via the
worker). A failure of one column becomes a finding; the others still report. The deck goes to
the worker first, so ngspice solves it while the hand analysis and the level-1 solver run.
"""

from __future__ import annotations

from .analysis.dcsolve import DcSolveError, OperatingPoint, solve_operating_point
from .analysis.hand import HandAnalysisError, HandModel, HandSolution
from .compare import CheckResult, Expectations, Finding, compare
from .netlist.circuit import Circuit
from .sim.client import NgspiceSession, SimulationFailed, SimulatorError, SimulatorTimeout
from .sim.operating_point import PendingOperatingPoint, SimOperatingPoint, submit_operating_point


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
    pending: PendingOperatingPoint | None = None
    not_sent: SimulatorError | None = None
    if session is not None:
        try:
            pending = submit_operating_point(session, circuit, timeout=sim_timeout)
        except SimulatorError as exc:  # reported below, in its place among the findings
            not_sent = exc
    attribution = None
    try:
        model = HandModel(circuit)
        hand = model.solve()
    except HandAnalysisError as exc:
        # Outside the hand model (a BJT or diode in the circuit, a floating gate, ...): the
        # other two columns still report.
        findings.append(Finding("warning", "hand-unavailable", f"hand analysis: {exc}", None, None))
        hand = HandSolution(f"outside the hand model ({exc})", False, {}, {}, (), ())
    else:

        def attribution(effect: str) -> HandSolution:
            # Started from the plain hand point: one effect moves it a little, and Newton from
            # there needs a few iterations where a start from zero can need the gmin ladder.
            return model.solve(effects=frozenset({effect}), working=False, start=hand.node_voltages)

    if hand.devices and not hand.closed_form:
        findings.append(
            Finding("info", "hand-numeric", f"hand analysis: {hand.topology}; no closed form was used, the "
                    "simplified model was solved numerically", None, None)
        )

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
            if not_sent is not None:
                raise not_sent
            assert pending is not None
            simulator = ("ngspice", session.version)
            sim = pending.result()
            for message in sim.messages:
                if "singular matrix" in message.lower():
                    # ngspice then falls back to stepping or a transient op: its answer is set by
                    # whatever resolves the singularity, not by the DC circuit.
                    findings.append(Finding("warning", "sim-singular", f"ngspice: {message} — its operating "
                                            "point is not trustworthy (a node with no DC path?)", None, None))
                else:
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
        simulator=simulator, tolerance=tolerance, attribution=attribution, expect=expect,
        findings=tuple(findings),
    )
