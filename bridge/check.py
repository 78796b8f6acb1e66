"""The operating-point check of one circuit: run the three analyses, then compare.

hand (square law, λ = γ = 0) · level1 (own MNA/Newton solver) · sim (ngspice .op via the
worker). A failure of one column becomes a finding; the others still report. The deck goes to
the worker first, so ngspice solves it while the hand analysis and the level-1 solver run.
`start_check` and `PendingCheck` split a check at ngspice's answer, so that a caller can start
the next netlist's check (and send its deck) before comparing and printing this one.
"""

from __future__ import annotations

import math
import re
from collections import deque
from collections.abc import Iterator
from dataclasses import replace

from .analysis.dcsolve import DcSolveError, OperatingPoint, solve_operating_point
from .analysis.hand import HandAnalysisError, HandModel, HandSolution
from .bias_rules import bias_findings, device_vector_findings, inconsistent_device_vectors, supplies
from .compare import CheckResult, FittedEquivalent, FittedTolerance, compare
from .devices.mos1.instance import default_size
from .devices.mos1.load import Level1Geometry
from .netlist.circuit import Circuit, Directive
from .netlist.numbers import engineering
from .netlist.source import NOTICE_SEVERITY, notice_in
from .records import record
from .sim.client import NgspiceSession, SimulatorError
from .sim.operating_point import (
    PendingOperatingPoint,
    SimOperatingPoint,
    simulate_operating_point,
    submit_operating_point,
)
from .vocabulary import (
    DEVICE_QUANTITIES,
    EFFECT_NAMES,
    EFFECTS,
    Expectations,
    Finding,
    fitted_equivalent_finding,
    not_level1_finding,
    other_level_cards,
    simulator_failure,
)


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
    return start_check(
        circuit, session, tolerance=tolerance, sim_timeout=sim_timeout, expect=expect,
        unavailable_hint=unavailable_hint,
    ).finish()


def start_check(
    circuit: Circuit,
    session: NgspiceSession | None,
    *,
    tolerance: float,
    sim_timeout: float = 10.0,
    expect: Expectations | None = None,
    unavailable_hint: str | None = None,
    submit: bool = True,
    own: OwnColumns | None = None,
) -> PendingCheck:
    """The check up to ngspice's answer: the deck sent (unless `submit` is False: then it is sent
    by ``PendingCheck.submit`` or at the latest by ``finish``), hand and level-1 solved (or taken
    from `own`, when ``solve_own_columns(circuit)`` was run already, in another process say).

    ``start_check(...).finish()`` is ``check_circuit(...)``, whenever the deck is sent.
    """
    if own is None and not circuit.elements_of("mosfet"):
        raise NotASingleStage(NO_MOSFET)
    check = PendingCheck(circuit, session, tolerance, sim_timeout, expect, unavailable_hint)
    if submit:
        check.submit()
    check.own = own if own is not None else solve_own_columns(circuit)
    return check


NO_MOSFET = "the netlist has no MOSFET: biasbridge checks MOSFET bias points"


@record(frozen=True)
class OwnColumns:
    """What a check computes without ngspice: the hand solution, its re-solves with one effect
    switched on (``vocabulary.EFFECTS``; None when the hand model does not cover the circuit), the
    level-1 operating point (None when the solver failed), and the findings these raised."""

    hand: HandSolution
    with_effect: dict[str, HandSolution] | None
    level1: OperatingPoint | None
    findings: tuple[Finding, ...]


def _solved_with_each_effect(model: HandModel, hand: HandSolution, findings: list[Finding]) -> dict[str, HandSolution]:
    """The hand model re-solved with each effect alone; an effect with which it has no solution
    is left out of the causes, and a finding says so. An effect that cannot act in this circuit
    (``HandModel.solved_unchanged``) is not re-solved: its point is the plain hand point."""
    solved: dict[str, HandSolution] = {}
    for effect in EFFECTS:
        unchanged = model.solved_unchanged(effect, hand)
        if unchanged is not None:
            solved[effect] = unchanged
            continue
        try:
            solved[effect] = model.solve(effects=frozenset({effect}), working=False, start=hand.node_voltages)
        except HandAnalysisError as exc:
            findings.append(Finding(
                "info", "hand-unavailable",
                f"hand analysis with {EFFECT_NAMES.get(effect, effect)} alone: {exc}; that effect is left out of "
                "the causes", None, None,
            ))
    return solved


