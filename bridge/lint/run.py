"""`biasbridge lint`: many netlists in one process → located findings, sorted.

For each file: read it (a file that cannot be read at all is `file-unreadable`, and the run's exit
status is 2); parse and build it (a failure is one `parse-error` finding at its line and column);
turn the reader's notices into findings (a `.control` block is a `control-block-dropped` error);
solve its operating point — the own level-1 solver when every MOSFET card is level 1, and
ngspice's `.op` (the emitted circuit, never the user's text) when ngspice is installed — and run
every rule of `registry.RULES` on a `LintContext`. Then `--select`/`--ignore` (and the
`[tool.biasbridge.lint]` table of the nearest pyproject.toml) and the `lint: allow` markers on the
cards decide what is reported.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import field
from pathlib import Path

from ..netlist.build import build_circuit
from ..netlist.circuit import Circuit, Notice
from ..netlist.errors import Location, NetlistError
from ..netlist.source import SourceFile, notice_in, read_deck, read_source
from ..records import record
from ..tomlfile import read_toml
from ..vocabulary import Finding
from . import cards, registry
from .rule import LintContext, LintSettings

# The runner's own findings (the rule families' codes are in registry.CODES).
PARSE_ERROR = "parse-error"
FILE_UNREADABLE = "file-unreadable"
CONTROL_BLOCK = "control-block-dropped"
ALLOW_UNKNOWN = "allow-unknown-code"
FRAME_CODES: dict[str, str] = {
    PARSE_ERROR: "the netlist cannot be read as SPICE: nothing else is checked in it",
    FILE_UNREADABLE: "the file cannot be read at all (missing, a folder, binary, empty)",
    CONTROL_BLOCK: "a `.control` block: dropped, never run (it could run shell commands in ngspice)",
    "control-stray-endc": "an `.endc` without `.control`: ignored",
    "read-after-end": "lines after `.end`: ignored, as ngspice ignores them",
    "read-lib-section": "a `.lib NAME` section definition in a netlist: skipped",
    "read-duplicate-model": "a `.model` defined twice: the last one wins",
    "read-no-dc-value": "a source without a DC value: the operating point uses its t = 0 value",
    ALLOW_UNKNOWN: "a `lint: allow` marker naming no lint code: it silences nothing",
}
# The reader's notices (bridge/netlist Notice codes) as lint findings: code and severity.
NOTICE_FINDINGS: dict[str, tuple[str, str]] = {
    "control-dropped": (CONTROL_BLOCK, "error"),
    "stray-endc": ("control-stray-endc", "info"),
    "after-end": ("read-after-end", "info"),
    "lib-section-skipped": ("read-lib-section", "info"),
    "duplicate-model": ("read-duplicate-model", "warning"),
    "no-dc-value": ("read-no-dc-value", "info"),
}
NOTICE_FIXES: dict[str, str] = {
    CONTROL_BLOCK: "keep simulator scripts out of the netlist (a separate file you review and run yourself)",
    "read-duplicate-model": "delete or rename one of the two `.model` cards",
}
# Family prefixes of the contract, known before every family has codes (`--select scale`).
FAMILIES = ("scale", "card", "path", "bulk", "orient", "op", "control", "parse", "read", "file", "allow")
# Findings that `--select`/`--ignore`, the config and the markers never hide: without them the
# rest of the report means nothing (a file not linted at all), or the netlist itself would be
# silencing its own security finding. The reader's refusals of a card (card-missing, ...) are
# of the card family, but like a parse error they mean the file was not linted.
ALWAYS_REPORTED = frozenset({PARSE_ERROR, FILE_UNREADABLE, *cards.BUILD_REFUSALS})
NOT_SILENCED_BY_MARKER = frozenset({*ALWAYS_REPORTED, CONTROL_BLOCK})

CONFIG_FILE = "pyproject.toml"
CONFIG_TABLE = ("tool", "biasbridge", "lint")


def known_codes() -> dict[str, str]:
    """Every lint code: the runner's own and each rule family's."""
    return {**FRAME_CODES, **registry.CODES}


def matches(code: str, pattern: str) -> bool:
    """`pattern` names `code` itself or a prefix of it (`scale` → every `scale-…`)."""
    return code == pattern or code.startswith(pattern + "-")


def unknown_patterns(patterns: Iterable[str]) -> list[str]:
    """The patterns that name no code and no family (a typo would select or ignore nothing)."""
    codes = known_codes()
    return [
        pattern for pattern in patterns
        if pattern not in FAMILIES and not any(matches(code, pattern) for code in codes)
    ]


@record(frozen=True)
class LintConfig:
    """What `[tool.biasbridge.lint]` says; `file` is the pyproject.toml it came from (None: none)."""

    settings: LintSettings = field(default_factory=LintSettings)
    select: tuple[str, ...] | None = None
    ignore: tuple[str, ...] = ()
    file: str | None = None


@record(frozen=True)
class Selection:
    """The codes to report: `select` (None: all) minus `ignore`, both by code or prefix."""

    select: tuple[str, ...] | None = None
    ignore: tuple[str, ...] = ()

    def reports(self, code: str) -> bool:
        if code in ALWAYS_REPORTED:
            return True
        if self.select is not None and not any(matches(code, p) for p in self.select):
            return False
        return not any(matches(code, p) for p in self.ignore)


@record(frozen=True)
class LintEntry:
    """One finding of one file, with the physical line it points at (for the terminal view)."""

    file: str
    finding: Finding
    source_line: str | None = None

    def sort_key(self) -> tuple[str, int, int, str]:
        finding = self.finding
        return (self.file, finding.line or 0, finding.column or 0, finding.code)


@record(frozen=True)
class LintReport:
    """Every file's findings, sorted by file, line, column and code; `unreadable` is true when
    a file could not be read at all (exit status 2)."""

    entries: tuple[LintEntry, ...]
    files: tuple[str, ...]
    unreadable: bool = False

    def count(self, severity: str) -> int:
        return sum(1 for entry in self.entries if entry.finding.severity == severity)


# -- configuration -------------------------------------------------------------------------------

def settings_keys() -> dict[str, str]:
    """Config key (kebab-case) → LintSettings field, for every threshold LintSettings has."""
    return {f.name.replace("_", "-"): f.name for f in dataclasses.fields(LintSettings)}


def find_config(netlist: str | Path) -> Path | None:
    """The pyproject.toml nearest to the netlist's folder, upwards; the search stops at the
    filesystem root or at a folder holding `.git` (the top of a repository), that folder included."""
    folder = Path(netlist).resolve().parent
    while True:
        candidate = folder / CONFIG_FILE
        try:
            if candidate.is_file():
                return candidate
            if (folder / ".git").exists() or folder.parent == folder:
                return None
        except OSError:  # a folder we may not look into: the search ends there, as at a root
            return None
        folder = folder.parent


def _key_place(lines: Sequence[str], key: str) -> Location | None:
    """Line and column where `key` is assigned inside the lint table (TOML gives no positions)."""
    header = re.compile(r"^\s*\[")
    table = re.compile(r"^\s*\[\s*tool\s*\.\s*biasbridge\s*\.\s*lint\s*\]")
    assignment = re.compile(rf"^(\s*)\"?{re.escape(key)}\"?\s*=")
    inside = False
    for number, text in enumerate(lines, 1):
        if header.match(text):
            inside = bool(table.match(text))
        elif inside and (found := assignment.match(text)):
            return Location("", number, len(found.group(1)) + 1)
    return None


def read_config(path: str | Path) -> LintConfig:
    """The lint table of a pyproject.toml; every problem is a located NetlistError (exit 2)."""
    name = str(path)
    data, lines = read_toml(path)
    table: object = data
    for key in CONFIG_TABLE:
        table = table.get(key, {}) if isinstance(table, dict) else {}
    if not isinstance(table, dict):
        raise NetlistError("`tool.biasbridge.lint` must be a table", Location(name, 1, 1))

    def where(key: str) -> Location:
        place = _key_place(lines, key)
        return Location(name, place.line, place.column) if place else Location(name, 1, 1)

    def refuse(key: str, message: str) -> NetlistError:
        place = where(key)
        return NetlistError(message, place, lines[place.line - 1] if place.line <= len(lines) else None)

    thresholds = settings_keys()
    values: dict[str, float] = {}
    select: tuple[str, ...] | None = None
    ignore: tuple[str, ...] = ()
    for key, value in table.items():
        if key in ("select", "ignore"):
            if not isinstance(value, list) or not all(isinstance(item, str) for item in value):
                raise refuse(key, f"`{key}` must be a list of codes or code prefixes, e.g. [\"scale\"]")
            patterns = tuple(item.strip().lower() for item in value)
            unknown = unknown_patterns(patterns)
            if unknown:
                raise refuse(key, f"`{key}`: `{unknown[0]}` names no lint code or family")
            if key == "select":
                select = patterns
            else:
                ignore = patterns
        elif key in thresholds:
            if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value) or value < 0:
                raise refuse(key, f"`{key}` must be a number of at least 0 (SI units: volts, watts)")
            values[thresholds[key]] = float(value)
        else:
            known = ", ".join(["select", "ignore", *thresholds])
            raise refuse(key, f"unknown key `{key}` in [tool.biasbridge.lint] (known: {known})")
    return LintConfig(LintSettings(**values), select, ignore, name)


class ConfigCache:
    """The config of each netlist's folder, each pyproject.toml read once."""

    def __init__(self) -> None:
        self.by_path: dict[Path | None, LintConfig] = {}

    def for_netlist(self, netlist: str) -> LintConfig:
        path = find_config(netlist)
        if path not in self.by_path:
            self.by_path[path] = LintConfig() if path is None else read_config(path)
        return self.by_path[path]


