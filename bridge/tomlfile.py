"""A TOML file the designer wrote (`--expect FILE.toml`, `[tool.biasbridge.lint]`), read with
every problem located: a NetlistError at the file's line and column (exit status 2)."""

from __future__ import annotations

import re
import sys
from pathlib import Path
from typing import Any

from .netlist.errors import Location, NetlistError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

# tomllib names the place inside its message: "... (at line 3, column 7)".
_TOML_PLACE = re.compile(r"at line (\d+), column (\d+)")


def read_toml(path: str | Path) -> tuple[dict[str, Any], list[str]]:
    """The file's table and its lines (for locating keys afterwards)."""
    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise NetlistError(f"cannot read: {getattr(exc, 'strerror', None) or exc}", Location(name, 1, 1)) from None
    lines = text.splitlines() or [""]
    try:
        return tomllib.loads(text), lines
    except tomllib.TOMLDecodeError as exc:
        match = _TOML_PLACE.search(str(exc))
        line, column = (int(match[1]), int(match[2])) if match else (1, 1)
        if match is None and "end of document" in str(exc):
            line = len(lines)
            column = len(lines[-1]) + 1
        message = _TOML_PLACE.sub("", str(exc)).replace("(at end of document)", "").strip(" ()")
        source_line = lines[line - 1] if 0 < line <= len(lines) else None
        raise NetlistError(f"not valid TOML: {message}", Location(name, line, column), source_line) from None
