"""What the `biasbridge check` tests share: the stages written for them, and small helpers to run
the command and read its table. Imported by the test_check_*.py modules; it holds no tests."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import EXAMPLES, LIBRARY_FOUND, LIBRARY_HINT, REPO

from bridge.cli import main
from bridge.compare import CheckResult

needs_library = pytest.mark.skipif(not LIBRARY_FOUND, reason=LIBRARY_HINT)

BUNDLED = sorted(path.name for path in EXAMPLES.glob("*.cir"))


OWN_NETLISTS = {
    "pmos_gate_on_source.cir": """\
PMOS common source, gate on a voltage source, drain resistor to ground
VDD vdd 0 3.3
VG g 0 1.8
RD d 0 4.7k
M1 d g vdd vdd pch W=40u L=1u
.model pch pmos (vto=-0.7 kp=40u lambda=0.05)
.op
.end
""",
    "triode.cir": """\
NMOS pulled into triode by a large drain resistor
VDD vdd 0 5
R1 vdd g 100k
R2 g 0 100k
RD vdd d 47k
M1 d g 0 0 nch W=20u L=1u
.model nch nmos (vto=0.7 kp=100u lambda=0.02)
.op
.end
""",
    "cutoff.cir": """\
NMOS in cutoff: the divider holds the gate below threshold
VDD vdd 0 5
R1 vdd g 1meg
R2 g 0 100k
RD vdd d 10k
M1 d g 0 0 nch W=10u L=1u
.model nch nmos (vto=0.7 kp=100u)
.op
.end
""",
    "body_effect.cir": """\
NMOS with a source resistor and a strong body effect
VDD vdd 0 10
R1 vdd g 200k
R2 g 0 200k
RD vdd d 10k
RS s 0 4.7k
M1 d g s 0 nch W=20u L=2u
.model nch nmos (vto=0.6 kp=100u gamma=0.8 phi=0.6)
.op
.end
""",
    "large_lambda.cir": """\
NMOS with a short channel: large LAMBDA
VDD vdd 0 5
VG g 0 1.2
RD vdd d 5k
M1 d g 0 0 nch W=10u L=0.5u
.model nch nmos (vto=0.5 kp=150u lambda=0.15)
.op
.end
""",
    "lateral_diffusion.cir": """\
NMOS with lateral diffusion LD
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 100k
RD vdd d 8k
M1 d g 0 0 nch W=10u L=1.5u
.model nch nmos (vto=0.6 kp=100u ld=0.2u lambda=0.01)
.op
.end
""",
    "kp_from_uo_tox.cir": """\
NMOS whose KP comes from UO and TOX
VDD vdd 0 5
R1 vdd g 200k
R2 g 0 100k
RD vdd d 10k
M1 d g 0 0 nch W=10u L=2u
.model nch nmos (vto=0.7 uo=450 tox=20n)
.op
.end
""",
    "parallel_m4.cir": """\
NMOS with M=4 parallel devices and a source resistor
VDD vdd 0 5
R1 vdd g 100k
R2 g 0 50k
RD vdd d 4.7k
RS s 0 1k
M1 d g s 0 nch W=10u L=2u M=4
.model nch nmos (vto=0.7 kp=100u lambda=0.02)
.op
.end
""",
    "split_supply_pmos.cir": """\
PMOS common source on +/-3 V, gate at ground
VPOS vpos 0 3
VNEG vneg 0 -3
RG g 0 470k
RS vpos s 5.6k
RD d vneg 10k
M1 d g s vpos pch W=40u L=2u
.model pch pmos (vto=-0.75 kp=40u lambda=0.02 gamma=0.3 phi=0.7)
.op
.end
""",
    "diode_pmos.cir": """\
Diode-connected PMOS fed by a resistor to ground
VDD vdd 0 3.3
M1 d d vdd vdd pch W=20u L=2u
RB d 0 33k
.model pch pmos (vto=-0.8 kp=40u lambda=0.03)
.op
.end
""",
    "feedback_only.cir": """\