def solve_own_columns(circuit: Circuit) -> OwnColumns:
    """The hand and level-1 columns of `circuit`; a column that fails becomes a finding."""
    if not circuit.elements_of("mosfet"):
        raise NotASingleStage(NO_MOSFET)
    other_levels = circuit.other_level_mosfets()
    if other_levels:
        return _without_own_columns(other_levels)
    findings: list[Finding] = []
    with_effect = None
    try:
        model = HandModel(circuit)
        hand = model.solve()
    except HandAnalysisError as exc:
        # Outside the hand model (a BJT or diode in the circuit, a floating gate, ...): the
        # other two columns still report.
        findings.append(Finding("warning", "hand-unavailable", f"hand analysis: {exc}", None, None))
        hand = HandSolution(f"outside the hand model ({exc})", False, {}, {}, (), ())
    else:
        if hand.devices:
            # Started from the plain hand point: one effect moves it a little, and Newton from
            # there needs a few iterations where a start from zero can need the gmin ladder.
            with_effect = _solved_with_each_effect(model, hand, findings)

    if hand.devices and not hand.closed_form:
        findings.append(
            Finding("info", "hand-numeric", f"hand analysis: {hand.topology}; no closed form was used, the "
                    "simplified model was solved numerically", None, None)
        )

    level1 = None
    try:
        level1 = solve_operating_point(circuit)
        for caveat in level1.caveats:
            findings.append(Finding("info", "solver-caveat", caveat, None, None))
        if level1.method != "newton":
            findings.append(
                Finding("info", "solver-method", f"level-1 solver converged by {level1.method}", None, None)
            )
    except DcSolveError as exc:
        findings.append(_solver_failed(circuit, exc))
    return OwnColumns(hand, with_effect, level1, tuple(findings))


def _solver_failed(circuit: Circuit, error: DcSolveError) -> Finding:
    """The level-1 solver's failure, at the line of the element it names (a BJT, a MOSFET
    without its model, ...) when it names one."""
    element = circuit.element(getattr(error, "element", None) or "")
    line, subject = (element.origin.line, element.name) if element is not None else (None, None)
    return Finding("error", "solver-failed", f"level-1 solver: {error}", line, subject)


def _without_own_columns(other_levels) -> OwnColumns:
    """Hand and level-1 columns left empty for a card of another level (see ``not_level1_finding``)."""
    hand = HandSolution(f"outside the hand model ({other_level_cards(other_levels)}; the hand model reads "
                        "level-1 cards)", False, {}, {}, (), ())
    return OwnColumns(hand, None, None, (not_level1_finding(other_levels),))


