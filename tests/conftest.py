"""Shared test helpers: ngspice run directly in batch mode, as the outside reference."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from bridge.sim.client import NgspiceSession, ngspice_available

NGSPICE = shutil.which("ngspice")
needs_ngspice = pytest.mark.skipif(NGSPICE is None, reason="ngspice is not installed")

REPO = Path(__file__).resolve().parents[1]
EXAMPLES = REPO / "netlists"

_ROW = re.compile(r"^\s+(\S+)\s+([-+]?\d\.\d+e[-+]\d+)\s*$")


def ngspice_batch_op(path: Path) -> dict[str, float]:
    """Node voltages and source currents that `ngspice -b` prints for a `.op` netlist.

    The netlist must hold its own `.op` card. Keys are ngspice's lower-case names
    (`out`, `v1#branch`).
    """
    assert NGSPICE is not None
    path = Path(path).resolve()
    completed = subprocess.run(
        [NGSPICE, "-b", str(path)], capture_output=True, text=True, timeout=60, cwd=path.parent
    )
    values: dict[str, float] = {}
    for line in completed.stdout.splitlines():
        match = _ROW.match(line)
        if match:
            values[match.group(1).lower()] = float(match.group(2))
    assert values, f"ngspice printed no operating point:\n{completed.stdout}\n{completed.stderr}"
    return values


LIBRARY_FOUND, LIBRARY_HINT = ngspice_available()


@pytest.fixture(scope="module")
def ngspice_session():
    """One ngspice worker for a test module; None where the library is not installed (tests
    that need it skip, the others run the no-simulator path)."""
    if not LIBRARY_FOUND:
        yield None
        return
    with NgspiceSession() as session:
        yield session


@pytest.fixture(scope="module")
def required_ngspice_session(ngspice_session):
    """The module's ngspice worker; skips the test where the library is not installed."""
    if ngspice_session is None:
        pytest.skip(LIBRARY_HINT)
    return ngspice_session
