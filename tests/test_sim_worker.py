"""The ngspice worker and its client, against the real library: no mocks.

Every test here that simulates runs real ngspice in a real worker process; they are skipped
when libngspice cannot be found.
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from bridge.netlist.emit import SpiceDeck
from bridge.sim.client import (
    NgspiceSession,
    SimulationFailed,
    SimulatorCrashed,
    SimulatorTimeout,
    SimulatorUnavailable,
    ngspice_available,
)
from bridge.sim.locate import locate_ngspice


def deck(text: str) -> SpiceDeck:
    """Wrap a hand-written test deck: these tests exercise the worker on raw SPICE on purpose
    (broken decks the emitter would never produce)."""
    return SpiceDeck(text, "test deck")

REPO_ROOT = Path(__file__).resolve().parents[1]
LIBRARY_FOUND, LIBRARY_HINT = ngspice_available()
needs_ngspice = pytest.mark.skipif(not LIBRARY_FOUND, reason=LIBRARY_HINT)

# A divider biasing one level-1 NMOS in saturation.
STAGE = """\
divider and common-source stage
VDD vdd 0 5
R1 vdd g 100k
R2 g 0 30k
RD vdd d 20k
M1 d g 0 0 nm W=10u L=1u
.model nm nmos level=1 vto=0.7 kp=100u lambda=0.02
.save all @m1[id] @m1[gm] @m1[gds] @m1[vdsat] @m1[von] @m1[vgs] @m1[vds] @m1[vbs]
{analysis}
.end
"""
STAGE_OP = STAGE.format(analysis=".op")

# reference: ngspice 39 run directly in batch mode (`ngspice -b`) on STAGE_OP, with
# `print v(d) @m1[id] @m1[gm] @m1[gds]` after `op` in a control block.
NGSPICE_B_V_D = 2.823905
NGSPICE_B_ID = 1.088047e-04
NGSPICE_B_GM = 4.794785e-04
NGSPICE_B_GDS = 2.059763e-06

SMALL_OP = "small\nV1 a 0 1\nR1 a b 1k\nR2 b 0 1k\n.op\n.end\n"
# 2e6 sweep points: about 4 s of ngspice work on a 2-core machine, ample time to interrupt.
LONG_SWEEP = "long sweep\nV1 a 0 0\nR1 a b 1k\nR2 b 0 1k\n.dc V1 0 1 5e-7\n.end\n"
VOLTAGE_SOURCE_LOOP = "loop\nV1 1 0 1\nV2 1 0 2\nR1 1 0 1k\n.op\n.end\n"
UNKNOWN_MODEL = "unknown model\nV1 1 0 1\nM1 1 1 0 0 nosuch W=1u L=1u\n.op\n.end\n"
# ngspice cannot recover from an undefined parameter: it asks to be unloaded.
UNDEFINED_PARAMETER = "undefined parameter\nV1 1 0 1\nR1 1 0 {nosuchparam}\n.op\n.end\n"


@pytest.fixture(scope="module")
def session():
    if not LIBRARY_FOUND:
        pytest.skip(LIBRARY_HINT)
    with NgspiceSession() as shared:
        yield shared


@needs_ngspice
def test_handshake_reports_the_library_version(session):
    assert re.fullmatch(r"\d+(\.\d+)*\S*", session.version)
    assert session.worker_pid is not None


@needs_ngspice
def test_op_of_divider_and_nmos_stage_gives_node_voltages(session):
    result = session.run(deck(STAGE_OP))
    assert result.plot.startswith("op")
    # The gate draws no current, so the divider is exact: 5 V * 30k / 130k.
    assert result.scalar("g") == pytest.approx(5.0 * 30e3 / 130e3, rel=1e-9)
    assert result.scalar("vdd") == pytest.approx(5.0, rel=1e-12)
    assert result.scalar("v(d)") == pytest.approx(NGSPICE_B_V_D, abs=5e-6)
    # The supply delivers the divider current plus the drain current.
    divider_current = 5.0 / 130e3
    assert -result.scalar("i(vdd)") == pytest.approx(divider_current + NGSPICE_B_ID, rel=1e-5)


@needs_ngspice
def test_a_vector_read_if_present_is_the_scalar_or_none(session):
    # The operating-point reader asks each name once: the value when the plot has it, else None.
    result = session.run(deck(STAGE_OP))
    for name in ("g", "v(d)", "VDD", "i(vdd)", "vdd#branch"):
        assert result.scalar_if_any(name) == result.scalar(name)
    assert "nowhere" not in result and result.scalar_if_any("nowhere") is None
    assert result.scalar_if_any("i(nowhere)") is None


@needs_ngspice
def test_device_vectors_come_back_when_saved(session):
    result = session.run(deck(STAGE_OP))
    gate, drain = result.scalar("g"), result.scalar("d")
    assert result.scalar("@m1[id]") == pytest.approx(NGSPICE_B_ID, rel=1e-5)
    assert result.scalar("@m1[gm]") == pytest.approx(NGSPICE_B_GM, rel=1e-5)
    assert result.scalar("@m1[gds]") == pytest.approx(NGSPICE_B_GDS, rel=1e-5)
    assert result.scalar("@m1[vgs]") == pytest.approx(gate, rel=1e-9)
    assert result.scalar("@m1[vds]") == pytest.approx(drain, rel=1e-9)
    assert result.scalar("@m1[vbs]") == pytest.approx(0.0, abs=1e-12)
    assert result.scalar("@m1[von]") == pytest.approx(0.7, rel=1e-9)
    assert result.scalar("@m1[vdsat]") == pytest.approx(gate - 0.7, rel=1e-9)


@needs_ngspice
def test_requested_vectors_limit_the_answer(session):
    result = session.run(deck(STAGE_OP), vectors=["v(d)", "@m1[id]"])
    assert set(result.vectors) == {"d", "@m1[id]"}
    with pytest.raises(SimulationFailed) as failure:
        session.run(deck(STAGE_OP), vectors=["v(nosuchnode)"])
    assert "nosuchnode" in failure.value.message


@needs_ngspice
def test_dc_sweep_returns_arrays_of_the_sweep_length(session):
    result = session.run(deck(STAGE.format(analysis=".dc VDD 0 5 0.1")))
    assert result.plot.startswith("dc")
    sweep = result["v-sweep"]
    assert len(sweep) == 51
    assert sweep[0] == pytest.approx(0.0) and sweep[-1] == pytest.approx(5.0)
    for name in ("d", "g", "vdd#branch", "@m1[id]"):
        assert result[name].shape == (51,)
    assert result["g"] == pytest.approx(sweep * 30e3 / 130e3, rel=1e-9, abs=1e-12)


@needs_ngspice
def test_many_decks_reuse_one_worker_and_do_not_leak_into_each_other(session):
    pid = session.worker_pid
    for index in range(40):
        if index % 2:
            result = session.run(deck(SMALL_OP))
            assert "d" not in result and "g" not in result
            assert result.scalar("b") == pytest.approx(0.5)
        else:
            result = session.run(deck(STAGE_OP))
            assert "b" not in result
    assert session.worker_pid == pid


@needs_ngspice
def test_title_with_the_word_error_is_not_a_failure(session):
    # PySpice alone would call this load failed: it looks for "error" in ngspice's output.
    result = session.run(deck("error amplifier bias\nV1 a 0 1\nR1 a b 1k\nR2 b 0 1k\n.op\n.end\n"))
    assert result.scalar("b") == pytest.approx(0.5)


@needs_ngspice
def test_floating_node_converges_and_its_warnings_come_back(session):
    result = session.run(deck("floating\nV1 1 0 1\nR1 1 0 1k\nC1 2 3 1p\n.op\n.end\n"))
    assert result.scalar("1") == pytest.approx(1.0)
    assert any("singular matrix" in message for message in result.messages)


@needs_ngspice
def test_voltage_source_loop_fails_as_no_convergence_and_session_goes_on(session):
    pid = session.worker_pid
    with pytest.raises(SimulationFailed) as failure:
        session.run(deck(VOLTAGE_SOURCE_LOOP))
    assert failure.value.kind == "no_convergence"
    assert any("singular matrix" in message for message in failure.value.messages)
    assert session.run(deck(SMALL_OP)).scalar("b") == pytest.approx(0.5)
    assert session.worker_pid == pid


@needs_ngspice
def test_unknown_model_fails_as_simulator_error_and_session_goes_on(session):
    with pytest.raises(SimulationFailed) as failure:
        session.run(deck(UNKNOWN_MODEL))
    assert failure.value.kind == "simulator_error"
    assert "nosuch" in failure.value.message
    assert failure.value.messages
    assert session.run(deck(SMALL_OP)).scalar("b") == pytest.approx(0.5)


@needs_ngspice
def test_deck_that_makes_ngspice_unrecoverable_retires_the_worker(session):
    pid = session.worker_pid
    with pytest.raises(SimulationFailed) as failure:
        session.run(deck(UNDEFINED_PARAMETER))
    assert failure.value.kind == "simulator_error"
    assert "nosuchparam" in failure.value.message
    assert session.run(deck(SMALL_OP)).scalar("b") == pytest.approx(0.5)
    assert session.worker_pid != pid


@needs_ngspice
def test_worker_killed_mid_run_raises_crashed_and_next_run_gets_a_new_worker():
    with NgspiceSession() as session:
        session.run(deck(SMALL_OP))
        pid = session.worker_pid
        killer = threading.Timer(0.3, os.kill, (pid, signal.SIGKILL))
        killer.start()
        try:
            with pytest.raises(SimulatorCrashed) as crash:
                session.run(deck(LONG_SWEEP), timeout=30.0)
        finally:
            killer.cancel()
        assert crash.value.returncode == -signal.SIGKILL
        assert session.run(deck(SMALL_OP)).scalar("b") == pytest.approx(0.5)
        assert session.worker_pid != pid
        assert session.workers_started == 2


@needs_ngspice
def test_run_past_its_timeout_raises_timeout_and_next_run_gets_a_new_worker():
    with NgspiceSession() as session:
        session.run(deck(SMALL_OP))
        pid = session.worker_pid
        with pytest.raises(SimulatorTimeout) as timeout:
            session.run(deck(LONG_SWEEP), timeout=0.3)
        assert timeout.value.timeout == 0.3
        with pytest.raises(ProcessLookupError):
            os.kill(pid, 0)  # killed and reaped
        assert session.run(deck(SMALL_OP)).scalar("b") == pytest.approx(0.5)
        assert session.worker_pid != pid


@needs_ngspice
def test_nothing_reaches_the_callers_stdout_or_stderr(capfd):
    with NgspiceSession() as session:
        session.run(deck(STAGE_OP))  # device vectors make PySpice log "Unit is None ..."
        for text in (VOLTAGE_SOURCE_LOOP, UNKNOWN_MODEL, UNDEFINED_PARAMETER):
            with pytest.raises(SimulationFailed):
                session.run(deck(text))
        session.run(deck(SMALL_OP))
    captured = capfd.readouterr()
    assert captured.out == ""
    assert captured.err == ""


@needs_ngspice
def test_closing_the_session_kills_the_worker():
    session = NgspiceSession()
    session.run(deck(SMALL_OP))
    pid = session.worker_pid
    session.close()
    with pytest.raises(ProcessLookupError):
        os.kill(pid, 0)


def test_locate_reports_a_missing_configured_library_with_a_hint():
    missing = "/nonexistent/libngspice.so.0"
    location = locate_ngspice(environ={"NGSPICE_LIBRARY_PATH": missing})
    assert location.path is None
    assert missing in location.hint
    assert "apt-get install ngspice libngspice0" in location.hint
    assert "\n" not in location.hint


def test_locate_without_any_library_gives_the_install_hint():
    location = locate_ngspice(environ={}, search=False)
    assert location.path is None
    assert location.hint.startswith("ngspice not found")
    assert "apt-get install ngspice libngspice0" in location.hint


def test_client_with_hidden_library_reports_unavailable():
    probe = (
        "from bridge.sim.client import NgspiceSession, SimulatorUnavailable\n"
        "found, hint = NgspiceSession.available()\n"
        "assert not found, hint\n"
        "try:\n"
        "    NgspiceSession()\n"
        "except SimulatorUnavailable as exc:\n"
        "    print('unavailable:', exc.hint)\n"
    )
    env = dict(os.environ, NGSPICE_LIBRARY_PATH="/nonexistent/libngspice.so.0",
               PYTHONPATH=str(REPO_ROOT))
    completed = subprocess.run([sys.executable, "-c", probe], env=env, capture_output=True,
                               text=True, timeout=60)
    assert completed.returncode == 0, completed.stderr
    assert completed.stdout.startswith("unavailable: ngspice not found")
    assert "apt-get install" in completed.stdout


def test_library_that_will_not_load_reports_unavailable(tmp_path):
    broken = tmp_path / "libngspice.so.0"
    broken.write_bytes(b"not a shared object")
    session = NgspiceSession(str(broken))
    with pytest.raises(SimulatorUnavailable) as unavailable:
        session.run(deck(SMALL_OP))
    assert str(broken) in unavailable.value.hint
    with pytest.raises(SimulatorUnavailable):
        session.run(deck(SMALL_OP))  # remembered: no new worker for every deck of a batch
    assert session.workers_started == 0
    session.close()


def held_worker_answered(pending, pid: int) -> tuple[bool, float]:
    """`pending.answered` asked while the worker `pid` is held with SIGSTOP (it can send nothing),
    and how long the question took. A safety timer lets the worker go after 2 s, so an `answered`
    that waited would come back late (and be caught by the caller) rather than hang."""
    release = threading.Timer(2.0, os.kill, (pid, signal.SIGCONT))
    release.start()
    try:
        asked = time.monotonic()
        answered = pending.answered
        return answered, time.monotonic() - asked
    finally:
        release.cancel()


def wait_until_answered(pending, seconds: float = 10.0) -> None:
    deadline = time.monotonic() + seconds
    while not pending.answered and time.monotonic() < deadline:
        time.sleep(0.01)


@needs_ngspice
def test_answered_says_whether_result_would_wait_and_never_waits_itself():
    """The worker is held with SIGSTOP for a time the test chooses: its answer cannot arrive, so
    `answered` must say False at once; let go, the answer comes and `answered` turns True."""
    with NgspiceSession() as session:
        session.spawn()
        pid = session.worker_pid
        os.kill(pid, signal.SIGSTOP)  # held while starting: neither the handshake nor an answer
        try:
            pending = session.submit(deck(STAGE_OP), timeout=30.0)
            time.sleep(0.2)  # ample time for an answer, were the worker running
            answered, took = held_worker_answered(pending, pid)
            assert not answered
            assert took < 0.5
        finally:
            os.kill(pid, signal.SIGCONT)
        wait_until_answered(pending)
        assert pending.answered
        assert pending.result().scalar("v(d)") == pytest.approx(NGSPICE_B_V_D, abs=5e-6)
        assert pending.answered  # and stays so once read
        # A worker that is up (handshake read) and busy: one answer is what it owes.
        os.kill(pid, signal.SIGSTOP)
        try:
            quick = session.submit(deck(SMALL_OP))
            time.sleep(0.2)
            answered, took = held_worker_answered(quick, pid)
            assert not answered
            assert took < 0.5
        finally:
            os.kill(pid, signal.SIGCONT)
        wait_until_answered(quick)
        assert quick.answered
        assert quick.result().scalar("b") == pytest.approx(0.5)
        assert session.worker_pid == pid


@needs_ngspice
def test_answered_is_true_for_a_worker_that_died_and_result_says_so():
    with NgspiceSession() as session:
        session.run(deck(SMALL_OP))
        pending = session.submit(deck(LONG_SWEEP), timeout=30.0)
        os.kill(session.worker_pid, signal.SIGKILL)
        deadline = time.monotonic() + 10
        while not pending.answered and time.monotonic() < deadline:
            time.sleep(0.01)
        assert pending.answered
        with pytest.raises(SimulatorCrashed):
            pending.result()
        assert session.run(deck(SMALL_OP)).scalar("b") == pytest.approx(0.5)