NMOS with drain-to-gate feedback and no gate resistor to ground
VDD vdd 0 5
RD vdd d 15k
RF d g 1meg
M1 d g 0 0 nch W=10u L=2u
.model nch nmos (vto=0.7 kp=120u lambda=0.02)
.op
.end
""",
    "tail_current.cir": """\
NMOS with a current source in the source, split supplies
VPOS vpos 0 5
VNEG vneg 0 -5
RG g 0 100k
RD vpos d 10k
ITAIL s vneg 250u
M1 d g s vneg nch W=20u L=2u
.model nch nmos (vto=0.7 kp=120u lambda=0.02 gamma=0.4 phi=0.65)
.op
.end
""",
    "mixed_case.cir": """\
Mixed-case names: node and device names as written
VDD VDD 0 5
R1 VDD GATE 330k
R2 GATE 0 120k
RD VDD OUT 10k
Mamp OUT GATE 0 0 NCH W=20u L=2u
.model NCH nmos (vto=0.7 kp=120u lambda=0.02 gamma=0.4 phi=0.65)
.op
.end
""",
}


CASES = [f"bundled/{name}" for name in BUNDLED] + [f"own/{name}" for name in OWN_NETLISTS]


TRIPLE = {"hand", "level1", "sim"}
QUANTITIES = ("id", "vgs", "vds", "vth", "vov", "gm", "gds")


def write_own_netlists(folder: Path) -> Path:
    """OWN_NETLISTS written into `folder`, which is returned."""
    for name, text in OWN_NETLISTS.items():
        (folder / name).write_text(text)
    return folder


def case_path(case: str, own_dir: Path) -> Path:
    kind, name = case.split("/")
    return EXAMPLES / name if kind == "bundled" else own_dir / name


def codes(result: CheckResult) -> set[str]:
    return {finding.code for finding in result.findings}


def run_cli(argv: list[str], capsys) -> tuple[int, str, str]:
    status = main(argv)
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def cli_subprocess(args: list[str], **env_changes: str | None) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    for key, value in env_changes.items():
        if value is None:
            env.pop(key, None)
        else:
            env[key] = value
    return subprocess.run(
        [sys.executable, "-m", "bridge", *args], capture_output=True, text=True, env=env, cwd=REPO, timeout=120
    )


def table_rows(block: str) -> dict[str, list[str]]:
    rows = {}
    for line in block.splitlines():
        if line.startswith("│"):
            cells = [cell.strip() for cell in line.strip().strip("│").split("│")]
            rows[cells[0]] = cells[1:]
    return rows


def table_titles(block: str) -> list[str]:
    header = next(line for line in block.splitlines() if line.startswith("┃"))
    return [cell.strip() for cell in header.strip().strip("┃").split("┃")]


def located(err: str, path: Path, line: int | None = None) -> bool:
    where = rf"{line}" if line is not None else r"\d+"
    return re.search(rf"^{re.escape(str(path))}:{where}:\d+: ", err, re.MULTILINE) is not None


# Greenhouse sensor board: a source follower whose strong body effect moves seven quantities at once
# (the batch view's and the cause groups' disagreeing stage).
PROBE_BUFFER = """\
Greenhouse sensor board: soil-probe buffer, NMOS source follower with a strong body effect
VDD vdd 0 5
R1 vdd g 150k
R2 g 0 100k
RS s 0 10k
M1 vdd g s 0 nch W=40u L=2u
.model nch nmos (vto=0.6 kp=120u gamma=0.9 phi=0.65)
.op
.end
"""


# Greenhouse heater sense: a current source pushing 300 µA into the source node (the device off).
HEATER = """Greenhouse heater sense: source current sink wired backwards
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 200k
RD vdd d 4.7k
M1 d g s 0 NG W=20u L=2u
I1 0 s 300u
RS s 0 500k
.model NG nmos (vto=0.7 kp=100u lambda=0.02 gamma=0.45 phi=0.7)
"""
