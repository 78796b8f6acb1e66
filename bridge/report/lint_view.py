"""`biasbridge lint` output: compiler-style lines, one JSON object, or a grouped terminal view.

Formats only: the findings, their places and the source lines come from `lint.run.LintReport`.
"""

from __future__ import annotations

import json
from itertools import groupby

from rich.console import Group, RenderableType
from rich.text import Text

from ..lint.run import LintEntry, LintReport

SEVERITY_STYLE = {"error": "bold red", "warning": "yellow", "info": "cyan"}
FIX_INDENT = "    "


def _place(entry: LintEntry) -> str:
    """`FILE:LINE:COL`, or `FILE` for a finding about the netlist as a whole (no line)."""
    finding = entry.finding
    if finding.line is None:
        return entry.file
    return f"{entry.file}:{finding.line}:{finding.column or 1}"


def lint_lines(report: LintReport) -> str:
    """One line per finding, `FILE:LINE:COL: SEVERITY CODE message`; its fix, when it has one,
    on the next line, indented four blanks and starting `fix: ` (so `grep -v '^ '` keeps one
    line per finding)."""
    out = []
    for entry in report.entries:
        finding = entry.finding
        out.append(f"{_place(entry)}: {finding.severity} {finding.code} {finding.message}\n")
        if finding.fix:
            out.append(f"{FIX_INDENT}fix: {finding.fix}\n")
    return "".join(out)


def lint_json(report: LintReport) -> dict[str, object]:
    """`{"findings": [{"file", "line", "column", "severity", "code", "message", "fix"}]}`: line
    null for a finding about the netlist as a whole, column 1 when the finding points at its card."""
    return {
        "findings": [
            {
                "file": entry.file,
                "line": entry.finding.line,
                "column": entry.finding.column or 1,
                "severity": entry.finding.severity,
                "code": entry.finding.code,
                "message": entry.finding.message,
                "fix": entry.finding.fix,
            }
            for entry in report.entries
        ]
    }


def lint_json_text(report: LintReport) -> str:
    return json.dumps(lint_json(report), ensure_ascii=False) + "\n"


def summary(report: LintReport) -> str:
    counts = [(report.count(severity), severity) for severity in ("error", "warning", "info")]
    said = ", ".join(f"{n} {word}{'s' if n != 1 else ''}" for n, word in counts if n)
    files = len(report.files)
    return f"{files} netlist{'s' if files != 1 else ''} linted: {said or 'no findings'}"


def _entry_view(entry: LintEntry) -> RenderableType:
    finding = entry.finding
    where = f"{finding.line}:{finding.column or 1}" if finding.line is not None else "—"
    head = Text.assemble(
        ("  " + where.ljust(7), "dim"), (finding.severity.ljust(8), SEVERITY_STYLE.get(finding.severity, "")),
        (finding.code, "bold"), " ", finding.message,
    )
    parts: list[RenderableType] = [head]
    if entry.source_line is not None and finding.line is not None:
        shown = entry.source_line.expandtabs(1).rstrip("\r\n")
        gutter = f"{finding.line:>6} │ "
        parts.append(Text.assemble((gutter, "dim"), shown))
        parts.append(Text(" " * (len(gutter) + max(0, (finding.column or 1) - 1)) + "^", style="bold"))
    if finding.fix:
        parts.append(Text.assemble(("         fix: ", "green"), finding.fix))
    return Group(*parts)


def lint_renderable(report: LintReport) -> RenderableType:
    """Per file a heading, then each finding with its card's line (a caret at the column) and fix."""
    parts: list[RenderableType] = []
    for file, entries in groupby(report.entries, key=lambda entry: entry.file):
        parts.append(Text(file, style="bold underline"))
        parts.extend(_entry_view(entry) for entry in entries)
        parts.append(Text(""))
    parts.append(Text(summary(report), style="bold"))
    return Group(*parts)
