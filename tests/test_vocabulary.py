"""The shared vocabulary: one leaf module, said once, and the findings it words."""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest

from bridge import vocabulary
from bridge.analysis.sweep import sweep_values
from bridge.check import check_circuit
from bridge.netlist import parse_netlist, read_netlist
from bridge.sim.client import SimulationFailed, SimulatorCrashed, SimulatorTimeout, SimulatorUnavailable
from bridge.sweep_run import transfer_curve
from tests.conftest import EXAMPLES

BRIDGE = Path(vocabulary.__file__).parent


def _defined(tree: ast.Module) -> set[str]:
    """The public names a module defines at its top level (classes, functions, constants)."""
    names = {node.name for node in tree.body if isinstance(node, (ast.ClassDef, ast.FunctionDef))}
    for node in tree.body:
        targets = node.targets if isinstance(node, ast.Assign) else [node.target] if isinstance(
            node, ast.AnnAssign) else []
        names |= {target.id for target in targets if isinstance(target, ast.Name)}
    return {name for name in names if not name.startswith("_")}


SHARED = _defined(ast.parse((BRIDGE / "vocabulary.py").read_text(encoding="utf-8")))


def _modules() -> list[Path]:
    return sorted(path for path in BRIDGE.rglob("*.py") if path.name != "vocabulary.py")


