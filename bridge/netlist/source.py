"""The line layer: bytes on disk → logical cards with their places.

SPICE's line rules live here, before the grammar sees anything: line 1 is the
title; `*` (and `#`) comment lines; inline `;`, ` $ ` and ` //` comments; `+`
continuation lines (comment and blank lines may stand between); `.control`
blocks dropped; `.include` and `.lib FILE SECTION` expanded; reading stops at
`.end`. Each logical card remembers, for every stretch of its text, the file,
line and column it came from, so errors point at the user's own text. A
`lint: allow CODE[, CODE]` marker in a card's inline comment is kept as data
(`Allowance`, at the card's first line) for `biasbridge lint`.
"""

from __future__ import annotations

import functools
import os
import re
from dataclasses import field
from pathlib import Path

from ..records import record
from .circuit import Allowance, Notice
from .errors import Location, NetlistError

# A single-stage netlist has tens of cards; refuse early what is far beyond that. 10,000 and
# not more: ngspice's own operating point of a 20,000-resistor square mesh takes about 9 s
# (`ngspice -b`, measured with ngspice 39), at 10,000 about 1 s; a check must end in seconds.
MAX_CARDS = 10_000
MAX_FILE_BYTES = 16 * 1024 * 1024
MAX_INCLUDE_DEPTH = 32

_INCLUDE = re.compile(r"\.inc(?:l(?:u(?:d(?:e)?)?)?)?(?=\s|$)", re.IGNORECASE)
_LIB = re.compile(r"\.lib(?=\s|$)", re.IGNORECASE)
_ENDL = re.compile(r"\.endl(?=\s|$)", re.IGNORECASE)
_CONTROL = re.compile(r"\.control(?=\s|$)", re.IGNORECASE)
_ENDC = re.compile(r"\.endc(?=\s|$)", re.IGNORECASE)
_END = re.compile(r"\.end(?=\s|$)", re.IGNORECASE)
# Inline comments: `;` anywhere, `$` or `//` after a blank (a `$` inside a name is not one).
_INLINE_COMMENT = re.compile(r";|(?<=\s)\$(?=\s|$)|(?<=\s)//")
# `; lint: allow CODE[, CODE ...]` in an inline comment: the codes are a comma-separated list of
# kebab-case words; the list ends at the first word not after a comma (free text may follow).
# Compiled with the first marker (`_allow_patterns`): the marker, a code, the comma between codes.
_ALLOW_MARKER = r"lint:\s*allow\s+"
_ALLOW_CODE = r"[A-Za-z0-9]+(?:-[A-Za-z0-9]+)*"
_ALLOW_COMMA = r"\s*,\s*"
# Control characters other than the blanks \t \n \v \f \r: a sign of binary data.
_CONTROL_CHARACTERS = re.compile(r"[\x00-\x08\x0e-\x1f]")


@record(frozen=True)
class SourceFile:
    """One file's physical lines, kept to show the offending line in errors."""

    name: str
    lines: tuple[str, ...]


@record(frozen=True)
class Segment:
    """Card text from `offset` on came from `line`, starting at `column` (1-based)."""

    offset: int
    line: int
    column: int


@record(frozen=True)
class LogicalCard:
    """One card with its continuations joined and its comments removed."""

    text: str
    source: SourceFile = field(repr=False)
    segments: tuple[Segment, ...] = field(repr=False)

    @property
    def line(self) -> int:
        return self.segments[0].line

    def locate(self, offset: int) -> Location:
        """File position of character `offset` (0-based) of the card text."""
        segment = self.segments[0]
        for candidate in self.segments:
            if candidate.offset <= offset:
                segment = candidate
        return Location(self.source.name, segment.line, segment.column + offset - segment.offset)

    def error(self, message: str, offset: int = 0, caret: bool = True) -> NetlistError:
        location = self.locate(offset)
        return NetlistError(message, location, self.source.lines[location.line - 1], caret)


@record(eq=False)
class Deck:
    """The title and the logical cards of a netlist, includes expanded."""

    title: str
    source: SourceFile
    cards: list[LogicalCard] = field(default_factory=list)
    notices: list[Notice] = field(default_factory=list)
    allowances: list[Allowance] = field(default_factory=list)