# -- one netlist ---------------------------------------------------------------------------------

def notice_finding(notice: Notice, main_file: str) -> Finding:
    """A reader's notice as a lint finding (a notice from an included file names it in the message)."""
    code, severity = NOTICE_FINDINGS.get(notice.code, (f"read-{notice.code}", "info"))
    message, line = notice_in(notice, main_file)
    if code == CONTROL_BLOCK:
        message = f"{message}; biasbridge never runs it (it simulates only the circuit it re-emits from the cards)"
    return Finding(severity, code, message, line, None, None, NOTICE_FIXES.get(code))


def allowance_findings(circuit: Circuit) -> list[Finding]:
    """A `lint: allow` marker naming no known code: a warning, so that a typo does not silence
    silently. Markers in an included file are not reported (their lines are not this file's)."""
    codes = known_codes()
    findings = []
    for allowance in circuit.allowances:
        if allowance.code in codes or allowance.file != circuit.source_file:
            continue
        close = difflib.get_close_matches(allowance.code, list(codes), n=1)
        fix = f"did you mean `{close[0]}`?" if close else "name a code from the README's lint rules table"
        findings.append(Finding(
            "warning", ALLOW_UNKNOWN, f"`lint: allow {allowance.code}` names no lint code: it silences nothing",
            allowance.marker_line, None, allowance.column, fix,
        ))
    return findings


