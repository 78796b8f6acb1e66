"""What `spread` varies: the command line's tolerances and the `--tolerances FILE.toml` overrides,
read into one ``Tolerances`` value, then turned into the bands of one circuit (``bands``).

Choices and input checks only; the numbers are bridge.analysis.spread. Every bad value is a
ValueError naming the option (the command line) or a NetlistError at the file's line and column
(the TOML file), exit status 2. The file format (README, "The tolerance file"):

    [resistors]
    default = 5          # % for every resistor not named here (--resistors beats it)
    RLAMP = 1            # % for this resistor
    [supplies]
    default = 2          # % for every independent voltage source (--supplies beats it)
    VDYN = 10            # % for this source (a current source may be named too)
    [models.NLAMP]
    vto = 0.05           # V, absolute (beats --vto for this model)
    kp = 10              # %
    lambda = 20          # %
    [temperature]
    range = [-20, 70]    # °C (--temp beats it)
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import field
from pathlib import Path

from ..analysis.spread import Band, resistor_temperature_coefficients
from ..netlist.circuit import Circuit
from ..netlist.errors import Location, NetlistError
from ..netlist.numbers import NumberError, parse_number
from ..records import record
from ..tomlfile import read_toml

MAX_SAMPLES = 10_000_000
DEFAULT_SAMPLES = 10_000
DEFAULT_SEED = 0
MODEL_PARAMETERS = ("vto", "kp", "lambda")  # vto absolute (V), the others relative (%)
SECTIONS = ("resistors", "supplies", "models", "temperature")
ABSOLUTE_ZERO_C = -273.15


@record(frozen=True)
class Entry:
    """One tolerance and where it was written (``where`` None: the command line)."""

    value: float
    where: Location | None = None
    source_line: str | None = None

    def error(self, message: str) -> Exception:
        if self.where is None:
            return ValueError(message)
        return NetlistError(message, self.where, self.source_line)


@record(frozen=True)
class Tolerances:
    """What to vary. Percentages are of the nominal value; ``vto`` is in volts; None: not varied.
    ``elements`` (resistor or source name, lower case) and ``models`` (model name, lower case →
    vto/kp/lambda) are the file's overrides, which beat the defaults."""

    resistors: Entry | None = None
    supplies: Entry | None = None
    vto: Entry | None = None
    kp: Entry | None = None
    lambda_: Entry | None = None
    temperature: tuple[float, float] | None = None
    elements: Mapping[str, tuple[str, Entry]] = field(default_factory=dict)  # name → (section, entry)
    models: Mapping[str, Mapping[str, Entry]] = field(default_factory=dict)
    model_names: Mapping[str, Entry] = field(default_factory=dict)  # model name → its table's place
    file: str | None = None


def percent(text: str, option: str) -> float:
    """A command-line percentage (`5`, `5%`, `0.5`): 0 to 100 inclusive."""
    raw = text.strip()
    number = raw[:-1].strip() if raw.endswith("%") else raw
    try:
        value = float(number)
    except ValueError:
        raise ValueError(f"{option} `{text}` is not a percentage (e.g. 5 or 5%)") from None
    return _checked_percent(value, f"{option} {text}")


def _checked_percent(value: float, what: str) -> float:
    if not math.isfinite(value):
        raise ValueError(f"{what}: not a finite number")
    if value < 0.0:
        raise ValueError(f"{what}: a tolerance must not be negative")
    if value > 100.0:
        raise ValueError(f"{what}: a tolerance above 100 % would make a value change sign")
    return value


def volts(text: str, option: str) -> float:
    """The absolute VTO tolerance in volts (SPICE suffixes allowed: `50m`); not negative."""
    try:
        value = parse_number(text.strip())
    except NumberError:
        raise ValueError(f"{option} `{text}` is not a voltage (e.g. 0.05 or 50m)") from None
    if not math.isfinite(value):
        raise ValueError(f"{option} {text}: not a finite number")
    if value < 0.0:
        raise ValueError(f"{option} {text}: a tolerance must not be negative")
    return value


def temperature_range(text: str, option: str = "--temp") -> tuple[float, float]:
    """`LO:HI` in °C, LO below HI, both above absolute zero."""
    parts = text.split(":")
    if len(parts) != 2:
        raise ValueError(f"{option} `{text}` is not a range LO:HI in °C (e.g. -40:125)")
    try:
        low, high = (parse_number(part.strip()) for part in parts)
    except NumberError:
        raise ValueError(f"{option} `{text}` is not a range LO:HI in °C (e.g. -40:125)") from None
    return _checked_range(low, high, f"{option} {text}")