def read_source(path: str | os.PathLike[str], display_name: str | None = None) -> SourceFile:
    """Read a netlist file as text: reject empty and binary files with a located message."""
    name = display_name or str(path)
    try:
        with open(path, "rb") as handle:
            size = os.fstat(handle.fileno()).st_size  # the file opened: one look-up of its path
            if size > MAX_FILE_BYTES:
                raise NetlistError(
                    f"file is {size // (1024 * 1024)} MiB: far beyond a single-stage netlist "
                    f"(limit {MAX_FILE_BYTES // (1024 * 1024)} MiB)",
                    Location(name, 1, 1),
                )
            # No more than the limit, whatever the size said: a device or a pipe (`/dev/zero`,
            # `<(yes)`) reports size 0 and never ends. A regular file is read at its size (a read
            # of the limit would allocate 16 MiB for every netlist), and on past it only when it
            # has grown since.
            data = handle.read(size + 1) if size > 0 else b""
            if size == 0 or len(data) > size:
                data += handle.read(MAX_FILE_BYTES + 1 - len(data))
        if len(data) > MAX_FILE_BYTES:
            raise NetlistError(
                f"more than {MAX_FILE_BYTES // (1024 * 1024)} MiB to read: far beyond a single-stage netlist",
                Location(name, 1, 1),
            )
    except IsADirectoryError:
        raise NetlistError("is a directory, not a netlist file", Location(name, 1, 1)) from None
    except OSError as exc:
        raise NetlistError(f"cannot read: {exc.strerror or exc}", Location(name, 1, 1)) from None
    return decode_source(data, name)