def silenced(finding: Finding, circuit: Circuit) -> bool:
    """The card the finding is at carries a `lint: allow` marker for its code."""
    if finding.line is None or finding.code in NOT_SILENCED_BY_MARKER:
        return False
    return any(
        allowance.line == finding.line and allowance.code == finding.code and allowance.file == circuit.source_file
        for allowance in circuit.allowances
    )


def level1_solution(circuit: Circuit):
    """The own level-1 operating point, or None (a card of another level, or no solution: the
    path rules say why in the user's terms)."""
    from ..analysis.dcsolve import DcSolveError, solve_operating_point

    if circuit.other_level_mosfets():
        return None
    try:
        return solve_operating_point(circuit)
    except DcSolveError:
        return None


def lint_circuit(circuit: Circuit, settings: LintSettings, level1=None, sim=None) -> list[Finding]:
    """Every rule's findings on one circuit, the reader's notices and unknown markers among them,
    before selection and markers."""
    findings = [notice_finding(notice, circuit.source_file) for notice in circuit.notices]
    findings.extend(allowance_findings(circuit))
    context = LintContext(circuit, settings, level1, sim)
    at_point = [rule for rule in registry.RULES if rule in registry.AT_OPERATING_POINT]
    static = [finding for rule in registry.RULES if rule not in at_point for finding in rule(context)]
    findings.extend(static)
    if not any(f.severity == "error" and f.code in registry.NO_OPERATING_POINT for f in static):
        findings.extend(finding for rule in at_point for finding in rule(context))
    return findings