class PendingCheck:
    """One netlist's check between ``start_check`` and ``finish``: ngspice's column still to come.

    The findings keep the order ``check_circuit`` gives them, wherever the deck was sent.
    """

    def __init__(
        self,
        circuit: Circuit,
        session: NgspiceSession | None,
        tolerance: float,
        sim_timeout: float,
        expect: Expectations | None,
        unavailable_hint: str | None,
    ) -> None:
        self.circuit = circuit
        self.session = session
        self.tolerance = tolerance
        self.sim_timeout = sim_timeout
        self.expect = expect
        self.unavailable_hint = unavailable_hint
        self.findings: list[Finding] = []  # ngspice's; the circuit's notices and own columns' come first
        self.own: OwnColumns | None = None  # set by start_check
        self.submitted = session is None
        self._pending: PendingOperatingPoint | None = None
        self._not_sent: SimulatorError | None = None
        self._collected = False
        self._sim: SimOperatingPoint | None = None
        self._simulator: tuple[str, str] | None = None

    def submit(self) -> None:
        """Send the deck to ngspice (once; nothing without a session)."""
        if self.submitted:
            return
        self.submitted = True
        assert self.session is not None
        try:
            self._pending = submit_operating_point(self.session, self.circuit, timeout=self.sim_timeout)
        except SimulatorError as exc:  # reported in its place among the findings
            self._not_sent = exc

    @property
    def answered(self) -> bool:
        """Whether ``collect`` (and ``finish``) would go on without waiting for ngspice."""
        if self._collected or self.session is None or self._not_sent is not None:
            return True
        return self._pending is not None and self._pending.answered

    def collect(self) -> None:
        """Take ngspice's answer (waiting for it if need be) or its failure, as findings."""
        if self._collected:
            return
        self.submit()
        self._collected = True
        session, findings = self.session, self.findings
        if session is None:
            findings.append(Finding("info", "no-simulator", self.unavailable_hint or "ngspice not available",
                                    None, None))
            return
        try:
            if self._not_sent is not None:
                raise self._not_sent
            assert self._pending is not None
            self._simulator = ("ngspice", session.version)
            sim = self._sim = self._pending.result()
            for message in sim.messages:
                if "singular matrix" in message.lower():
                    # ngspice then falls back to stepping or a transient op: its answer is set by
                    # whatever resolves the singularity, not by the DC circuit.
                    findings.append(Finding("warning", "sim-singular", f"ngspice: {message} — its operating "
                                            "point is not trustworthy (a node with no DC path?)", None, None))
                else:
                    findings.append(Finding("info", "ngspice-says", message, None, None))
        except SimulatorError as exc:
            findings.append(simulator_failure(exc))

    def finish(self) -> CheckResult:
        """The check's result: ngspice's answer collected (see ``collect``), the columns compared."""
        self.collect()
        own = self.own
        assert own is not None
        circuit, fitted = self.circuit, None
        if own.level1 is None and circuit.other_level_mosfets() and not own.hand.devices:
            equivalent = equivalent_columns(circuit, self.session, self._sim, self.sim_timeout)
            if isinstance(equivalent, Finding):
                own = replace(own, findings=tuple(equivalent if f.code == "not-level-1" else f for f in own.findings))
            else:  # hand and level-1 on the equivalents; ngspice's column stays the card's
                circuit, own, fitted = equivalent.circuit, equivalent.own, equivalent.fitted
        notices = [Finding(NOTICE_SEVERITY, n.code, *notice_in(n, self.circuit.source_file), None)
                   for n in self.circuit.notices]
        supply_table = supplies(circuit, own.hand, own.level1, self._sim)
        rules = bias_findings(circuit, own.hand, own.level1, self._sim, supply_table)
        # ngspice's vectors against its node voltages: judged once, for the finding and for the
        # level-1 differences it disproves (on the same circuit; a fitted one has other cards).
        wrong_vectors = inconsistent_device_vectors(self.circuit, self._sim)
        rules += device_vector_findings(self.circuit, self._sim, wrong_vectors)
        disproving = wrong_vectors if circuit is self.circuit else None
        findings_before = (*notices, *own.findings, *self.findings, *rules)

        def compared(converged: SimOperatingPoint | None = None) -> tuple[CheckResult, tuple[Finding, ...]]:
            result = compare(
                circuit, own.hand, own.level1, self._sim,
                simulator=self._simulator, tolerance=self.tolerance,
                with_effect=own.with_effect, expect=self.expect, findings=findings_before,
                converged=converged, fitted=fitted, supplies=supply_table,
            )
            if fitted is not None:  # the devices under their own card's name
                result = replace(result, devices={
                    name: replace(device, model=self.circuit.element(name).model or "")
                    for name, device in result.devices.items()})  # fmt: skip
            return result, _without_disproved(result.findings, circuit, own.level1, self._sim, disproving)

        result, findings = compared()
        if own.level1 is not None and self._sim is not None and any(f.code == SOLVER_DIFFERS for f in findings):
            converged = self._tight_rerun()
            if converged is not None:
                at_default = findings
                result, findings = compared(converged)
                findings = _with_tolerance_note(at_default, findings, self.circuit)
        return result if findings is result.findings else replace(result, findings=findings)

    def _tight_rerun(self) -> SimOperatingPoint | None:
        """ngspice's operating point of the same circuit at RELTOL = 1e-6, or None when it fails.

        ngspice stops iterating once every unknown moves by less than RELTOL (default 1e-3, ngspice
        manual, `.options`), and its device vectors are those of the last iteration: a swapped PMOS's
        `@m1[id]` was seen 0.22 % from its own branch current at the default, and equal to it (and to
        the level-1 solver) at RELTOL = 1e-6 (`ngspice -b`). The level-1 column is judged against
        this re-run; a difference that stays there is reported as before.
        """
        assert self.session is not None
        tight_circuit = replace(self.circuit, directives=(*self.circuit.directives, _TIGHT_OPTIONS))
        try:
            return simulate_operating_point(self.session, tight_circuit, timeout=self.sim_timeout)
        except SimulatorError:
            return None