def _checked_range(low: float, high: float, what: str) -> tuple[float, float]:
    if not (math.isfinite(low) and math.isfinite(high)):
        raise ValueError(f"{what}: not finite")
    if low >= high:
        raise ValueError(f"{what}: the range is {'empty' if low == high else 'reversed'} (LO must be below HI)")
    if low <= ABSOLUTE_ZERO_C:
        raise ValueError(f"{what}: {low:g} °C is at or below absolute zero")
    return low, high


def samples(text: str) -> int:
    """`--samples N`: a whole number from 1 to MAX_SAMPLES."""
    try:
        value = int(text.replace("_", ""))
    except ValueError:
        raise ValueError(f"--samples `{text}` is not a whole number") from None
    if value < 1:
        raise ValueError(f"--samples {text}: at least one sample")
    if value > MAX_SAMPLES:
        raise ValueError(f"--samples {text}: at most {MAX_SAMPLES:,} samples")
    return value


def seed(text: str) -> int:
    """`--seed S`: a whole number ≥ 0 (numpy's default_rng seed)."""
    try:
        value = int(text)
    except ValueError:
        raise ValueError(f"--seed `{text}` is not a whole number") from None
    if value < 0:
        raise ValueError(f"--seed {text}: the seed must not be negative")
    return value


# ---------------------------------------------------------------------------------------------
# The tolerance file


def _line_of(lines: list[str], section: str, key: str | None) -> tuple[int, int]:
    """The line (and column) where `key` is assigned inside `[section]`, or the section's header
    when `key` is None; TOML gives values no positions. (1, 1) when not found."""
    header = re.compile(r"^\s*\[\s*([^\]]+?)\s*\]")
    inside = False
    for number, text in enumerate(lines, 1):
        match = header.match(text)
        if match:
            name = match[1].replace('"', "").replace(" ", "").lower()
            inside = name == section.lower()
            if inside and key is None:
                return number, text.index("[") + 1
            continue
        if inside and key is not None:
            assignment = re.match(rf"^(\s*)\"?{re.escape(key)}\"?\s*=", text, re.IGNORECASE)
            if assignment:
                return number, len(assignment[1]) + 1
    return 1, 1


def _entry(raw: object, name: str, lines: list[str], section: str, key: str, absolute: bool) -> Entry:
    line, column = _line_of(lines, section, key)
    where = Location(name, line, column)
    source_line = lines[line - 1] if 0 < line <= len(lines) else None

    def fail(message: str) -> NetlistError:
        return NetlistError(message, where, source_line)

    what = f"`{key}` in [{section}]"
    if isinstance(raw, bool) or not isinstance(raw, (int, float, str)):
        raise fail(f"{what} must be a number ({'volts' if absolute else 'percent'}), not {type(raw).__name__}")
    if isinstance(raw, str):
        text = raw.strip()
        try:
            value = parse_number(text) if absolute else float(text[:-1] if text.endswith("%") else text)
        except (NumberError, ValueError):
            raise fail(f"{what}: `{raw}` is not a {'voltage' if absolute else 'percentage'}") from None
    else:
        value = float(raw)
    try:
        if absolute:
            if not math.isfinite(value) or value < 0.0:
                raise ValueError(f"{what}: a tolerance must be a finite number, not negative")
        else:
            _checked_percent(value, what)
    except ValueError as exc:
        raise fail(str(exc)) from None
    return Entry(value, where, source_line)