def _source_line(source: SourceFile | None, line: int | None) -> str | None:
    if source is None or line is None or not 0 < line <= len(source.lines):
        return None
    return source.lines[line - 1]


@record
class _Read:
    """One netlist after reading: its circuit, or the entries that end it (parse or read error)."""

    file: str
    source: SourceFile | None = None
    circuit: Circuit | None = None
    entries: list[LintEntry] = field(default_factory=list)
    unreadable: bool = False


def _read(path: str) -> _Read:
    try:
        source = read_source(path)
    except NetlistError as exc:
        finding = Finding("error", FILE_UNREADABLE, exc.message, exc.location.line, None, exc.location.column)
        return _Read(path, entries=[LintEntry(path, finding)], unreadable=True)
    try:
        circuit = build_circuit(read_deck(source, path))
    except NetlistError as exc:
        location = exc.location
        code = exc.code if exc.code in cards.BUILD_REFUSALS else PARSE_ERROR
        fix = cards.BUILD_REFUSALS.get(code, "correct the card")
        finding = Finding("error", code, exc.message, location.line, None, location.column,
                          f"{fix}; no other rule runs on a netlist that does not build")
        return _Read(path, source, entries=[LintEntry(location.file or path, finding, exc.source_line)])
    return _Read(path, source, circuit)


def lint_files(
    paths: Sequence[str],
    selection: Selection | None = None,
    configs: ConfigCache | None = None,
    session=None,
    sim_timeout: float = 10.0,
) -> LintReport:
    """Lint every file in order, in this process. `session` is an NgspiceSession (None: no
    ngspice column for the rules). The config of each file's folder is read through `configs`
    (a bad one raises its located NetlistError before any file is linted)."""
    from ..sim.client import SimulatorError
    from ..sim.operating_point import submit_operating_point

    configs = configs if configs is not None else ConfigCache()
    per_file = [configs.for_netlist(path) for path in paths]
    entries: list[LintEntry] = []
    unreadable = False

    def started(path: str):
        """The file read and its deck sent to ngspice: ngspice works on it while the previous
        file's level-1 solution and rules run."""
        read = _read(path)
        pending = None
        if session is not None and read.circuit is not None and read.circuit.elements:
            try:
                pending = submit_operating_point(session, read.circuit, sim_timeout)
            except SimulatorError:
                pending = None
        return read, pending

    following = started(paths[0]) if paths else None
    for index, (path, config) in enumerate(zip(paths, per_file)):
        read, pending = following
        following = started(paths[index + 1]) if index + 1 < len(paths) else None
        unreadable |= read.unreadable
        wanted = _effective(selection, config)
        entries.extend(entry for entry in read.entries if wanted.reports(entry.finding.code))
        circuit = read.circuit
        if circuit is None:
            continue
        level1 = level1_solution(circuit)
        sim = None
        if pending is not None:
            try:
                sim = pending.result()
            except SimulatorError:
                sim = None
        for finding in lint_circuit(circuit, config.settings, level1, sim):
            if wanted.reports(finding.code) and not silenced(finding, circuit):
                entries.append(LintEntry(path, finding, _source_line(read.source, finding.line)))
    entries.sort(key=LintEntry.sort_key)
    return LintReport(tuple(entries), tuple(paths), unreadable)


def _effective(selection: Selection | None, config: LintConfig) -> Selection:
    """The command line's `--select` replaces the config's; its `--ignore` adds to the config's."""
    if selection is None:
        return Selection(config.select, config.ignore)
    select = selection.select if selection.select is not None else config.select
    return Selection(select, config.ignore + selection.ignore)