def _with_tolerance_note(
    before: tuple[Finding, ...], after: tuple[Finding, ...], circuit: Circuit,
) -> tuple[Finding, ...]:
    """`after`, with one note in place of the level-1/ngspice differences that the tight re-run removed."""
    still = {_differing_quantity(f) for f in after if f.code == SOLVER_DIFFERS}
    gone = [f for f in before if f.code == SOLVER_DIFFERS and _differing_quantity(f) not in still]
    if not gone:
        return after
    names = ", ".join(_differing_quantity(f) for f in gone)
    note = Finding(
        "info", "sim-tolerance",
        f"{names}: the level-1 solver differs from ngspice beyond 0.2 % at ngspice's RELTOL = "
        f"{_reltol(circuit):g} and agrees with ngspice re-run at RELTOL = {TIGHT_RELTOL:g}: the difference is "
        "where ngspice stopped iterating (the ngspice column shows its answer at the netlist's RELTOL)",
        gone[0].line, gone[0].subject,
    )
    # In the place of the first difference it replaces: after what came before it at the default.
    place = sum(1 for f in before[: before.index(gone[0])] if f in after)
    return (*after[:place], note, *after[place:])


def _without_disproved(
    findings: tuple[Finding, ...], circuit: Circuit, level1: OperatingPoint | None, sim: SimOperatingPoint | None,
    wrong_vectors: dict[str, dict[str, tuple]] | None = None,
) -> tuple[Finding, ...]:
    """The findings less each `solver-differs` on a terminal voltage (vgs, vds) whose ngspice device
    vector disagrees with ngspice's own node voltages while the level-1 value matches those (within
    1 mV + 0.2 %): the difference is then ngspice's vector, not a defect of the level-1 solver
    (``bias_rules.device_vector_findings`` says so). `wrong_vectors`: those of
    ``inconsistent_device_vectors(circuit, sim)``, when they are at hand. `findings` itself when
    none is disproved."""
    if level1 is None:
        return findings
    disproved: set[str] = set()
    if wrong_vectors is None:
        wrong_vectors = inconsistent_device_vectors(circuit, sim)
    for name, wrong in wrong_vectors.items():
        device = level1.devices.get(name)
        for quantity, (_, from_nodes) in wrong.items():
            value = getattr(device, quantity, None) if device is not None else None
            if value is not None and abs(value - from_nodes) <= 1e-3 + 2e-3 * abs(from_nodes):
                disproved.add(f"{name} {quantity}")
    if not disproved:
        return findings
    return tuple(f for f in findings if not (f.code == SOLVER_DIFFERS and f.quantity in disproved))


SOLVER_DIFFERS = "solver-differs"
TIGHT_RELTOL = 1e-6
_TIGHT_OPTIONS = Directive("options", f".options reltol={TIGHT_RELTOL:g}", None, (("reltol", TIGHT_RELTOL),))


def _reltol(circuit: Circuit) -> float:
    value = circuit.options().get("reltol")
    return float(value) if isinstance(value, float) else 1e-3  # ngspice's default (manual, .options)


def _differing_quantity(finding: Finding) -> str:
    """The quantity a level-1/ngspice difference is about (`M1 id`, `V(d)`)."""
    return finding.quantity or ""


class CheckQueue:
    """Checks started in file order and handed back in that order, ngspice kept busy meanwhile.

    One deck is with the worker at a time. A check added while an earlier one still waits for
    ngspice's answer is started without its deck (``start_check(..., submit=queue.may_submit())``),
    which is sent as soon as the worker is free; so while the worker starts up, later netlists
    are read and solved instead of waited out. Each check stays queued until the next one has
    started: its answer is then usually in, and the next deck is sent before it is compared and
    printed. Anything else added (an error to report, say) keeps its place in the order.
    """

    def __init__(self, lookahead: int = 256) -> None:
        self.lookahead = lookahead  # items held at most before waiting for the first one's answer
        self._items: deque[object] = deque()
        self._unsent: deque[PendingCheck] = deque()
        self._in_flight: PendingCheck | None = None

    def may_submit(self) -> bool:
        """Whether a check started now may send its deck at once (the worker has nothing else)."""
        self._send()
        return not self._unsent and (self._in_flight is None or self._in_flight.answered)

    def add(self, item: object) -> None:
        self._items.append(item)
        if isinstance(item, PendingCheck):
            if item.submitted:
                self._in_flight = item
            else:
                self._unsent.append(item)

    def ready(self) -> Iterator[object]:
        """The items that can be handed back now, in order; a check comes collected."""
        while self._items:
            self._send()
            head = self._items[0]
            if len(self._items) > self.lookahead or (
                len(self._items) > 1 and (not isinstance(head, PendingCheck) or head.answered)
            ):
                yield self._take()
            else:
                return

    def answered(self) -> Iterator[object]:
        """The items at the front that can be handed back without waiting for ngspice, the last
        one too: for when the next check will be a while in coming (a slow netlist being read)."""
        while self._items:
            self._send()
            head = self._items[0]
            if isinstance(head, PendingCheck) and not head.answered:
                return
            yield self._take()

    def rest(self) -> Iterator[object]:
        """Every item left, in order, waiting for ngspice where need be."""
        while self._items:
            yield self._take()

    def _send(self) -> None:
        if self._unsent and (self._in_flight is None or self._in_flight.answered):
            self._in_flight = self._unsent.popleft()
            self._in_flight.submit()

    def _take(self) -> object:
        item = self._items.popleft()
        if isinstance(item, PendingCheck):
            item.collect()
            self._send()  # the next deck goes to ngspice before this check is compared and printed
        return item


