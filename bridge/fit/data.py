"""The bench data of `biasbridge fit`: a CSV of bias points read, checked and polarity-normalised.

Columns `vgs`, `vds`, `id` are required, `vbs` optional, in any order; names are case-insensitive
and may carry a unit (`id (A)`, `Vgs [V]`, `id/mA`, `id_mA`). Anything unusable raises
``NetlistError`` at FILE:ROW:COL (the row is the file's line), as the netlist reader does.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np

from ..netlist.errors import Location, NetlistError
from ..records import record

REQUIRED = ("vgs", "vds", "id")
OPTIONAL = ("vbs",)
# Other spellings of a column's name (after lower-casing and dropping the unit).
NAME_ALIASES = {"v_gs": "vgs", "v_ds": "vds", "v_bs": "vbs", "ids": "id", "i_d": "id", "idrain": "id"}
VOLT_UNITS = {"v": 1.0, "mv": 1e-3}
AMPERE_UNITS = {"a": 1.0, "ma": 1e-3, "ua": 1e-6, "µa": 1e-6, "μa": 1e-6, "na": 1e-9}
MIN_POINTS = 5  # fewer rows than this cannot pin three parameters and say how well they fit
_UNIT = re.compile(
    r"^(?P<name>[^\s(\[/]+?)\s*(?:\((?P<p>[^)]*)\)|\[(?P<b>[^\]]*)\]|/(?P<s>\S+)|_(?P<u>m?v|[mµμun]?a))?$"
)


@record(frozen=True)
class BiasData:
    """Measured bias points in device polarity (a conducting PMOS: positive vgs, vds, id).

    ``rows`` are the file's line numbers of the points; ``has_vbs`` says the file had a vbs
    column (else vbs is 0); ``flipped`` that PMOS data came with negative signs and (those columns) was negated.
    """

    file: str
    mos_type: str
    vgs: np.ndarray
    vds: np.ndarray
    vbs: np.ndarray
    id: np.ndarray
    rows: np.ndarray
    has_vbs: bool = False
    flipped: bool = False

    @property
    def vbs_varies(self) -> bool:
        """More than one body bias among the points (only then GAMMA and PHI can be fitted)."""
        return bool(np.ptp(self.vbs) > 1e-9) if self.vbs.size else False

    def __len__(self) -> int:
        return int(self.id.size)


def _column_name(cell: str) -> tuple[str, str | None]:
    """A header cell → (name, unit or None), lower case."""
    text = cell.strip().strip('"').strip().lower()
    match = _UNIT.match(text)
    if not match:
        return text, None
    unit = match.group("p") or match.group("b") or match.group("s") or match.group("u")
    name = match.group("name")
    return NAME_ALIASES.get(name, name), (unit.strip() if unit else None)


def _scale(name: str, unit: str | None) -> float | None:
    """The factor to SI of a column's unit, None when the unit does not fit the quantity."""
    if unit is None or unit == "":
        return 1.0
    table = AMPERE_UNITS if name == "id" else VOLT_UNITS
    return table.get(unit)


def _cells(line: str) -> list[tuple[str, int]]:
    """The comma-separated cells of a line with their 1-based columns."""
    cells, column = [], 1
    for cell in line.split(","):
        cells.append((cell, column + len(cell) - len(cell.lstrip())))
        column += len(cell) + 1
    return cells