def decode_source(data: bytes, name: str) -> SourceFile:
    """Bytes → lines. Stray non-ASCII bytes are tolerated; NUL bytes mean binary data."""
    if b"\x00" in data[:65536]:
        raise NetlistError("binary data, not a SPICE netlist", Location(name, 1, 1))
    text = data.decode("utf-8", errors="replace")
    head = text[:65536]
    controls = len(_CONTROL_CHARACTERS.findall(head))
    if controls > max(8, len(head) // 100):
        raise NetlistError("binary data, not a SPICE netlist", Location(name, 1, 1))
    lines = tuple(text.replace("\r\n", "\n").replace("\r", "\n").split("\n"))
    if not text.strip():
        raise NetlistError("empty netlist", Location(name, 1, 1))
    return SourceFile(name, lines)


def _strip_inline_comment(text: str) -> str:
    # The pattern is slow to try at every position (its look-behinds defeat the literal
    # search): most lines hold none of its characters, so look for those first.
    if ";" not in text and "$" not in text and "//" not in text:
        return text
    match = _INLINE_COMMENT.search(text)
    return text[: match.start()] if match else text


@functools.cache
def _allow_patterns() -> tuple[re.Pattern[str], re.Pattern[str], re.Pattern[str]]:
    return re.compile(_ALLOW_MARKER, re.IGNORECASE), re.compile(_ALLOW_CODE), re.compile(_ALLOW_COMMA)


def allow_markers(raw: str) -> list[tuple[str, int]]:
    """The codes of a `lint: allow` marker in the inline comment of physical line `raw`, each with
    its 1-based column; none when the line has no such comment."""
    if (";" not in raw and "$" not in raw and "//" not in raw) or "lint" not in raw.lower():
        return []
    comment = _INLINE_COMMENT.search(raw)
    if comment is None:
        return []
    allow_marker, allow_code, allow_comma = _allow_patterns()
    marker = allow_marker.search(raw, comment.end())
    if marker is None:
        return []
    found: list[tuple[str, int]] = []
    position = marker.end()
    while (code := allow_code.match(raw, position)) is not None:
        found.append((code.group().lower(), code.start() + 1))
        comma = allow_comma.match(raw, code.end())
        if comma is None or comma.end() == code.end():
            break
        position = comma.end()
    return found


def _first_word(text: str) -> str:
    return text.split(None, 1)[0] if text.split() else ""


class _Reader:
    """Walks files, joining continuations and expanding includes into one Deck."""

    def __init__(self, deck: Deck) -> None:
        self.deck = deck
        # Resolved paths of the files being read, the main file first. The main file's path
        # is made a Path and resolved only at its first include (resolving costs a system call
        # per folder, and most netlists include nothing).
        self.include_stack: list[Path | str | os.PathLike[str]] = []
        self.main_resolved = False

    # -- physical lines → logical cards of one file ---------------------------
    def cards_of(self, source: SourceFile, first_line: int) -> list[LogicalCard]:
        """Logical cards of `source` from line `first_line` (1-based) to `.end`."""
        cards: list[LogicalCard] = []
        text_parts: list[str] = []
        segments: list[Segment] = []
        control_start: int | None = None
        ended_at: int | None = None
        after_end = False
        allowed: list[tuple[str, int, int]] = []  # the current card's markers: code, line, column

        def flush() -> None:
            if text_parts:
                cards.append(LogicalCard("".join(text_parts), source, tuple(segments)))
                if allowed:
                    first = segments[0].line
                    self.deck.allowances.extend(
                        Allowance(code, source.name, first, line, column) for code, line, column in allowed
                    )
                text_parts.clear()
                segments.clear()
            allowed.clear()

        for number in range(first_line, len(source.lines) + 1):
            raw = source.lines[number - 1]
            stripped = raw.lstrip(" \t\f\v")
            # `.control`, `.endc` and `.end` all start with a dot: only then try their patterns.
            dot = stripped[:1] == "."
            if control_start is not None:
                if dot and _ENDC.match(stripped):
                    self.note_control(source, control_start, number, closed=True)
                    control_start = None
                continue
            if dot and _CONTROL.match(stripped):
                flush()
                control_start = number
                continue
            if not stripped.strip() or stripped[0] in "*#":
                continue
            if ended_at is not None:
                after_end = True
                continue
            if dot and _ENDC.match(stripped):
                self.deck.notices.append(
                    Notice("stray-endc", "`.endc` without `.control`: ignored", source.name, number)
                )
                continue
            indent = len(raw) - len(stripped)
            body = _strip_inline_comment(stripped).rstrip()
            if stripped[0] == "+":
                if not text_parts:
                    raise NetlistError(
                        "continuation line `+` with no card before it",
                        Location(source.name, number, indent + 1),
                        raw,
                    )
                continued = body[1:]
                lead = len(continued) - len(continued.lstrip())
                text_parts.append(" ")
                segments.append(Segment(sum(map(len, text_parts)), number, indent + 2 + lead))
                text_parts.append(continued.strip())
                if markers := allow_markers(raw):
                    allowed.extend((code, number, column) for code, column in markers)
                continue
            flush()
            if dot and _END.match(stripped):
                ended_at = number
                continue
            if not body:
                continue
            segments.append(Segment(0, number, indent + 1))
            text_parts.append(body)
            if markers := allow_markers(raw):
                allowed.extend((code, number, column) for code, column in markers)
            if len(self.deck.cards) + len(cards) >= MAX_CARDS:
                raise NetlistError(
                    f"more than {MAX_CARDS} cards: far beyond a single-stage netlist, refused",
                    Location(source.name, number, 1),
                )
        flush()
        if control_start is not None:
            last = max(n for n in range(control_start, len(source.lines) + 1) if source.lines[n - 1].strip())
            self.note_control(source, control_start, last, closed=False)
        if after_end:
            self.deck.notices.append(
                Notice("after-end", "lines after `.end` are ignored", source.name, ended_at)
            )
        return cards

    def note_control(self, source: SourceFile, start: int, stop: int, closed: bool) -> None:
        how = "" if closed else " (never closed by `.endc`)"
        self.deck.notices.append(
            Notice(
                "control-dropped",
                f"`.control` block on lines {start}–{stop} dropped{how}: its commands never "
                "reach the simulator",
                source.name,
                start,
            )
        )

    # -- includes ------------------------------------------------------------
    def expand(self, source: SourceFile, path: Path | str | os.PathLike[str], first_line: int) -> None:
        """Append the cards of `source` to the deck, expanding `.include`/`.lib`."""
        self.include_stack.append(path)
        try:
            for card in self.cards_of(source, first_line):
                if card.text[0] != ".":  # `.include` and `.lib` start with a dot: only then try them
                    self.deck.cards.append(card)
                elif _INCLUDE.match(card.text):
                    self.include(card, section=None)
                elif _LIB.match(card.text):
                    words = card.text.split()
                    if len(words) == 2:
                        # `.lib NAME` in a netlist opens a section definition: skipped
                        # here, read only where a `.lib FILE NAME` asks for it.
                        self.deck.notices.append(
                            Notice(
                                "lib-section-skipped",
                                f"`.lib {words[1]}` section definition outside a library file: skipped",
                                source.name,
                                card.line,
                            )
                        )
                        continue
                    self.include(card, section=words[2] if len(words) > 2 else None)
                else:
                    self.deck.cards.append(card)
        finally:
            self.include_stack.pop()

    def include(self, card: LogicalCard, section: str | None) -> None:
        words = card.text.split(None, 2)
        keyword = words[0]
        if len(words) < 2:
            raise card.error(f"`{keyword}` needs a file name", len(card.text))
        offset = card.text.index(words[1], len(keyword))
        raw_name = words[1]
        if section is None and _LIB.match(card.text):
            raise card.error("`.lib` needs a file and a section name: `.lib FILE SECTION`", offset)
        if not _LIB.match(card.text) and len(words) > 2:
            raw_name = card.text[offset:].strip()
        file_name = raw_name.strip("\"'")
        try:
            if not self.main_resolved:
                self.include_stack[0] = Path(self.include_stack[0]).resolve()
                self.main_resolved = True
            target = (self.include_stack[-1].parent / os.path.expanduser(file_name)).resolve()
        except (OSError, RuntimeError) as exc:  # RuntimeError: a loop of symbolic links
            raise card.error(f"included file `{file_name}` cannot be located ({exc})", offset) from None
        if target in self.include_stack:
            chain = " → ".join(p.name for p in self.include_stack[self.include_stack.index(target):])
            raise card.error(f"include cycle: {chain} → {target.name}", offset)
        if len(self.include_stack) >= MAX_INCLUDE_DEPTH:
            raise card.error(f"includes nested deeper than {MAX_INCLUDE_DEPTH}", offset)
        if not target.is_file():
            if target.is_dir():
                raise card.error(f"included `{file_name}` is a folder, not a file ({target})", offset)
            if target.exists():  # a device or a pipe: nothing a netlist includes
                raise card.error(f"included `{file_name}` is not a regular file ({target})", offset)
            raise card.error(f"included file `{file_name}` not found (looked for {target})", offset)
        try:
            included = read_source(target, display_name=_display_name(target))
        except NetlistError as exc:
            raise card.error(f"in included file: {exc.location}: {exc.message}", offset) from None
        if section is None:
            # An included file has no title line: every line is a card.
            self.expand(included, target, 1)
            return
        start, stop = _find_section(included, section)
        if start is None:
            raise card.error(f"section `{section}` not found in `{file_name}`", offset)
        section_source = SourceFile(included.name, included.lines[:stop - 1])
        self.expand(section_source, target, start + 1)


def _display_name(path: Path) -> str:
    """A path as the user would type it: relative to the working directory when inside it."""
    try:
        return os.path.relpath(path)
    except ValueError:
        return str(path)


def _find_section(source: SourceFile, section: str) -> tuple[int | None, int]:
    """Lines (1-based) of `.lib SECTION` and of its `.endl` in a library file."""
    wanted = section.lower()
    start: int | None = None
    for number, raw in enumerate(source.lines, start=1):
        stripped = raw.strip()
        if start is None:
            words = stripped.split()
            if len(words) == 2 and _LIB.match(stripped) and words[1].lower() == wanted:
                start = number
        elif _ENDL.match(stripped):
            return start, number
    return start, len(source.lines) + 1


# The severity of the reader's notices (a `.control` block dropped, a model defined twice, ...)
# wherever they are shown: `parse`, and the findings of `check` and `sweep`. They say how the
# netlist was read, not that the columns disagree, so they leave a check's verdict alone.
NOTICE_SEVERITY = "info"


def notice_in(notice: Notice, main_file: str) -> tuple[str, int | None]:
    """The message and line of `notice` as a finding of the netlist `main_file` states them.

    A finding's line is a line of the netlist checked. A notice from an included file names
    that file and its line in the message instead, and has no line of its own there.
    """
    if notice.file is None or notice.file == main_file:
        return notice.message, notice.line
    where = f"{notice.file}:{notice.line}" if notice.line is not None else notice.file
    return f"{where}: {notice.message}", None


def read_deck(source: SourceFile, path: str | os.PathLike[str] | None = None) -> Deck:
    """Title and logical cards of a main netlist (line 1 is always the title)."""
    title = source.lines[0].strip()
    if title.lower().startswith(".title"):
        title = title[len(".title"):].strip()
    deck = Deck(title=title, source=source)
    base = path if path is not None else source.name  # a resolved Path at the first include
    _Reader(deck).expand(source, base, 2)
    return deck
