"""Model cards other than level 1 (BSIM3, BSIM4, levels 2 and 3, HiSIM2): read as written, solved
by ngspice; without ngspice hand and level-1 columns left empty with one finding that says why
(with ngspice they rest on a fitted level-1 equivalent: tests/test_check_fitted.py).

External reference: ngspice 39 run directly in batch mode (`ngspice -b`) on the same file; its
`.op` printout holds the node voltages and, per device, the table `show` prints (id, vgs, vds,
gm, gds and the threshold: `von` for mos2/3, `vth` for BSIM3/4). The sign conventions (mos2/3
give `von` the type's sign, BSIM3/4 print `vth` positive for a PMOS) are read from those
printouts: the PMOS cards below have a negative VTO/VTH0 and ngspice prints the signs as stated.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import pytest
from conftest import NGSPICE, needs_ngspice, ngspice_batch_op

from bridge.check import check_circuit
from bridge.cli import main
from bridge.netlist import parse_netlist, read_netlist
from bridge.netlist.emit import emit
from bridge.report.check_view import check_json
from bridge.sim.client import NgspiceSession

# Stages of a greenhouse sensor board and a bicycle dynamo light, one per model family.
CARDS = {
    "bsim3_level8_nmos.cir": """\
Greenhouse humidity sensor buffer: NMOS common source, BSIM3v3 card
VDD vdd 0 DC 1.8
R1 vdd gate 100k
R2 gate 0 100k
RD vdd drain 5k
M1 drain gate 0 0 NSENSE W=2u L=0.36u
.model NSENSE nmos (level=8 version=3.3.0 tox=4.1e-9 vth0=0.42 u0=280
+ k1=0.55 k2=0.01 vsat=8.5e4 rdsw=150 nch=3.9e17 xj=1e-7)
.op
.end
""",
    "bsim3_level49_pmos.cir": """\
Greenhouse vent-motor current sense: PMOS common source, BSIM3v3 card
VDD vdd 0 DC 1.8
VG g 0 DC 0.6
RD d 0 5k
M1 d g vdd vdd PSENSE W=4u L=0.36u
.model PSENSE pmos (level=49 version=3.3.0 tox=4.1e-9 vth0=-0.45 u0=100 k1=0.56 vsat=8e4 nch=4e17)
.op
.end
""",
    "bsim4_level14_nmos.cir": """\
Greenhouse light-sensor transimpedance bias: NMOS common source, BSIM4 card
VDD vdd 0 DC 1.8
R1 vdd gate 100k
R2 gate 0 100k
RD vdd drain 5k
M1 drain gate 0 0 NLIGHT W=2u L=0.36u
.model NLIGHT nmos (level=14 version=4.5.0 toxe=4.1e-9 vth0=0.42 u0=0.028
+ k1=0.55 k2=0.01 vsat=8.5e4 rdsw=150 ndep=3.9e17 xj=1e-7)
.op
.end
""",
    "bsim4_level54_pmos.cir": """\
Greenhouse heater-relay driver: PMOS common source, BSIM4 card
VDD vdd 0 DC 1.8
VG g 0 DC 0.6
RD d 0 5k
M1 d g vdd vdd PHEAT W=4u L=0.36u
.model PHEAT pmos (level=54 version=4.5 toxe=4.1e-9 vth0=-0.45 u0=0.01)
.op
.end
""",
    "level2_nmos.cir": """\
Bicycle dynamo light regulator: NMOS common source, level-2 card
VDD vdd 0 DC 5
R1 vdd gate 300k
R2 gate 0 100k
RD vdd drain 10k
M1 drain gate 0 0 NDYN W=20u L=2u
.model NDYN nmos (level=2 vto=0.7 kp=110u gamma=0.4 phi=0.65 lambda=0.02 tox=25n u0=600
+ ucrit=1e4 uexp=0.1)
.op
.end
""",
    "level3_pmos.cir": """\