def read_bias_csv(path: str, mos_type: str = "nmos") -> BiasData:
    """Read, check and normalise a CSV of measured bias points (see the module's docstring)."""
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise NetlistError("not a text file (UTF-8)", Location(path, 1, 1), caret=False) from None
    except OSError as exc:
        raise NetlistError(f"cannot read the file: {exc.strerror or exc}", Location(path, 1, 1), caret=False) from None
    lines = text.splitlines()
    numbered = [
        (n, line) for n, line in enumerate(lines, start=1) if line.strip() and not line.lstrip().startswith("#")
    ]
    if not numbered:
        raise NetlistError("no header line: the first line must name the columns (vgs,vds,id[,vbs])",
                           Location(path, 1, 1), caret=False)
    header_line, header = numbered[0]

    def error(message: str, line: int, column: int, source: str | None) -> NetlistError:
        return NetlistError(message, Location(path, line, column), source)

    columns: dict[str, tuple[int, int, float]] = {}  # name → (index, column, scale)
    for index, (cell, column) in enumerate(_cells(header)):
        name, unit = _column_name(cell)
        if name not in REQUIRED + OPTIONAL:
            continue  # other columns (temperature, a note) are left alone
        if name in columns:
            raise error(f"column `{name}` is given twice", header_line, column, header)
        scale = _scale(name, unit)
        if scale is None:
            wanted = "A, mA, uA or nA" if name == "id" else "V or mV"
            raise error(f"column `{name}`: unit `{unit}` is not one of {wanted}", header_line, column, header)
        columns[name] = (index, column, scale)
    for name in REQUIRED:
        if name not in columns:
            raise error(f"required column `{name}` is missing (the header must name vgs, vds, id and may name vbs)",
                        header_line, 1, header)

    width = len(_cells(header))
    values: dict[str, list[float]] = {name: [] for name in columns}
    rows: list[int] = []
    for line_number, line in numbered[1:]:
        cells = _cells(line)
        if len(cells) != width:
            raise error(f"{len(cells)} cells where the header has {width}", line_number, 1, line)
        for name, (index, _, scale) in columns.items():
            cell, column = cells[index]
            try:
                value = float(cell.strip())
            except ValueError:
                raise error(f"`{cell.strip()}` in column `{name}` is not a number", line_number, column, line) from None
            if not math.isfinite(value):
                raise error(f"`{cell.strip()}` in column `{name}` is not a finite number", line_number, column,
                            line)
            values[name].append(value * scale)
        rows.append(line_number)
    if len(rows) < MIN_POINTS:
        raise error(f"{len(rows)} data rows: a fit needs at least {MIN_POINTS}", (rows or [header_line])[-1], 1,
                    None)
    arrays = {name: np.asarray(v) for name, v in values.items()}
    vbs = arrays.get("vbs", np.zeros(len(rows)))
    current = arrays["id"]
    id_index, id_column, _ = columns["id"]
    if not np.any(current != 0.0):
        raise error("every current in column `id` is zero: nothing to fit", header_line, id_column, header)

    # Which way the data conducts: the signs at the points carrying the larger currents. A bench
    # may record a PMOS with its own signs throughout, or |ID| with signed voltages: each of ID,
    # VGS and VDS is negated when it is negative there (VBS with VGS, as the source is the reference).
    conducting = np.abs(current) >= 0.5 * np.max(np.abs(current))
    negative = {name: bool(np.median(arrays[name][conducting]) < 0.0) for name in ("id", "vgs", "vds")}
    if mos_type == "nmos" and (negative["id"] or negative["vgs"]):
        name = "id" if negative["id"] else "vgs"
        index = columns[name][0]
        first = rows[int(np.argmax(arrays[name] < 0.0))]  # the first negative value
        raise error(f"the device conducts with negative {'current' if name == 'id' else 'VGS'}: PMOS data given "
                    "as nmos? (use --type pmos)", first, _cells(lines[first - 1])[index][1], lines[first - 1])
    flipped = False
    if mos_type == "pmos":
        for name in ("id", "vgs", "vds"):
            if negative[name]:
                arrays[name] = -arrays[name]
                flipped = True
        if negative["vgs"] and "vbs" in arrays:
            arrays["vbs"] = -arrays["vbs"]
        vbs = arrays.get("vbs", np.zeros(len(rows)))
        current = arrays["id"]
    return BiasData(
        path, mos_type, arrays["vgs"], arrays["vds"], vbs, current, np.asarray(rows), "vbs" in columns, flipped
    )