def _module_name(path: Path) -> str:
    parts = path.relative_to(BRIDGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imported_from(path: Path, node: ast.ImportFrom) -> str:
    """The absolute module an ``from X import ...`` in `path` reads."""
    if node.level == 0:
        return node.module or ""
    package = _module_name(path).split(".")
    if path.name != "__init__.py":
        package = package[:-1]
    base = package[: len(package) - node.level + 1]
    return ".".join(base + ([node.module] if node.module else []))


def _imported_by(module: str) -> list[str]:
    tree = ast.parse((BRIDGE / module).read_text(encoding="utf-8"))
    imported = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            imported += [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            assert node.level == 0, f"relative import at line {node.lineno}"
            imported.append(node.module or "")
    assert imported, "the module was not read"
    return [name for name in imported if name.split(".")[0] not in sys.stdlib_module_names]


def test_the_vocabulary_imports_nothing_of_ours_but_how_records_are_made():
    assert {"Finding", "Step", "EFFECTS", "COLUMNS", "Expectations", "simulator_failure"} <= SHARED
    assert _imported_by("vocabulary.py") == ["bridge.records"]
    assert _imported_by("records.py") == []  # a leaf below the vocabulary


def test_every_module_imports_the_shared_names_from_the_vocabulary():
    wrong = []
    for path in _modules():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom):
                source = _imported_from(path, node)
                wrong += [f"{path.relative_to(BRIDGE)}:{node.lineno} {alias.name} from {source}"
                          for alias in node.names if alias.name in SHARED and source != "bridge.vocabulary"]
    assert wrong == []


def test_no_module_defines_its_own_copy_of_the_vocabulary():
    copies = []
    for path in _modules():
        for node in ast.parse(path.read_text(encoding="utf-8")).body:
            if isinstance(node, (ast.ClassDef, ast.FunctionDef)) and node.name in SHARED:
                copies.append(f"{path.relative_to(BRIDGE)}:{node.lineno} {node.name}")
            targets = node.targets if isinstance(node, ast.Assign) else [node.target] if isinstance(
                node, ast.AnnAssign) else []
            for target in targets:
                # hand.py's EFFECTS is the vocabulary's as a set: derived, not spelled out again
                spelled = node.value is not None and any(
                    isinstance(part, ast.Constant) and isinstance(part.value, str) for part in ast.walk(node.value))
                if isinstance(target, ast.Name) and target.id in SHARED and spelled:
                    copies.append(f"{path.relative_to(BRIDGE)}:{node.lineno} {target.id}")
    assert copies == []


def test_the_layers_below_compare_do_not_import_it_for_words():
    """expect.py and the sweep read the vocabulary, not compare; the sweep's view not the hand analysis."""
    def sources(relative: str) -> set[str]:
        path = BRIDGE / relative
        return {_imported_from(path, node) for node in ast.walk(ast.parse(path.read_text(encoding="utf-8")))
                if isinstance(node, ast.ImportFrom)}

    assert "bridge.compare" not in sources("expect.py")
    assert "bridge.analysis.hand" not in sources("report/sweep_view.py")


def test_simulator_errors_become_findings_by_their_kind():
    # The errors themselves, as bridge.sim.client raises them.
    timeout = vocabulary.simulator_failure(SimulatorTimeout("ngspice did not answer within 0.5 s during a run", 0.5))
    assert (timeout.severity, timeout.code) == ("error", "sim-timeout")
    assert "within 0.5 s" in timeout.message
    failed = vocabulary.simulator_failure(SimulationFailed("simulator_error", "unknown model", ("a", "b", "c", "d")))
    assert (failed.code, failed.message) == ("sim-failed", "ngspice: simulator_error: unknown model (a; b; c)")
    stuck = vocabulary.simulator_failure(SimulationFailed("no_convergence", "timestep too small"))
    assert (stuck.code, stuck.message) == ("sim-no-convergence", "ngspice: no_convergence: timestep too small")
    crashed = vocabulary.simulator_failure(SimulatorCrashed("ngspice worker died during a run (SIGKILL)"))
    assert crashed.code == "sim-crashed" and "SIGKILL" in crashed.message
    # A library that will not load is not restarted: the finding must not say it is.
    unavailable = vocabulary.simulator_failure(SimulatorUnavailable("libngspice.so not found"))
    assert unavailable.code == "sim-crashed" and "restart" not in unavailable.message


# Two supplies fighting on one rail: ngspice finds no operating point (ngspice 39, `ngspice -b`:
# "singular matrix: check node vdd#branch", then "Transient op failed, timestep too small").
FIGHTING_SUPPLIES = """\
Bicycle dynamo lamp driver: battery and dynamo rail tied together
VDD vdd 0 6
VAUX vdd 0 5
VG g 0 2
RD vdd d 1k
M1 d g 0 0 nlamp w=20u l=1u
.model nlamp nmos vto=0.8 kp=120u
.end
"""


def test_check_and_sweep_word_a_failed_ngspice_run_alike(required_ngspice_session):
    """Before, the sweep left out ngspice's own messages that the check quotes."""
    circuit = parse_netlist(FIGHTING_SUPPLIES, "dynamo.cir")
    checked = check_circuit(circuit, required_ngspice_session, tolerance=0.05)
    swept = transfer_curve(circuit, "VG", "d", sweep_values(0.0, 3.0, points=7), required_ngspice_session)
    (from_check,) = [f for f in checked.findings if f.code.startswith("sim-")]
    (from_sweep,) = [f for f in swept.findings if f.code.startswith("sim-")]
    assert from_check.code == "sim-no-convergence"
    assert "singular matrix" in from_check.message  # ngspice's own message, quoted
    assert from_sweep == from_check


# A greenhouse soil-moisture probe: an NPN buffers the probe, the MOSFET switches the pump.
BJT_BUFFER = """\
Greenhouse moisture probe: NPN buffer beside the pump switch
VCC vcc 0 12
RB vcc b 220k
QBUF vcc b e qprobe
RE e 0 4.7k
RP vcc pump 100
MPUMP pump e 0 0 npump w=200u l=2u
.model qprobe npn(bf=150)
.model npump nmos vto=1.5 kp=80u
.end
"""


def test_solver_failure_at_an_element_carries_its_line():
    """The level-1 solver names the BJT it does not model: the finding is at QBUF's line (4), not
    at no line."""
    circuit = parse_netlist(BJT_BUFFER, "probe.cir")
    result = check_circuit(circuit, None, tolerance=0.05)
    (failed,) = [f for f in result.findings if f.code == "solver-failed"]
    assert "QBUF" in failed.message
    assert (failed.line, failed.subject) == (4, "QBUF")


@pytest.mark.parametrize("simulated", [False, True], ids=["against level-1", "against ngspice"])
def test_the_comparison_flags_the_region_row_as_its_findings_do(simulated, ngspice_session):
    """cs_degenerated: the hand model (no body effect) puts M1 in triode, level-1 and ngspice in
    saturation. The region row's marks come from compare, the report only shows them."""
    if simulated and ngspice_session is None:
        pytest.skip("ngspice is not installed")
    result = check_circuit(read_netlist(EXAMPLES / "cs_degenerated.cir"), ngspice_session if simulated else None,
                           tolerance=0.05)
    device = result.devices["M1"]
    assert device.region["hand"] == "triode" and device.region["level1"] == "saturation"
    assert device.reference_column == ("sim" if simulated else "level1")
    assert device.region_flagged == ("hand",)
    assert device.region_compared == (("hand", "level1") if simulated else ("hand",))
    assert [f.subject for f in result.findings if f.code.endswith("region-mismatch")] == ["M1"]