def read_tolerance_file(path: str | Path) -> Tolerances:
    """The file's tolerances (command-line defaults not yet merged: see ``merged``). Names are
    checked against a circuit later, by ``bands``. Every problem is a located NetlistError."""
    name = str(path)
    data, lines = read_toml(path)

    def located(message: str, section: str, key: str | None) -> NetlistError:
        line, column = _line_of(lines, section, key) if key is not None or section else (1, 1)
        return NetlistError(message, Location(name, line, column), lines[line - 1] if 0 < line <= len(lines) else None)

    for key in data:
        if key not in SECTIONS:
            line = next((n for n, t in enumerate(lines, 1) if re.match(rf"^\s*\[?\s*\"?{re.escape(key)}\b", t)), 1)
            raise NetlistError(f"unknown section `{key}` (expected [resistors], [supplies], [models.NAME], "
                               "[temperature])", Location(name, line, 1), lines[line - 1])  # fmt: skip
        if not isinstance(data[key], dict):
            line = next((n for n, t in enumerate(lines, 1) if re.match(rf"^\s*{re.escape(key)}\s*=", t)), 1)
            raise NetlistError(f"`{key}` must be a table ([{key}])", Location(name, line, 1), lines[line - 1])
    defaults: dict[str, Entry] = {}
    elements: dict[str, tuple[str, Entry]] = {}
    for section in ("resistors", "supplies"):
        for key, raw in data.get(section, {}).items():
            entry = _entry(raw, name, lines, section, str(key), absolute=False)
            if key == "default":
                defaults[section] = entry
            elif str(key).lower() in elements:
                raise entry.error(f"`{key}` is given twice")
            else:
                elements[str(key).lower()] = (section, entry)
    models: dict[str, dict[str, Entry]] = {}
    model_names: dict[str, Entry] = {}
    for model, table in data.get("models", {}).items():
        section = f"models.{model}"
        if not isinstance(table, dict):
            raise located(f"`models.{model}` must be a table ([models.{model}] with vto, kp, lambda)", "models",
                          str(model))  # fmt: skip
        line, column = _line_of(lines, section, None)
        model_names[str(model).lower()] = Entry(0.0, Location(name, line, column), lines[line - 1])
        parameters: dict[str, Entry] = {}
        for key, raw in table.items():
            if str(key).lower() not in MODEL_PARAMETERS:
                raise located(f"`{key}` is not a model tolerance (expected vto in volts, kp or lambda in %)",
                              section, str(key))  # fmt: skip
            parameters[str(key).lower()] = _entry(raw, name, lines, section, str(key), absolute=key.lower() == "vto")
        models[str(model).lower()] = parameters
    temperature = None
    if "temperature" in data:
        table = data["temperature"]
        for key in table:
            if key != "range":
                raise located(f"`{key}` is not a temperature setting (expected range = [LO, HI] in °C)",
                              "temperature", str(key))  # fmt: skip
        raw = table.get("range")
        if raw is not None:
            numbers = isinstance(raw, list) and len(raw) == 2 and all(
                isinstance(v, (int, float)) and not isinstance(v, bool) for v in raw)  # fmt: skip
            if not numbers:
                raise located("range must be [LO, HI], two numbers in °C", "temperature", "range")
            try:
                temperature = _checked_range(float(raw[0]), float(raw[1]), "range")
            except ValueError as exc:
                raise located(str(exc), "temperature", "range") from None
    return Tolerances(
        resistors=defaults.get("resistors"), supplies=defaults.get("supplies"), temperature=temperature,
        elements=elements, models=models, model_names=model_names, file=name,
    )  # fmt: skip


def merged(command_line: Tolerances, file: Tolerances | None) -> Tolerances:
    """The command line's defaults over the file's; the file's per-element and per-model entries
    stay (they beat any default)."""
    if file is None:
        return command_line
    return Tolerances(
        resistors=command_line.resistors or file.resistors,
        supplies=command_line.supplies or file.supplies,
        vto=command_line.vto, kp=command_line.kp, lambda_=command_line.lambda_,
        temperature=command_line.temperature or file.temperature,
        elements=file.elements, models=file.models, model_names=file.model_names, file=file.file,
    )  # fmt: skip


# ---------------------------------------------------------------------------------------------
# The bands of one circuit