@record(frozen=True, eq=False)
class EquivalentColumns:
    """Hand and level-1 columns of a circuit whose MOSFET cards are not all level 1, solved with
    each such device's level-1 equivalent (``fit.equivalent.equivalent_at_operating_point``):
    the circuit with those cards in place of the originals, its own columns, and what ``compare``
    needs to judge them."""

    circuit: Circuit
    own: OwnColumns
    fitted: FittedTolerance


def equivalent_columns(
    circuit: Circuit, session: NgspiceSession | None, sim: SimOperatingPoint | None, timeout: float,
) -> EquivalentColumns | Finding:  # fmt: skip
    """The own columns on level-1 equivalents fitted around ngspice's operating point, one `.dc`
    grid per device; or the `not-level-1` finding saying why no equivalent could be made."""
    other_levels = circuit.other_level_mosfets()
    if session is None:
        return not_level1_finding(other_levels, "a level-1 equivalent is fitted around ngspice's operating "
                                                "point, and ngspice is not available")  # fmt: skip
    if sim is None:
        return not_level1_finding(other_levels, "a level-1 equivalent is fitted around ngspice's operating "
                                                "point, and ngspice gave none")  # fmt: skip
    from .fit.equivalent import equivalent_at_operating_point
    from .fit.least_squares import FitError

    users: dict[str, int] = {}
    for _, card in other_levels:
        users[card.name] = users.get(card.name, 0) + 1
    span = max([0.0, *sim.node_voltages.values()]) - min([0.0, *sim.node_voltages.values()])
    temperature_cards = tuple(d for d in circuit.directives if d.kind == "temp"
                              or (d.kind == "options" and any(k in ("temp", "tnom") for k, _ in d.settings)))
    models = dict(circuit.models)
    renamed: dict[str, str] = {}
    equivalents = {}
    for element, card in other_levels:
        device = sim.devices.get(element.name)
        missing = [q for q in ("id", "vgs", "vds", "vbs") if device is None or getattr(device, q) is None]
        if missing:
            return not_level1_finding(other_levels, f"ngspice reports no {', '.join(missing)} for {element.name}, "
                                                    "and the equivalent is fitted around them")  # fmt: skip
        width, length = default_size(circuit)
        try:
            geometry = Level1Geometry(float(element.params.get("w", width)), float(element.params.get("l", length)))
        except (TypeError, ValueError) as exc:
            return not_level1_finding(other_levels, f"{element.name}: {exc}")
        multiplier = float(element.params.get("m", 1.0))
        name = f"{card.name}_l1" if users[card.name] == 1 else re.sub(r"\W", "_", f"{card.name}_l1_{element.name}")
        while name.lower() in models:  # never in place of a card the netlist has
            name += "_"
        instance = {k: float(element.params[k]) for k in ("temp", "dtemp") if k in element.params}
        # A device running with drain and source swapped (vds < 0) is fitted where it works: from
        # the terminal acting as source (vgd, vsd, vbd and the current out of the drain terminal).
        vgs, vds, vbs, current = device.vgs, device.vds, device.vbs, device.id
        if vds < 0:
            vgs, vds, vbs, current = vgs - vds, -vds, vbs - vds, -current
        try:
            found = equivalent_at_operating_point(
                session, card, name, geometry, (vgs, vds), vbs, current / multiplier,
                max(span, abs(vgs), abs(vds), 0.5), circuit.device_temperature(element),
                temperature_cards, instance, timeout,
            )  # fmt: skip
        except (FitError, ValueError, SimulatorError) as exc:
            return not_level1_finding(other_levels, f"the fit of {card.name} for {element.name} failed: {exc}")
        models[name.lower()] = found.card
        renamed[element.name] = name
        equivalents[element.name] = (element, card, found)
    elements = tuple(replace(e, model=renamed[e.name]) if e.name in renamed else e for e in circuit.elements)
    fitted_circuit = replace(circuit, elements=elements, models=models)
    own = solve_own_columns(fitted_circuit)
    summaries = {
        name: FittedEquivalent(
            name, card.name, card.level, found.card.name, found.values.vto, found.values.kp, found.values.lambda_,
            found.geometry.w, found.geometry.l, found.temperature, found.vbs, found.around, found.rms_around,
            found.at_point, found.error, found.points_used, found.below_floor,
            (sim.devices[name].vds or 0.0) < 0,
        )  # fmt: skip
        for name, (element, card, found) in equivalents.items()
    }
    findings = tuple(_equivalent_finding(element, summaries[element.name]) for element, _, _ in
                     equivalents.values())  # fmt: skip
    allowance = _fitted_allowance(fitted_circuit, own.level1, {n: s.error for n, s in summaries.items()}, renamed)
    own = replace(own, findings=(*findings, *own.findings))
    return EquivalentColumns(fitted_circuit, own, FittedTolerance(summaries, allowance))


