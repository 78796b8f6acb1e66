"""Located errors and warnings of the netlist front end."""

from __future__ import annotations

from bridge.records import record


@record(frozen=True)
class Location:
    """A place in a netlist file: 1-based line and column."""

    file: str
    line: int
    column: int = 1

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


class NetlistError(Exception):
    """Input the program cannot use, with the place it was found.

    `source_line` is the offending physical line (shown under the message with a
    caret when `caret` is true). `code`, when set, names the mistake for `lint` (a kebab-case
    finding code such as `card-missing`); without one, lint reports it as `parse-error`.
    """

    code: str | None = None

    def __init__(
        self,
        message: str,
        location: Location,
        source_line: str | None = None,
        caret: bool = True,
        code: str | None = None,
    ) -> None:
        super().__init__(message)
        self.message = message
        self.location = location
        self.source_line = source_line
        self.caret = caret and source_line is not None
        self.code = code

    def render(self) -> str:
        """`FILE:LINE:COL: message`, then the line and a caret where that helps."""
        text = f"{self.location}: {self.message}"
        if self.source_line is not None:
            shown = self.source_line.expandtabs(1).rstrip("\r\n")
            text += f"\n    {shown}"
            if self.caret:
                text += "\n    " + " " * max(0, self.location.column - 1) + "^"
        return text

    def __str__(self) -> str:
        return self.render()
