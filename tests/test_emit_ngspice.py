"""The emitted netlist gives ngspice the operating point of the original.

Each netlist is run twice through the real `ngspice -b` (batch mode, the program a designer
runs): once as the designer wrote it, once as `emit` rewrote it. Same simulator, same circuit:
only the formatting of numbers may differ, so every node voltage and branch current must
agree to ngspice's printed precision. The emitted text is also checked to carry nothing of
the user's `.control` blocks, which can run shell commands.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import pytest

from bridge.netlist import read_netlist
from bridge.netlist.emit import emit

NGSPICE = shutil.which("ngspice")
pytestmark = pytest.mark.skipif(NGSPICE is None, reason="ngspice is not installed")

BUNDLED = Path(__file__).resolve().parents[1] / "netlists"

_CONTROL_BLOCK = re.compile(r"^[ \t]*\.control\b.*?^[ \t]*\.endc\b[^\n]*\n?", re.I | re.DOTALL | re.M)
_CONTROL_CARD = re.compile(r"^[ \t]*\.(control|endc)\b", re.I | re.M)
# One row of ngspice's `.op` tables: a name and a number (`vdd  5.000000e+00`).
_ROW = re.compile(r"^\s*(\S+)\s+([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*$")


@dataclass(frozen=True)
class OperatingPoint:
    """What ngspice 39 prints for `.op` in batch mode: the node table and the source table."""

    voltages: dict[str, float]
    currents: dict[str, float]


def run_ngspice(netlist: Path) -> OperatingPoint:
    """`ngspice -b netlist` in the netlist's folder, with a private HOME (no user .spiceinit)."""
    completed = subprocess.run(
        [NGSPICE, "-b", netlist.name],
        cwd=netlist.parent,
        env={**os.environ, "HOME": str(netlist.parent)},
        capture_output=True,
        text=True,
        errors="replace",
        timeout=60,
    )
    assert completed.returncode == 0, completed.stdout + completed.stderr
    return parse_operating_point(completed.stdout)


def parse_operating_point(output: str) -> OperatingPoint:
    """The `Node Voltage` and `Source Current` tables of ngspice's batch-mode `.op` output."""
    lines = output.splitlines()
    header = next((i for i, line in enumerate(lines) if line.split() == ["Node", "Voltage"]), None)
    assert header is not None, f"no operating point in ngspice's output:\n{output}"
    voltages: dict[str, float] = {}
    currents: dict[str, float] = {}
    table = voltages
    for line in lines[header + 1 :]:
        if line.split() == ["Source", "Current"]:
            table = currents
            continue
        if not line.strip() or set(line.strip()) <= set("-\t "):
            continue  # blank lines and the dashed rules under the headers
        row = _ROW.match(line)
        if row is None:
            break  # the device and model listings that follow
        table[row[1]] = float(row[2])
    assert voltages, f"empty node table in ngspice's output:\n{output}"
    return OperatingPoint(voltages, currents)


def top_level(names) -> set[str]:
    """Names outside any subcircuit instance (ngspice prints those as `x1.n`)."""
    return {name for name in names if "." not in name}


def assert_same_operating_point(original: OperatingPoint, emitted: OperatingPoint) -> None:
    assert top_level(emitted.voltages) == top_level(original.voltages)
    assert top_level(emitted.currents) == top_level(original.currents)
    common = set(original.voltages) & set(emitted.voltages)
    assert common >= top_level(original.voltages)
    for node in sorted(common):
        want, got = original.voltages[node], emitted.voltages[node]
        assert abs(got - want) <= 1e-6 * max(abs(want), abs(got)) + 1e-6, f"v({node}): {got} != {want}"
    # ngspice prints currents to 6 digits: one unit in the last digit, plus a picoamp.
    for branch in sorted(set(original.currents) & set(emitted.currents)):
        want, got = original.currents[branch], emitted.currents[branch]
        assert abs(got - want) <= 1e-5 * max(abs(want), abs(got)) + 1e-12, f"i({branch}): {got} != {want}"


def assert_nothing_of_the_control_block(text: str) -> None:
    # Line 1 is the title, free text that ngspice never reads as a card.
    cards = "\n".join(text.splitlines()[1:])
    assert _CONTROL_CARD.search(cards) is None
    assert "shell" not in cards.lower()