Bicycle dynamo tail-light driver: PMOS common source, level-3 card
VDD vdd 0 DC 5
VG g 0 DC 3.5
RD d 0 10k
M1 d g vdd vdd PTAIL W=40u L=2u
.model PTAIL pmos (level=3 vto=-0.8 kp=40u gamma=0.5 phi=0.7 tox=25n u0=250 theta=0.05 eta=0.02 kappa=0.2)
.op
.end
""",
}

# The threshold's vector per file, and its sign in ngspice's printout (see the module docstring).
THRESHOLD = {
    "bsim3_level8_nmos.cir": ("vth", 1.0),
    "bsim3_level49_pmos.cir": ("vth", 1.0),
    "bsim4_level14_nmos.cir": ("vth", 1.0),
    "bsim4_level54_pmos.cir": ("vth", 1.0),
    "level2_nmos.cir": ("von", 1.0),
    "level3_pmos.cir": ("von", -1.0),
}

HISIM2 = """\
Greenhouse soil-moisture probe buffer: NMOS common source, HiSIM2 card
VDD vdd 0 DC 1.8
R1 vdd gate 100k
R2 gate 0 100k
RD vdd drain 5k
M1 drain gate 0 0 NPROBE W=2u L=0.5u
.model NPROBE nmos (level=68 version=2.80 tox=4n)
.op
.end
"""

_ROW = re.compile(r"^\s+(\S+)\s+(\S+)\s*$")


def ngspice_batch_device(path: Path, device: str = "m1") -> dict[str, float]:
    """The numeric rows of one device's table in `ngspice -b`'s `.op` printout (`id`, `gm`, ...)."""
    assert NGSPICE is not None
    completed = subprocess.run(
        [NGSPICE, "-b", str(path)], capture_output=True, text=True, timeout=60, cwd=path.parent
    )
    lines = completed.stdout.splitlines()
    start = next(i for i, line in enumerate(lines) if line.split() == ["device", device])
    values: dict[str, float] = {}
    for line in lines[start + 1:]:
        match = _ROW.match(line)
        if not match:
            break
        try:
            values[match.group(1)] = float(match.group(2))
        except ValueError:
            continue  # the model name
    print(f"ngspice -b {path.name}, device {device}: {values}")
    assert values, completed.stdout
    return values


def close(value: float | None, reference: float) -> bool:
    # ngspice -b prints 6 significant digits.
    return value is not None and abs(value - reference) <= 2e-5 * abs(reference) + 1e-12


@pytest.fixture(scope="module")
def card_files(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("other_levels")
    files = {}
    for name, text in (CARDS | {"hisim2_level68_nmos.cir": HISIM2}).items():
        files[name] = folder / name
        files[name].write_text(text)
    return files


@needs_ngspice
@pytest.mark.parametrize("name", sorted(CARDS))
def test_the_ngspice_column_is_ngspice_b_on_the_same_file(name, card_files, required_ngspice_session):
    path = card_files[name]
    nodes = ngspice_batch_op(path)
    device = ngspice_batch_device(path)
    result = check_circuit(read_netlist(path), required_ngspice_session, tolerance=0.05)

    for node, columns in result.nodes.items():
        assert close(columns.sim, nodes[node]), (node, columns.sim, nodes[node])
    quantities = result.devices["M1"].quantities
    for quantity in ("id", "vgs", "vds", "gm", "gds"):
        assert close(quantities[quantity].sim, device[quantity]), (quantity, quantities[quantity].sim)
    vector, sign = THRESHOLD[name]
    vth = sign * device[vector]
    assert close(quantities["vth"].sim, vth)
    assert vth > 0  # every stage here conducts: the threshold is positive, PMOS included
    vov = device["vgs"] - vth
    assert quantities["vov"].sim == pytest.approx(vov, abs=2e-5)
    assert result.devices["M1"].region["sim"] == ("saturation" if device["vds"] >= vov else "triode")


@pytest.mark.parametrize("name", sorted(CARDS))
def test_without_ngspice_hand_and_level1_columns_are_empty_with_one_finding_that_says_why(name, card_files):
    # The level-1 equivalent that stands in for the card is fitted around ngspice's operating point
    # (tests/test_check_fitted.py); without ngspice there is none.
    result = check_circuit(read_netlist(card_files[name]), None, tolerance=0.05)
    columns = [*result.nodes.values(), *result.devices["M1"].quantities.values()]
    assert all(c.hand is None and c.level1 is None for c in columns)
    assert result.devices["M1"].region["hand"] is None and result.devices["M1"].region["level1"] is None
    level = re.search(r"level=(\d+)", CARDS[name]).group(1)
    why = [f for f in result.findings if f.code == "not-level-1"]
    assert len(why) == 1 and why[0].severity == "info" and why[0].subject == "M1"
    assert f"is LEVEL={level}" in why[0].message and "need level-1 model cards" in why[0].message
    assert "ngspice is not available" in why[0].message
    # No column of ours was solved, so no finding speaks of one.
    assert not [f for f in result.findings if f.code in {"solver-failed", "hand-unavailable", "hand-numeric"}]
    assert not any("defect" in f.message for f in result.findings)
    assert result.agree
    assert check_json(result)["devices"]["M1"]["id"]["hand"] is None


@needs_ngspice
def test_check_text_says_only_what_was_done(card_files, capsys):
    path = card_files["bsim3_level8_nmos.cir"]
    status = main(["check", str(path)])
    out = capsys.readouterr().out
    assert status == 1, out  # the hand column (square law on the equivalent) differs from the BSIM3 card
    flat = " ".join(out.split())
    assert "solved numerically" not in flat
    assert "model NSENSE is LEVEL=8" in flat
    # The hand and level-1 columns rest on a fitted equivalent, and the text says so.
    assert "M1: hand and level-1 columns on NSENSE_l1, a level-1 equivalent of NSENSE (level 8)" in flat
    assert "need level-1 model cards" not in flat


@needs_ngspice
def test_a_vector_the_model_lacks_is_null_for_that_quantity_only(card_files, required_ngspice_session):
    # HiSIM2 names its drain current `ids` and has no `vgs`/`vds` vectors: those stay null, while
    # the nodes, gm and gds are filled (before, one missing vector emptied the whole column).
    path = card_files["hisim2_level68_nmos.cir"]
    nodes = ngspice_batch_op(path)
    device = ngspice_batch_device(path)
    assert "id" not in device and "vgs" not in device and "gm" in device
    result = check_circuit(read_netlist(path), required_ngspice_session, tolerance=0.05)
    assert not [f for f in result.findings if f.severity == "error"], result.findings
    for node, columns in result.nodes.items():
        assert close(columns.sim, nodes[node])
    quantities = result.devices["M1"].quantities
    assert close(quantities["gm"].sim, device["gm"]) and close(quantities["gds"].sim, device["gds"])
    for quantity in ("id", "vgs", "vds", "vth", "vov"):
        assert quantities[quantity].sim is None, quantity
    assert result.devices["M1"].region["sim"] is None


def test_parse_json_keeps_other_levels_as_written(card_files, capsys):
    assert main(["parse", "--json", str(card_files["bsim3_level8_nmos.cir"])]) == 0
    params = json.loads(capsys.readouterr().out)["models"]["NSENSE"]["params"]
    assert params["version"] == "3.3.0"
    assert params["u0"] == 280.0 and "uo" not in params
    assert params["vth0"] == 0.42 and params["tox"] == pytest.approx(4.1e-9)
    assert main(["parse", "--json", str(card_files["level2_nmos.cir"])]) == 0
    params = json.loads(capsys.readouterr().out)["models"]["NDYN"]["params"]
    assert params["u0"] == 600.0 and "uo" not in params


def test_level1_cards_keep_their_aliases(tmp_path, capsys):
    path = tmp_path / "dynamo_level1.cir"
    path.write_text(
        "Bicycle dynamo light: level-1 card with the aliases\n"
        "VDD vdd 0 5\nRD vdd d 10k\nM1 d vdd 0 0 NL W=10u L=2u\n"
        ".model NL nmos (vt0=0.8 u0=500 tox=30n)\n.op\n.end\n"
    )
    assert main(["parse", "--json", str(path)]) == 0
    params = json.loads(capsys.readouterr().out)["models"]["NL"]["params"]
    assert params == {"vto": 0.8, "uo": 500.0, "tox": pytest.approx(30e-9)}


def test_text_value_on_a_level1_card_is_still_a_located_error(tmp_path, capsys):
    path = tmp_path / "bad_level1.cir"
    path.write_text("Bicycle dynamo light\nM1 d g 0 0 NL\n.model NL nmos (version=3.3.0 vto=0.8)\n.end\n")
    assert main(["parse", str(path)]) == 2
    err = capsys.readouterr().err
    assert f"{path}:3:28: `3.3.0` is not a number (unexpected `.` after `3.3`)" in err


@needs_ngspice
def test_ngspice_files_stay_out_of_the_users_folder(card_files, tmp_path):
    # BSIM3's parameter check writes `b3v33check.log` into ngspice's working folder (as
    # `ngspice -b` does into the folder it is run from): the worker has a private one.
    netlist = tmp_path / "bsim3_level8_nmos.cir"
    netlist.write_text(CARDS["bsim3_level8_nmos.cir"])
    completed = subprocess.run(
        [sys.executable, "-m", "bridge", "check", netlist.name], capture_output=True, text=True,
        cwd=tmp_path, timeout=120,
    )
    # 1: the hand column (the square law on the card's fitted equivalent) differs from the BSIM3 card.
    assert completed.returncode == 1, completed.stdout + completed.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == [netlist.name]
    subprocess.run([NGSPICE, "-b", netlist.name], capture_output=True, cwd=tmp_path, timeout=60)
    assert (tmp_path / "b3v33check.log").exists()  # what the worker's folder kept away


@needs_ngspice
def test_the_workers_folder_goes_with_it(card_files):
    with NgspiceSession() as session:
        check_circuit(read_netlist(card_files["bsim3_level8_nmos.cir"]), session, tolerance=0.05)
        folder = Path(session._worker.workdir)
        assert (folder / "b3v33check.log").exists()
    assert not folder.exists()


def test_emitted_card_keeps_names_and_text_and_is_a_fixed_point(card_files):
    circuit = read_netlist(card_files["bsim3_level8_nmos.cir"])
    card = next(line for line in emit(circuit).text.splitlines() if line.startswith(".model"))
    assert card.startswith(".model NSENSE nmos (level=8 version=3.3.0 tox=4.1e-09 vth0=0.42 u0=280 ")
    again = parse_netlist(emit(circuit).text)
    assert again.models == {key: replace(m, origin=again.models[key].origin) for key, m in circuit.models.items()}
    assert emit(again).text == emit(circuit).text


@needs_ngspice
@pytest.mark.parametrize("name", ["bsim3_level8_nmos.cir", "bsim4_level14_nmos.cir"])
def test_sweep_finds_the_cutoff_edge_from_the_familys_own_threshold(name, card_files, required_ngspice_session,
                                                                     tmp_path):
    # Reference: ngspice -b's own .dc at 0.1 mV steps, the first point where @m1[vgs] − @m1[vth]
    # turns positive. The sweep reads BSIM's `vth` (it read `von`, which BSIM lacks, and found no edge).
    # The fine .dc spans 0.1 V either side of the edge found (2,001 points, not 18,001 over 0–1.8 V).
    import numpy as np

    from bridge.sweep_run import transfer_curve

    result = transfer_curve(read_netlist(card_files[name]), "VDD", "drain", np.linspace(0.0, 1.8, 37),
                            required_ngspice_session)
    assert "not-level-1" in [f.code for f in result.findings]
    assert result.curves["hand"] is None and result.curves["level1"] is None
    edge = result.curves["sim"].edges["M1"]
    crossing = next(c for c in edge.crossings if c.boundary == "cutoff_saturation")

    deck = tmp_path / "fine.cir"
    low = max(0.0, round(crossing.at - 0.1, 4))
    deck.write_text(CARDS[name].replace(".op\n", ".save v(vdd) @m1[vgs] @m1[vth]\n.control\n"
                                        f"dc VDD {low} {low + 0.2:.4f} 1e-4\n"
                                        f"print v(vdd) @m1[vgs] @m1[vth] > {tmp_path / 'fine.txt'}\n.endc\n"))
    subprocess.run([NGSPICE, "-b", str(deck)], capture_output=True, text=True, timeout=60, cwd=tmp_path)
    rows = [line.split() for line in (tmp_path / "fine.txt").read_text().splitlines()]
    numbers = [[float(v) for v in row[2:5]] for row in rows if len(row) == 5 and row[0].isdigit()]
    assert numbers[0][1] - numbers[0][2] <= 0  # the fine window starts below the edge
    reference = next(vdd for vdd, vgs, vth in numbers if vgs - vth > 0)
    assert abs(crossing.at - reference) <= crossing.accuracy + 1e-4