def bands(circuit: Circuit, tolerances: Tolerances) -> tuple[Band, ...]:
    """Every varied quantity of `circuit` with its band, in a fixed order (resistors and sources in
    netlist order, then each model's vto, kp, lambda, then temperature). A quantity whose band is
    empty (0 %, or a nominal value of 0) is not varied. A name in the file that the circuit does
    not have is a located NetlistError."""
    for name, (section, entry) in tolerances.elements.items():
        element = circuit.element(name)
        wanted = ("resistor",) if section == "resistors" else ("vsource", "isource")
        if element is None or element.kind not in wanted:
            what = "resistor" if section == "resistors" else "independent source"
            article = "a" if section == "resistors" else "an"
            raise entry.error(f"the circuit has no {what} `{name.upper() if element is None else element.name}`"
                              if element is None else f"`{element.name}` is a {element.kind}, not {article} {what}")
    mosfet_models = {(e.model or "").lower() for e in circuit.elements_of("mosfet")}
    for model, entry in tolerances.model_names.items():
        if model not in mosfet_models:
            card = circuit.model(model)
            reason = "no MOSFET uses it" if card is not None else "the circuit has no such model"
            raise entry.error(f"model `{model}`: {reason}")
    found: list[Band] = []
    for element in circuit.elements:
        override = tolerances.elements.get(element.name.lower())
        if element.kind == "resistor":
            entry = override[1] if override else tolerances.resistors
            nominal = element.value
        elif element.kind in ("vsource", "isource"):
            entry = override[1] if override else (tolerances.supplies if element.kind == "vsource" else None)
            nominal = element.value
        else:
            continue
        if entry is None or entry.value == 0.0 or not nominal:
            continue
        spread = abs(nominal) * entry.value / 100.0
        kind = "resistor" if element.kind == "resistor" else "source"
        found.append(Band(element.name, kind, element.name, None, nominal, nominal - spread, nominal + spread,
                          f"±{entry.value:g} %"))  # fmt: skip
        if kind == "resistor" and entry.value >= 100.0:
            raise entry.error(f"{element.name}: a ±100 % resistor reaches 0 Ω; give less than 100 %")
    from ..devices.mos1.model import Level1Model

    seen: set[str] = set()
    for element in circuit.elements_of("mosfet"):
        card = circuit.model(element.model or "")
        if card is None or card.name.lower() in seen:
            continue
        seen.add(card.name.lower())
        model = Level1Model.from_card(card.type, card.params, circuit.nominal_temperature())
        own = tolerances.models.get(card.name.lower(), {})
        for parameter, default, nominal in (
            ("vto", tolerances.vto, model.vto), ("kp", tolerances.kp, model.kp),
            ("lambda", tolerances.lambda_, model.lambda_),
        ):  # fmt: skip
            entry = own.get(parameter, default)
            if entry is None or entry.value == 0.0:
                continue
            if parameter == "vto":
                spread, text = entry.value, f"±{entry.value:g} V"
            else:
                spread, text = abs(nominal) * entry.value / 100.0, f"±{entry.value:g} %"
                if nominal == 0.0:
                    continue
            found.append(Band(f"{card.name}.{parameter}", "model", card.name, parameter, nominal, nominal - spread,
                              nominal + spread, text))  # fmt: skip
    if tolerances.temperature is not None:
        low, high = tolerances.temperature
        # The nominal point stays inside the range searched: the circuit's temperature when the
        # range holds it, else the range's middle.
        nominal = circuit.temperature()
        if not low <= nominal <= high:
            nominal = 0.5 * (low + high)
        found.append(Band("temperature", "temperature", "", None, nominal, low, high, f"{low:g}…{high:g} °C"))
    try:  # what the resistors' temperature rule cannot take, at the resistor's line
        resistor_temperature_coefficients(circuit)
    except ValueError as exc:
        name = str(exc).split(":", 1)[0]
        element = circuit.element(name)
        if element is None:
            raise
        raise NetlistError(str(exc), Location(element.origin.file or circuit.source_file, element.origin.line, 1),
                           caret=False) from None  # fmt: skip
    return tuple(found)


def refusal(circuit: Circuit) -> str | None:
    """Why `spread` cannot take this circuit, or None: it needs MOSFETs, all on level-1 cards (the
    batch solver's model)."""
    mosfets = circuit.elements_of("mosfet")
    if not mosfets:
        return "the netlist has no MOSFET: spread follows a MOSFET stage's bias"
    for element, card in circuit.other_level_mosfets():
        return (f"{element.name} uses model {card.name} (level {card.level}, line {card.origin.line}); spread "
                "solves level-1 cards only (`biasbridge fit --card` makes a level-1 equivalent)")
    for element in mosfets:
        if circuit.model(element.model or "") is None:
            return f"{element.name}: no model `{element.model}` in the netlist (line {element.origin.line})"
    return None


def command_line_tolerances(args) -> Tolerances:
    """The bands the command line gives (`--resistors`, `--supplies`, `--vto`, `--kp`, `--lambda`,
    `--temp`; None where an option is not given). Raises ValueError or ArgumentTypeError naming the
    option whose value is unusable."""
    def given(value: str | None, read, option: str) -> Entry | None:
        return None if value is None else Entry(read(value, option))

    return Tolerances(
        resistors=given(args.resistors, percent, "--resistors"),
        supplies=given(args.supplies, percent, "--supplies"),
        vto=given(args.vto, volts, "--vto"),
        kp=given(args.kp, percent, "--kp"),
        lambda_=given(args.lambda_, percent, "--lambda"),
        temperature=None if args.temp is None else temperature_range(args.temp),
    )
