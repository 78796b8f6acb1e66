"""`biasbridge check` and its ngspice worker: a worker that dies or hangs costs one netlist at
most, many netlists share one worker, and checks queue while ngspice is busy. Real worker
processes, real signals, no mocks.
"""

from __future__ import annotations

import json
import os
import signal
import threading

from check_support import BUNDLED, codes, needs_library, run_cli
from conftest import EXAMPLES

from bridge.check import CheckQueue, PendingCheck, check_circuit, start_check
from bridge.compare import CheckResult
from bridge.netlist import read_netlist
from bridge.report.check_view import check_json
from bridge.sim.client import NgspiceSession


def assert_no_ngspice_column(result: CheckResult) -> None:
    assert all(columns.sim is None for columns in result.nodes.values())
    assert all(columns.hand is not None and columns.level1 is not None for columns in result.nodes.values())
    for device in result.devices.values():
        assert device.region["sim"] is None and device.region["level1"] is not None


def process_gone(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    return False


@needs_library
def test_a_worker_killed_during_a_run_fails_that_netlist_and_the_next_gets_a_new_worker():
    circuits = [read_netlist(EXAMPLES / name) for name in ("cs_divider.cir", "diode_connected.cir",
                                                            "drain_feedback.cir")]
    with NgspiceSession() as own:
        assert check_circuit(circuits[0], own, tolerance=0.05).agree
        pid = own.worker_pid
        # Stop it first so that the kill lands while the next deck is in flight, not before.
        os.kill(pid, signal.SIGSTOP)
        killer = threading.Timer(0.3, os.kill, (pid, signal.SIGKILL))
        killer.start()
        try:
            crashed = check_circuit(circuits[1], own, tolerance=0.05, sim_timeout=20)
        finally:
            killer.cancel()
            killer.join()
        (finding,) = [f for f in crashed.findings if f.code == "sim-crashed"]
        assert finding.severity == "error" and "SIGKILL" in finding.message
        assert not crashed.agree
        assert_no_ngspice_column(crashed)
        assert process_gone(pid)
        recovered = check_circuit(circuits[2], own, tolerance=0.05)
        assert recovered.agree and recovered.simulator is not None
        assert own.worker_pid not in (None, pid)
        assert own.workers_started == 2


@needs_library
def test_a_worker_killed_between_runs_never_costs_more_than_the_next_netlist():
    circuit = read_netlist(EXAMPLES / "cs_divider.cir")
    with NgspiceSession() as own:
        check_circuit(circuit, own, tolerance=0.05)
        pid = own.worker_pid
        os.kill(pid, signal.SIGKILL)
        following = check_circuit(circuit, own, tolerance=0.05)
        # Whether the client sees the death before or while sending the next deck is a race:
        # either that netlist reports sim-crashed, or it already runs on a fresh worker.
        if "sim-crashed" in codes(following):
            assert_no_ngspice_column(following)
        else:
            assert following.agree and own.worker_pid not in (None, pid)
        after = check_circuit(circuit, own, tolerance=0.05)
        assert after.agree and after.simulator is not None
        assert own.worker_pid not in (None, pid)


@needs_library
def test_a_hung_worker_times_out_and_the_next_netlist_gets_a_new_worker():
    circuit = read_netlist(EXAMPLES / "diode_connected.cir")
    with NgspiceSession() as own:
        assert check_circuit(circuit, own, tolerance=0.05).agree
        pid = own.worker_pid
        os.kill(pid, signal.SIGSTOP)
        try:
            hung = check_circuit(circuit, own, tolerance=0.05, sim_timeout=0.5)
        finally:
            if own.worker_pid == pid:  # not replaced: let the stopped process go on, the session ends it
                os.kill(pid, signal.SIGCONT)
        (finding,) = [f for f in hung.findings if f.code == "sim-timeout"]
        assert finding.severity == "error" and "0.5 s" in finding.message
        assert_no_ngspice_column(hung)
        assert process_gone(pid)
        recovered = check_circuit(circuit, own, tolerance=0.05)
        assert recovered.agree and recovered.simulator is not None
        assert own.worker_pid not in (None, pid)
        assert own.workers_started == 2


@needs_library
def test_checking_every_bundled_example_uses_one_worker():
    with NgspiceSession() as own:
        results = [check_circuit(read_netlist(EXAMPLES / name), own, tolerance=0.05) for name in BUNDLED]
        assert own.workers_started == 1
        assert all(result.simulator is not None for result in results)


@needs_library
def test_the_command_checks_eight_netlists_in_one_call(capsys):
    files = [str(EXAMPLES / name) for name in BUNDLED][:8]  # eight of the bundled examples
    assert len(files) == 8
    status, out, err = run_cli(["check", "--json", *files], capsys)
    objects = [json.loads(line) for line in out.splitlines()]
    assert [obj["file"] for obj in objects] == files
    assert all(obj["simulator"] is not None for obj in objects)
    assert status == (0 if all(obj["agree"] for obj in objects) else 1), err


@needs_library
def test_a_check_started_without_its_deck_sends_it_later_and_ends_as_check_circuit_does():
    circuit = read_netlist(EXAMPLES / "source_follower.cir")
    with NgspiceSession() as own:
        expected = check_json(check_circuit(circuit, own, tolerance=0.05))
        started = start_check(circuit, own, tolerance=0.05, submit=False)
        assert not started.submitted and not started.answered
        later = start_check(circuit, own, tolerance=0.05, submit=False)
        later.submit()
        assert later.submitted
        assert check_json(later.finish()) == expected
        assert check_json(started.finish()) == expected  # sent by finish itself
        assert own.workers_started == 1


@needs_library
def test_the_check_queue_hands_back_every_item_in_order_with_the_results_of_check_circuit():
    circuits = [read_netlist(EXAMPLES / name) for name in BUNDLED]
    with NgspiceSession() as own:
        expected = [check_json(check_circuit(circuit, own, tolerance=0.05)) for circuit in circuits]
    with NgspiceSession() as own:
        own.spawn()  # still starting while the first checks are queued: their decks wait
        queue = CheckQueue()
        handed: list[object] = []
        added: list[object] = []
        for index, circuit in enumerate(circuits * 3):
            check = start_check(circuit, own, tolerance=0.05, submit=queue.may_submit())
            for item in (check, f"error {index}") if index % 4 == 1 else (check,):
                queue.add(item)
                added.append(item)
            handed.extend(queue.ready())
        handed.extend(queue.rest())
        assert handed == added
        results = [check_json(item.finish()) for item in handed if isinstance(item, PendingCheck)]
        assert results == expected * 3
        assert own.workers_started == 1


@needs_library
def test_the_check_queue_holds_checks_while_ngspice_is_busy_and_then_sends_them_in_turn():
    circuit = read_netlist(EXAMPLES / "cs_divider.cir")
    with NgspiceSession() as own:
        expected = check_json(check_circuit(circuit, own, tolerance=0.05))
        pid = own.worker_pid
        queue = CheckQueue(lookahead=4)
        os.kill(pid, signal.SIGSTOP)  # the first deck stays unanswered
        try:
            first = start_check(circuit, own, tolerance=0.05, submit=queue.may_submit())
            assert first.submitted
            queue.add(first)
            held = []
            for _ in range(3):
                assert not queue.may_submit()
                check = start_check(circuit, own, tolerance=0.05, submit=False)
                queue.add(check)
                held.append(check)
                assert list(queue.ready()) == []
            assert not any(check.submitted for check in held)
        finally:
            os.kill(pid, signal.SIGCONT)
        handed = list(queue.rest())  # each held deck sent once the one before it is answered
        assert handed == [first, *held]
        assert [check_json(check.finish()) for check in handed] == [expected] * 4
        assert own.workers_started == 1
