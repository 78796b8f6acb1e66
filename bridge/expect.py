"""The designer's own numbers (`check --expect FILE`): a small TOML file of targets.

    tolerance = "5%"                 # for the whole file (default: the --tol value)
    [nodes]
    drain = "2.6"                    # values may use SPICE suffixes: "240u", "1.2k"
    gate = { value = "1.33", tol = "1%" }
    [devices.M1]
    id = "240u"
    vov = { value = "0.63", tol = "10%" }
    region = "saturation"
"""

from __future__ import annotations

import re
from pathlib import Path

from .netlist.errors import Location, NetlistError
from .netlist.numbers import NumberError, parse_number
from .tomlfile import read_toml
from .vocabulary import DEVICE_QUANTITIES, Expectation, Expectations

REGIONS = ("cutoff", "saturation", "triode")


def _line_of(lines: list[str], key: str, section: str | None = None) -> int:
    """The line that assigns `key`, inside `[section]` when given (TOML gives values no positions)."""
    pattern = re.compile(rf"^\s*\"?{re.escape(key)}\"?\s*=", re.IGNORECASE)
    header = re.compile(r"^\s*\[")
    inside = section is None
    for number, text in enumerate(lines, 1):
        if header.match(text):
            inside = section is not None and text.strip().strip("[]").strip().lower() == section.lower()
        elif inside and pattern.match(text):
            return number
    return 1


def _tolerance(raw: object, where: Location, lines: list[str]) -> float:
    text = str(raw).strip()
    try:
        value = float(text[:-1]) / 100.0 if text.endswith("%") else float(text)
    except ValueError:
        raise NetlistError(f"tolerance `{text}` is not a number or a percentage", where,
                           lines[where.line - 1] if lines else None) from None
    # The same range as --tol: above zero, below 1000 %.
    if not 0 < value < 10:
        raise NetlistError(f"tolerance `{text}` is out of range (above 0, below 1000 %)", where,
                           lines[where.line - 1] if lines else None)
    return value


def _value(raw: object, where: Location, lines: list[str]) -> float:
    if isinstance(raw, bool):
        raise NetlistError("expected a number", where, lines[where.line - 1])
    if isinstance(raw, int | float):
        return float(raw)
    try:
        return parse_number(str(raw).strip())
    except NumberError as exc:
        raise NetlistError(str(exc), where, lines[where.line - 1]) from None


def read_expectations(path: str | Path, default_tolerance: float) -> Expectations:
    """Parse the TOML file; every problem is a located NetlistError (exit status 2)."""
    name = str(path)
    data, lines = read_toml(path)
    unknown = set(data) - {"tolerance", "tol", "nodes", "devices"}
    if unknown:
        key = sorted(unknown)[0]
        line = _line_of(lines, key) if _line_of(lines, key) > 1 else next(
            (n for n, t in enumerate(lines, 1) if t.strip().startswith(f"[{key}")), 1)
        raise NetlistError(f"unknown section `{key}` (expected tolerance, [nodes], [devices.NAME])",
                           Location(name, line, 1), lines[line - 1])
    file_tolerance = default_tolerance
    if "tolerance" in data or "tol" in data:
        key = "tolerance" if "tolerance" in data else "tol"
        line = _line_of(lines, key)
        file_tolerance = _tolerance(data[key], Location(name, line, 1), lines)

    def entry(key: str, raw: object, quantity: str, section: str) -> Expectation:
        line = _line_of(lines, key, section)
        where = Location(name, line, 1)
        tolerance = file_tolerance
        if isinstance(raw, dict):
            if "value" not in raw:
                raise NetlistError(f"`{key}` needs a `value`", where, lines[line - 1])
            if "tol" in raw or "tolerance" in raw:
                tolerance = _tolerance(raw.get("tol", raw.get("tolerance")), where, lines)
            raw = raw["value"]
        if quantity == "region":
            if str(raw).lower() not in REGIONS:
                raise NetlistError(f"region `{raw}` is not one of {', '.join(REGIONS)}", where, lines[line - 1])
            return Expectation(str(raw).lower(), tolerance, line)
        return Expectation(_value(raw, where, lines), tolerance, line)

    nodes = {str(k).lower(): entry(str(k), v, "node", "nodes") for k, v in dict(data.get("nodes", {})).items()}
    devices: dict[str, dict[str, Expectation]] = {}
    for device, table in dict(data.get("devices", {})).items():
        if not isinstance(table, dict):
            line = _line_of(lines, str(device))
            raise NetlistError(f"`devices.{device}` must be a table of quantities", Location(name, line, 1),
                               lines[line - 1])
        entries: dict[str, Expectation] = {}
        for quantity, raw in table.items():
            key = str(quantity).lower()
            if key not in DEVICE_QUANTITIES and key != "region":
                line = _line_of(lines, str(quantity), f"devices.{device}")
                raise NetlistError(
                    f"`{quantity}` is not a device quantity (expected {', '.join(DEVICE_QUANTITIES)}, region)",
                    Location(name, line, 1), lines[line - 1],
                )
            entries[key] = entry(str(quantity), raw, key, f"devices.{device}")
        devices[str(device).lower()] = entries
    return Expectations(nodes, devices, name)


def check_against_circuit(expectations: Expectations, node_names: set[str], device_names: set[str]) -> None:
    """Every node and device the file names must exist in the netlist."""
    lines = Path(expectations.file).read_text(encoding="utf-8").splitlines() if expectations.file else [""]
    for node, expectation in expectations.nodes.items():
        if node not in node_names:
            line = expectation.line or 1
            raise NetlistError(
                f"node `{node}` is not in the netlist", Location(expectations.file or "", line, 1), lines[line - 1]
            )
    for device, entries in expectations.devices.items():
        if device not in device_names:
            line = next((e.line for e in entries.values() if e.line), 1)
            raise NetlistError(f"device `{device}` is not in the netlist", Location(expectations.file or "", line, 1),
                               lines[line - 1])