def emitted_file(original: Path, folder: Path) -> tuple[Path, str]:
    """Read `original` with the front end and write what `emit` makes of it into `folder`."""
    text = emit(read_netlist(original)).text
    target = folder / f"{original.stem}.emitted.cir"
    target.write_text(text, encoding="utf-8")
    return target, text


# ---- netlists written the way real ngspice example files are written ----------------------

# Title that looks like a card, CRLF line ends, tabs, mixed case, `dc=`, PMOS, and `+` lines
# after a comment line and a blank line.
PMOS_MIRROR = (
    "M1 test bench: PMOS current mirror\r\n"
    "* PMOS mirror with mixed-case names and tab-separated fields\r\n"
    "VDD\tVDD\t0\tDC 5\r\n"
    "IREF\tBias\t0\tdc=50u\r\n"
    "MP1\tBias\tBias\tVDD\tVDD\tPMir\tW=20u\tL=2u\r\n"
    "MP2\tOut\tBias\tVDD\tVDD\tPMir\tW = 40u L = 2u\r\n"
    "RL\tOut\t0\t22K\r\n"
    ".MODEL PMir PMOS (LEVEL=1 VTO=-0.7 KP=40u\r\n"
    "* the continuation goes on after this comment\r\n"
    "\r\n"
    "+ LAMBDA=0.02\r\n"
    "+\tGAMMA=0.45 PHI=0.7)\r\n"
    ".OP\r\n"
    ".END\r\n"
)

# `.param` with {expr} and 'expr', a subcircuit with default and overridden params (also with
# `params:` on the call), a 0 V ammeter inside the subcircuit.
PARAMETRISED_STAGES = """\
.title Two cascaded common-source stages from one parametrised subcircuit
.param vsup=5 wn={2*10u}
.param lch = 2u  rtop='vsup*66k'
VSUP vdd 0 {vsup}
.subckt csstage in out supply params: rd=10k w=10u
VMEAS supply top 0
RD top out {rd}
M1 out in 0 0 nch W={w} L={lch}
.ends csstage
.Model nch NMOS (vto=0.7 kp=120u lambda=0.02)
R1 vdd g1 {rtop}
R2 g1 0 120k
X1 g1 d1 vdd csstage rd=15k w={wn}
X2 d1 d2 vdd csstage params: rd=22k
.op
.end
"""

# `.include` of a model file and `.lib FILE SECTION`; a diode with an area factor.
INCLUDED_MODELS = """\
Diode-biased NMOS with its models in other files
.include models/devices.inc
.lib lib/corners.lib ff
VDD vdd 0 3.3
RB vdd ref 10k
D1 ref dref DMOD
D2 dref 0 DMOD 2
RD vdd d 5k
M1 d ref 0 0 NMOD W=10u L=1u
.op
.end
"""
MODEL_FILES = {
    "models/devices.inc": (
        "* device models, no title line\n"
        ".model NMOD nmos (level=1 vto=0.6 kp=100u lambda=0.01 gamma=0.4 phi=0.7)\n"
    ),
    "lib/corners.lib": (
        "* corner library\n"
        ".lib tt\n"
        ".model DMOD d (is=1e-14 n=1.0)\n"
        ".endl tt\n"
        ".lib ff\n"
        ".model DMOD d (is=1e-13 n=1.05 rs=10)\n"
        ".endl ff\n"
    ),
}

# Transient-only sources (SIN without a DC value, PULSE without parentheses), `dc=`, E/G/F/H
# and a 0 V ammeter the F and H sources sense.
CONTROLLED_SOURCES = """\
Controlled sources and sources with only a transient function
VIN in 0 SIN(0.5 1 1k)
VP p 0 PULSE 0 5 1n 1n 1n 1u 2u
VREF ref 0 dc=2
RIN in 0 1k
RP p 0 1k
E1 e 0 ref 0 2.5
RE e 0 10k
G1 0 g ref 0 1m
RG g 0 2k
VSENSE e s 0
RS s 0 4.7k
F1 0 f VSENSE 3
RF f 0 1k
H1 h 0 VSENSE 1k
RH h 0 1k
.op
.end
"""

