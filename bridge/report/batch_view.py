"""How `biasbridge check` shows a batch (more than one netlist, text): one row per stage as each
result comes, then the full check view of the stages that are flagged (all of them with
`--details`), then one summary line with the counts.

Formatting only: the verdict is the result's (``CheckResult.agree``, ``amplifies``), the leading
cause and the drain-current difference are the comparison's (``compare.leading_cause``,
``compare.hand_difference``). Rows are written unwrapped, so a CI log keeps one line per stage.
"""

from __future__ import annotations

from collections import Counter
from typing import TYPE_CHECKING

from ..compare import NO_SIMULATOR, REGION_CHANGE, CheckResult, hand_difference, leading_cause
from ..netlist.numbers import engineering
from ..records import record
from ..vocabulary import COLUMNS, EFFECT_NAMES

if TYPE_CHECKING:
    from rich.console import Console

# The verdicts of a row, in the order the summary counts them.
AGREE, DISAGREE, NOT_AMPLIFYING, UNUSABLE = "agree", "disagree", "not amplifying", "unusable"
VERDICTS = (AGREE, DISAGREE, NOT_AMPLIFYING, UNUSABLE)
VERDICT_STYLE = {AGREE: "green", DISAGREE: "bold red", NOT_AMPLIFYING: "bold red", UNUSABLE: "bold red"}
REGION_SHORT = {"saturation": "sat", "triode": "triode", "cutoff": "cutoff"}
HEADING = ("stage | topology | per transistor: region hand/level-1/ngspice, id hand vs ngspice (difference) | "
           "leading cause | verdict")


@record(frozen=True)
class BatchRow:
    """One stage's line and its verdict (one of ``VERDICTS``)."""

    text: str
    verdict: str


def verdict(result: CheckResult, allow_region: bool = False) -> str:
    """The row's verdict: the columns disagree, else the stage does not amplify (unless
    --allow-region accepts it), else they agree."""
    if not result.agree:
        return DISAGREE
    if not (result.amplifies or allow_region):
        return NOT_AMPLIFYING
    return AGREE


def flagged(result: CheckResult, allow_region: bool = False) -> bool:
    """Whether the stage gets its full view after the rows without --details (exit status 1 for it)."""
    return verdict(result, allow_region) != AGREE


def batch_row(result: CheckResult, allow_region: bool = False) -> BatchRow:
    """file | topology | each transistor's regions and drain currents | leading cause | verdict."""
    devices = []
    for device in result.devices.values():
        regions = "/".join(REGION_SHORT.get(device.region.get(column) or "", "—") for column in COLUMNS)
        current = device.quantities["id"]
        hand, sim = (_current(current.get(column), current.resolution) for column in ("hand", "sim"))
        difference = hand_difference(current)
        devices.append(f"{device.name} {regions}, id {hand} vs {sim}" + (f" ({difference})" if difference else ""))
    stage_verdict = verdict(result, allow_region)
    said = stage_verdict if stage_verdict != AGREE or result.amplifies else f"{AGREE} (region accepted)"
    text = " | ".join((result.file, result.topology, "; ".join(devices) or "no transistor compared",
                       _cause_text(result), said))
    return BatchRow(text, stage_verdict)


def _current(value: float | None, resolution: float) -> str:
    return "—" if value is None else engineering(value, "A", resolution=resolution)


def _cause_text(result: CheckResult) -> str:
    cause = leading_cause(result)
    if cause is None:
        return "cause: —"
    if cause.cause == NO_SIMULATOR:
        return "cause: no ngspice column"
    name = f"region of {cause.subject}" if cause.cause == REGION_CHANGE else EFFECT_NAMES.get(cause.cause, cause.cause)
    explains = f" ({cause.explains} finding{'s' if cause.explains != 1 else ''})" if cause.explains else ""
    return f"cause: {name}{explains}"


def unusable_row(file: str, message: str) -> BatchRow:
    """The row of a netlist that could not be checked (its located message is on stderr)."""
    return BatchRow(f"{file} | unusable input: {message} | {UNUSABLE}", UNUSABLE)


def summary_line(verdicts: list[str], detailed: int) -> str:
    """`8 stages: 5 agree, 2 disagree, 1 not amplifying, 0 unusable; full tables above for 3`."""
    counts = Counter(verdicts)
    total = len(verdicts)
    listed = ", ".join(f"{counts[name]} {name}" for name in VERDICTS)
    tables = f"; full table{'s' if detailed != 1 else ''} above for {detailed}" if detailed else ""
    return f"{total} stage{'s' if total != 1 else ''}: {listed}{tables}"


def print_line(console: Console, text: str, style: str = "") -> None:
    """One line as written (never wrapped: a row stays one line in a log), styled on a terminal."""
    from rich.text import Text

    console.print(Text(text, style=style), soft_wrap=True)


def print_row(console: Console, row: BatchRow) -> None:
    print_line(console, row.text, VERDICT_STYLE[row.verdict])