def _fitted_allowance(
    circuit: Circuit, level1: OperatingPoint | None, errors: dict[str, float], cards: dict[str, str],
) -> dict[str, float]:  # fmt: skip
    """Per quantity (`V(d)`, `M1 id`), how far the level-1 column may be from ngspice's because the
    equivalents are not the cards: each device's KP scaled by 1 ± its fit error (its current scaled
    by as much, at any bias), the circuit re-solved, and the largest moves added over the devices
    (first order). A quantity whose re-solve fails gets no bound (infinite)."""
    if level1 is None:
        return {}
    base = _column_values(circuit, level1)
    allowance = dict.fromkeys(base, 0.0)
    for device, error in errors.items():
        card = circuit.models[cards[device].lower()]
        shift = dict.fromkeys(base, 0.0)
        for factor in (1.0 - error, 1.0 + error):
            if not (math.isfinite(factor) and factor > 0.0):
                return dict.fromkeys(base, math.inf)
            scaled = replace(circuit, models={**circuit.models, card.name.lower(): replace(
                card, params={**card.params, "kp": float(card.params["kp"]) * factor})})  # fmt: skip
            try:
                moved = _column_values(scaled, solve_operating_point(scaled))
            except DcSolveError:
                return dict.fromkeys(base, math.inf)
            for subject, value in base.items():
                shift[subject] = max(shift[subject], abs(moved.get(subject, math.inf) - value))
        for subject in base:
            allowance[subject] += shift[subject]
    return allowance


def _column_values(circuit: Circuit, point: OperatingPoint) -> dict[str, float]:
    """The level-1 column's values by the subject ``compare`` gives them (`V(d)`, `M1 id`)."""
    values = {f"V({node})": voltage for node, voltage in point.node_voltages.items() if node != "0"}
    for element in circuit.elements_of("mosfet"):
        device = point.devices.get(element.name)
        if device is None:
            continue
        for quantity in DEVICE_QUANTITIES:
            value = point.drain_terminal_current(element.name) if quantity == "id" else getattr(device, quantity)
            if value is not None:
                values[f"{element.name} {quantity}"] = float(value)
    return values


def _equivalent_finding(element, equivalent: FittedEquivalent) -> Finding:
    """The `fitted-equivalent` finding of one device, its numbers in engineering notation."""
    vgs, vds = equivalent.around
    return fitted_equivalent_finding(
        element.name, element.origin.line, equivalent.model, equivalent.level, equivalent.card,
        f"VTO = {engineering(equivalent.vto, 'V')}, KP = {engineering(equivalent.kp, 'A/V²')}, "
        f"LAMBDA = {equivalent.lambda_:.4g} /V",
        f"W = {engineering(equivalent.w, 'm')}, L = {engineering(equivalent.l, 'm')}, "
        f"{equivalent.temperature:g} °C, VBS = {engineering(equivalent.vbs, 'V')}"
        + (" (from the drain terminal)" if equivalent.swapped else ""),
        f"VGS = {engineering(vgs, 'V')}, VDS = {engineering(vds, 'V')}"
        + (", seen from the drain terminal, which acts as source" if equivalent.swapped else ""),
        f"{100 * equivalent.rms_around:.1f} %",
        f"{100 * equivalent.at_point:+.1f} %" if math.isfinite(equivalent.at_point) else "not defined (no current)",
        f"{100 * equivalent.error:.1f} %", equivalent.below_floor,
    )  # fmt: skip