# Node names from schematic tools, `gnd`, inline `;` and ` $ ` comments, a BJT, options, temp.
SCHEMATIC_EXPORT = """\
Mixed Case Bench: BJT stage exported from a schematic
* comment line
VCC +5V 0 5 ; supply
RB1 +5V Net-_Q1-Pad2_ 47k $ divider top
RB2 Net-_Q1-Pad2_ GND 10k
RC +5V Coll 2.2k
RE Emit gnd 470
Q1 Coll Net-_Q1-Pad2_ Emit QGen
.Model QGen NPN (BF=120 IS=2e-15 VAF=80)
.OPTIONS RELTOL=1e-4
.TEMP 50
.Op
.End
"""

WRITTEN = {
    "pmos_mirror": PMOS_MIRROR,
    "parametrised_stages": PARAMETRISED_STAGES,
    "included_models": INCLUDED_MODELS,
    "controlled_sources": CONTROLLED_SOURCES,
    "schematic_export": SCHEMATIC_EXPORT,
}


@pytest.mark.parametrize("name", sorted(p.name for p in BUNDLED.glob("*.cir")))
def test_emitted_bundled_netlist_has_ngspices_own_operating_point(name, tmp_path):
    folder = tmp_path / "netlists"
    shutil.copytree(BUNDLED, folder)
    copy = folder / name
    # Running a `.control` block directly is what the tool forbids: the copy loses it.
    copy.write_text(_CONTROL_BLOCK.sub("", copy.read_text(encoding="utf-8")), encoding="utf-8")
    assert _CONTROL_CARD.search(copy.read_text(encoding="utf-8")) is None
    target, text = emitted_file(BUNDLED / name, tmp_path)
    assert_nothing_of_the_control_block(text)
    original = run_ngspice(copy)  # reference: ngspice 39 run directly in batch mode
    assert_same_operating_point(original, run_ngspice(target))


@pytest.mark.parametrize("name", sorted(WRITTEN))
def test_emitted_handwritten_netlist_has_ngspices_own_operating_point(name, tmp_path):
    for relative, content in MODEL_FILES.items():
        (tmp_path / relative).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / relative).write_text(content, encoding="utf-8")
    source = tmp_path / f"{name}.cir"
    source.write_bytes(WRITTEN[name].encode("utf-8"))  # bytes: CRLF stays CRLF
    emitted_folder = tmp_path / "emitted"
    emitted_folder.mkdir()
    target, text = emitted_file(source, emitted_folder)
    assert_nothing_of_the_control_block(text)
    original = run_ngspice(source)  # reference: ngspice 39 run directly in batch mode
    assert_same_operating_point(original, run_ngspice(target))


def test_subcircuit_internal_nodes_are_named_as_ngspice_names_them(tmp_path):
    source = tmp_path / "stages.cir"
    source.write_text(PARAMETRISED_STAGES, encoding="utf-8")
    circuit = read_netlist(source)
    original = run_ngspice(source)  # reference: ngspice 39 run directly in batch mode
    assert {"x1.top", "x2.top"} <= set(original.voltages)
    assert set(circuit.nodes()) == set(original.voltages)
    assert {"v.x1.vmeas#branch", "v.x2.vmeas#branch"} <= set(original.currents)


def test_control_block_shell_command_never_runs_from_the_emitted_netlist(tmp_path):
    marker = tmp_path / "pwned"
    source = tmp_path / "escape.cir"
    source.write_text(
        "Divider with a control block\n"
        "V1 a 0 1\n"
        "R1 a b 1k\n"
        "R2 b 0 1k\n"
        ".op\n"
        ".control\n"
        f"shell touch {marker}\n"
        ".endc\n"
        ".end\n",
        encoding="utf-8",
    )
    circuit = read_netlist(source)
    assert any(notice.code == "control-dropped" for notice in circuit.notices)
    emitted_folder = tmp_path / "emitted"
    emitted_folder.mkdir()
    target, text = emitted_file(source, emitted_folder)
    assert_nothing_of_the_control_block(text)
    assert "shell" not in text.lower() and str(marker) not in text
    emitted = run_ngspice(target)
    assert emitted.voltages["b"] == pytest.approx(0.5, abs=1e-6)
    assert not marker.exists()
    # The same netlist run directly does run the command: the check above can fail.
    run_ngspice(source)  # reference: ngspice 39 run directly in batch mode
    assert marker.exists()
