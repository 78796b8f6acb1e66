"""Reading ahead in a forked helper (bridge/ahead.py): the same items, in the same order, as
reading every file in this process; the output of a many-file `check` unchanged by it.

Real forked helpers throughout; where a test needs one to stall or die, it is stopped or killed
with a real signal.
"""

from __future__ import annotations

import errno
import io
import json
import os
import pickle
import pty
import re
import select
import signal
import subprocess
import sys
import threading
import time
from dataclasses import replace
from pathlib import Path

import pytest
from conftest import EXAMPLES

from bridge import ahead
from bridge.ahead import AHEAD_FROM, Preparation, Prepared, Unusable, next_meanwhile, prepare, worth_a_helper
from bridge.cli import main
from bridge.sim.client import NgspiceSession, ngspice_available

LIBRARY_FOUND, LIBRARY_HINT = ngspice_available()
needs_library = pytest.mark.skipif(not LIBRARY_FOUND, reason=LIBRARY_HINT)

BUNDLED = sorted(EXAMPLES.glob("*.cir"))


def mixed_inputs(folder: Path) -> list[str]:
    """Bundled stages twice over, with a bad card, a netlist without a MOSFET and a missing file
    among them."""
    bad = folder / "bad.cir"
    bad.write_text("bad value\nR1 a 0 1.2.3k\n.end\n")
    plain = folder / "no_mosfet.cir"
    plain.write_text("a divider only\nV1 a 0 5\nR1 a b 1k\nR2 b 0 1k\n.op\n.end\n")
    paths = [str(path) for path in BUNDLED]
    return [*paths[:3], str(bad), *paths[3:], str(plain), str(folder / "missing.cir"), *paths]


def test_prepare_gives_the_circuit_and_its_columns_or_the_located_message(tmp_path):
    paths = mixed_inputs(tmp_path)
    ready = prepare(paths[0], None)
    assert isinstance(ready, Prepared) and ready.own.hand.devices and ready.own.level1 is not None
    bad = prepare(str(tmp_path / "bad.cir"), None)
    assert isinstance(bad, Unusable) and bad.rendered.startswith(f"{tmp_path / 'bad.cir'}:2:")
    assert (bad.file, bad.location.line, bad.location.column) == (str(tmp_path / "bad.cir"), 2, 11)
    plain = prepare(str(tmp_path / "no_mosfet.cir"), None)
    assert plain.rendered == (
        f"{tmp_path / 'no_mosfet.cir'}:1:1: the netlist has no MOSFET: biasbridge checks MOSFET bias points"
    )


def test_the_helper_delivers_what_preparing_here_gives_in_the_same_order(tmp_path):
    paths = mixed_inputs(tmp_path)
    here = list(Preparation(paths, None, helper=False))
    preparation = Preparation(paths, None, helper=True)
    assert preparation.helper_pid is not None
    assert list(preparation) == here
    assert preparation.helper_pid is None  # reaped once the last item is out


def test_without_the_working_shown_the_helper_sends_the_same_columns_without_it(tmp_path):
    # `check` without --steps: the hand derivation is never shown, so the helper neither writes
    # it nor pipes it; every number, finding and circuit arrives as prepared here.
    paths = mixed_inputs(tmp_path)
    here = list(Preparation(paths, None, helper=False))
    preparation = Preparation(paths, None, helper=True, working=False)
    assert preparation.helper_pid is not None
    sent = list(preparation)
    assert len(sent) == len(here)
    for item, alone in zip(sent, here):
        if isinstance(alone, Unusable):
            assert item == alone
            continue
        assert item.circuit == alone.circuit
        assert (item.own.with_effect, item.own.level1, item.own.findings) == (
            alone.own.with_effect, alone.own.level1, alone.own.findings)
        hand = alone.own.hand
        assert replace(item.own.hand, steps=hand.steps, assumptions=hand.assumptions) == hand
    # Those from the helper (the first files, at least the first one) have no working; any
    # taken from the back here keep theirs, unwritten until read. Nor do they carry the fields
    # as written, which only lint reads.
    assert tuple(sent[0].own.hand.steps) == () and tuple(sent[0].own.hand.assumptions) == ()
    assert len(here[0].own.hand.steps) > 0
    assert all(not element.written for element in sent[0].circuit.elements)
    assert any(element.written for element in here[0].circuit.elements)


def test_the_pipe_pickles_each_element_without_its_fields_as_written_and_leaves_the_original(tmp_path):
    # The helper's pickler leaves `Element.written` (lint's alone) out of the pickle, not out of
    # the element it pickles; every other field, and all else prepared, arrives unchanged.
    ready = prepare(mixed_inputs(tmp_path)[0], None)
    assert isinstance(ready, Prepared)
    written_before = [dict(element.written) for element in ready.circuit.elements]
    assert any(written_before)
    index, arrived = pickle.loads(ahead.pickled_for_the_pipe((7, ready)))
    assert index == 7 and arrived == ready and arrived.own == ready.own
    for element, original in zip(arrived.circuit.elements, ready.circuit.elements, strict=True):
        assert element.written == {}
        assert vars(element) | {"written": original.written} == vars(original)
    assert [dict(element.written) for element in ready.circuit.elements] == written_before


def test_a_result_larger_than_the_pipe_holds_arrives_whole(tmp_path):
    # A pipe holds 64 KiB (pipe(7)): a larger pickle is read in pieces, as the writer frees room.
    ready = prepare(mixed_inputs(tmp_path)[0], None)
    assert isinstance(ready, Prepared)
    large = Prepared(replace(ready.circuit, title="greenhouse vent fan driver " * 8000), ready.own)
    payload = ahead.pickled_for_the_pipe((3, large))
    assert len(payload) > 1 << 17
    receiving, sending = os.pipe()
    preparation = Preparation([], None, helper=False)
    preparation._from_helper = io.FileIO(receiving, "rb")
    writer = threading.Thread(target=ahead._write_frame, args=(sending, payload))
    writer.start()
    try:
        assert preparation._receive() == (3, large)
    finally:
        writer.join()
        os.close(sending)
        preparation.close()


def test_the_pipe_pickles_each_record_as_pickle_itself_does_but_for_what_it_leaves_out(tmp_path):
    # The pipe reduces every record itself (its class, then its fields): the bytes pickle's own
    # reduction writes, once the fields the pipe leaves out are empty in the item itself.
    for path in mixed_inputs(tmp_path)[:12]:
        item = prepare(path, None)
        if isinstance(item, Prepared):
            circuit = replace(item.circuit, elements=tuple(replace(e, written={}) for e in item.circuit.elements))
            item = Prepared(circuit, item.own)
            bare = Prepared(circuit, replace(item.own, hand=replace(item.own.hand, steps=(), assumptions=())))
            assert ahead.pickled_for_the_pipe((5, item), working=False) == pickle.dumps((5, bare), protocol=5)
        assert ahead.pickled_for_the_pipe((5, item)) == pickle.dumps((5, item), protocol=5)


def test_the_pipe_is_one_stream_cut_every_few_items_and_each_arrives_as_prepared(tmp_path, monkeypatch):
    # Later pickles of a stream refer back to what it sent before (classes, field names), so they
    # are smaller than each item alone; a stream is cut every _STREAM_ITEMS items, on both sides.
    monkeypatch.setattr(ahead, "_STREAM_ITEMS", 4)
    items = [(index, prepare(path, None)) for index, path in enumerate(mixed_inputs(tmp_path))]
    stream, reader = ahead._PipeStream(), ahead._StreamReader()
    pickles = [stream.pickled(item) for item in items]
    assert [reader.unpickled(payload) for payload in pickles] == items
    for index, item in items:
        alone = ahead.pickled_for_the_pipe((index, item))
        if index % 4 == 0:  # the first of a stream
            assert pickles[index] == alone
        elif isinstance(item, Prepared):
            assert len(pickles[index]) < len(alone)
    with pytest.raises(pickle.UnpicklingError):
        ahead._StreamReader().unpickled(pickles[0] + pickles[0])
    # The frame is a file as an Unpickler reads one: large buffers and text lines included.
    odd = (0, (bytearray(b"greenhouse " * 20000), b"vent" * 30000))
    for protocol in (0, pickle.HIGHEST_PROTOCOL):
        assert ahead._StreamReader().unpickled(pickle.dumps(odd, protocol=protocol)) == odd


def test_the_helper_delivers_across_the_cuts_of_its_stream_what_preparing_here_gives(tmp_path, monkeypatch):
    monkeypatch.setattr(ahead, "_STREAM_ITEMS", 3)  # before the fork: the helper cuts where this process does
    paths = mixed_inputs(tmp_path)
    here = list(Preparation(paths, None, helper=False))
    preparation = Preparation(paths, None, helper=True, working=False)
    assert preparation.helper_pid is not None
    sent = list(preparation)
    assert [item.circuit if isinstance(item, Prepared) else item for item in sent] == [
        item.circuit if isinstance(item, Prepared) else item for item in here]
    assert [(item.own.with_effect, item.own.level1, item.own.findings) for item in sent if isinstance(item, Prepared)] \
        == [(item.own.with_effect, item.own.level1, item.own.findings) for item in here if isinstance(item, Prepared)]


# Prepares `paths` with a helper in a fresh process and prints what the tests below ask of it.
_PREPARE_AHEAD = (
    "import gc, json, sys; from bridge.ahead import Preparation; frozen_before = gc.get_freeze_count(); "
    "preparation = Preparation(sys.argv[1:], None, helper=True); "
    "forked = preparation.helper_pid is not None; items = list(preparation); "
    "print(json.dumps({'items': len(items), 'forked': forked, 'multiprocessing': 'multiprocessing' in sys.modules, "
    "'frozen_before': frozen_before, 'frozen_after': gc.get_freeze_count()}))"
)


def _prepared_ahead_in_a_fresh_process(paths: list[str]) -> dict:
    completed = subprocess.run([sys.executable, "-c", _PREPARE_AHEAD, *paths],
                               capture_output=True, text=True, timeout=60, check=True)
    seen = json.loads(completed.stdout.splitlines()[-1])
    assert (seen["items"], seen["forked"]) == (len(paths), True)
    return seen


def test_a_forked_helper_brings_no_multiprocessing(tmp_path):
    # Its pipe is a plain one and the number it shares 8 bytes of a shared mapping: the fork
    # costs no import of multiprocessing (its connections, ctypes behind RawValue).
    assert _prepared_ahead_in_a_fresh_process(mixed_inputs(tmp_path))["multiprocessing"] is False


def test_what_is_alive_when_the_helper_forks_is_out_of_the_cyclic_gcs_reach(tmp_path):
    # gc.freeze right before the fork: neither process's collections write into the objects they
    # share, so the shared pages are not copied (Python's gc documentation, gc.freeze).
    seen = _prepared_ahead_in_a_fresh_process(mixed_inputs(tmp_path))
    assert seen["frozen_before"] == 0 and seen["frozen_after"] > 0


@needs_library
def test_a_many_file_check_shows_each_derivation_with_the_helper_as_without(tmp_path, capsys, monkeypatch):
    # --steps keeps the working on its way through the helper's pipe.
    paths = [str(path) for path in BUNDLED[:AHEAD_FROM]]
    outputs = []
    for load in (0.0, 99.0):  # an idle machine: a helper; a busy one: none
        monkeypatch.setattr(ahead, "busy_elsewhere", lambda beside=(), load=load: load)
        main(["check", "--steps", "--details", *paths])
        outputs.append(capsys.readouterr().out)
    assert outputs[0] == outputs[1]
    assert outputs[0].count("Hand analysis, step by step:") == len(paths)


@needs_library
@pytest.mark.parametrize("view", [[], ["--details"], ["--json"]])
def test_a_many_file_check_shows_each_view_with_the_helper_as_without(tmp_path, capsys, monkeypatch, view):
    # The helper's pipe leaves out what this process never reads (see ahead._LEFT_OUT): the
    # table of rows, the full views and the JSON lines are the same with it as without it.
    monkeypatch.setattr(ahead, "_STREAM_ITEMS", 3)
    paths = [str(path) for path in BUNDLED] + [str(path) for path in BUNDLED[:3]]
    outputs = []
    for load in (0.0, 99.0):  # an idle machine: a helper; a busy one: none
        monkeypatch.setattr(ahead, "busy_elsewhere", lambda beside=(), load=load: load)
        main(["check", *view, *paths])
        outputs.append(capsys.readouterr().out)
    assert outputs[0] == outputs[1]
    assert outputs[0].count(str(BUNDLED[0])) >= 2


def test_while_the_helper_stalls_this_process_takes_the_files_from_the_back(tmp_path):
    paths = mixed_inputs(tmp_path)
    here = list(Preparation(paths, None, helper=False))
    preparation = Preparation(paths, None, helper=True)
    pid = preparation.helper_pid
    os.kill(pid, signal.SIGSTOP)

    def resume_once_all_but_the_first_are_taken() -> None:
        # This process then waits for the helper's first file, the only one left to it.
        for _ in range(6000):
            if preparation.taken_here == len(paths) - 1:
                break
            threading.Event().wait(0.01)
        os.kill(pid, signal.SIGCONT)

    resume = threading.Thread(target=resume_once_all_but_the_first_are_taken)
    resume.start()
    try:
        assert list(preparation) == here
    finally:
        resume.join()
    assert preparation.taken_here == len(paths) - 1


def test_a_helper_killed_midway_leaves_the_rest_to_this_process(tmp_path):
    paths = mixed_inputs(tmp_path)
    here = list(Preparation(paths, None, helper=False))
    preparation = Preparation(paths, None, helper=True)
    items = iter(preparation)
    first = next(items)
    os.kill(preparation.helper_pid, signal.SIGKILL)
    assert [first, *items] == here


@needs_library
def test_the_helper_holds_none_of_the_pipes_to_the_ngspice_worker(tmp_path):
    paths = mixed_inputs(tmp_path)
    with NgspiceSession() as session:
        session.spawn()
        preparation = Preparation(paths, None, helper=True)
        pid = preparation.helper_pid
        assert preparation._helper_has_sent(30)  # it has sent a result: past its start
        os.kill(pid, signal.SIGSTOP)
        try:
            held = {int(fd) for fd in os.listdir(f"/proc/{pid}/fd")} - {0, 1, 2}
            kinds = [os.readlink(f"/proc/{pid}/fd/{fd}") for fd in held]
        finally:
            os.kill(pid, signal.SIGCONT)
        list(preparation)
    # Its own pipe to this process and nothing else but, caught mid-read, the netlist (or a file it
    # includes) that it is reading.
    pipes = [kind for kind in kinds if not kind.startswith("/")]
    assert len(pipes) == 1 and pipes[0].startswith("pipe:"), kinds
    folders = {Path(path).resolve().parent for path in paths}
    assert all(folders & set(Path(kind).resolve().parents) for kind in kinds if kind.startswith("/")), kinds


def test_a_helper_only_pays_from_a_few_files_on():
    assert not worth_a_helper(AHEAD_FROM - 1, cpus=8, load=0.0)
    assert worth_a_helper(AHEAD_FROM, cpus=2, load=0.0)
    assert not worth_a_helper(AHEAD_FROM, cpus=1, load=0.0)


def test_a_helper_needs_a_cpu_the_machine_leaves_idle():
    # One CPU goes to the check itself (this process and the ngspice worker in turn).
    assert worth_a_helper(200, cpus=2, load=0.3)
    assert not worth_a_helper(200, cpus=2, load=1.0)  # another job holds a core
    assert not worth_a_helper(200, cpus=2, load=9.0)
    assert worth_a_helper(200, cpus=8, load=6.0)
    assert not worth_a_helper(200, cpus=8, load=6.5)


def test_the_load_is_read_at_this_instant_not_as_the_minute_average(tmp_path, monkeypatch):
    # A check run right after another sees its predecessor in the 1-minute average (here 9 on 2
    # CPUs) though nothing else runs now: only this process is runnable, so a helper pays.
    loadavg = tmp_path / "loadavg"
    monkeypatch.setattr(ahead, "LOADAVG", str(loadavg))
    loadavg.write_text("9.00 6.10 2.40 1/345 31337\n")
    assert ahead.busy_elsewhere() == 0.0
    assert worth_a_helper(200, cpus=2)
    # Now two others are runnable besides this process (a `yes` holding a core, say): no helper.
    loadavg.write_text("0.10 0.20 0.30 3/345 31337\n")
    assert ahead.busy_elsewhere() == 2.0
    assert not worth_a_helper(200, cpus=2)
    # Without that file (not Linux) the 1-minute average decides, as before.
    monkeypatch.setattr(ahead, "LOADAVG", str(tmp_path / "absent"))
    monkeypatch.setattr(os, "getloadavg", lambda: (1.25, 0.5, 0.25))
    assert ahead.busy_elsewhere() == 1.25


def test_a_running_process_of_the_check_itself_is_not_load(tmp_path, monkeypatch):
    # The ngspice worker starting up beside this process is the check's own: counted out while
    # it runs (state R), and not subtracted once it sleeps.
    loadavg = tmp_path / "loadavg"
    monkeypatch.setattr(ahead, "LOADAVG", str(loadavg))
    loadavg.write_text("0.50 0.40 0.30 3/345 31337\n")
    spinning = subprocess.Popen([sys.executable, "-c", "while True: pass"])
    sleeping = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        deadline = time.monotonic() + 5  # until one spins and the other has got to its sleep
        while (not ahead._running(spinning.pid) or ahead._running(sleeping.pid)) and time.monotonic() < deadline:
            time.sleep(0.01)
        assert ahead._running(spinning.pid)
        assert ahead.busy_elsewhere((spinning.pid,)) == 1.0
        assert not ahead._running(sleeping.pid)
        assert ahead.busy_elsewhere((sleeping.pid,)) == 2.0
    finally:
        for process in (spinning, sleeping):
            process.kill()
            process.wait()
    assert not ahead._running(spinning.pid)  # reaped: gone


@needs_library
def test_a_many_file_check_prints_what_checking_each_file_alone_prints(tmp_path, capsys, monkeypatch):
    paths = mixed_inputs(tmp_path)
    # A machine with an idle CPU (whatever this one's load is now), so that the helper runs.
    monkeypatch.setattr(ahead, "busy_elsewhere", lambda beside=(): 0.0)
    assert worth_a_helper(len(paths)) or len(os.sched_getaffinity(0)) == 1
    alone_out, alone_err = [], []
    for path in paths:
        main(["check", "--json", path])
        captured = capsys.readouterr()
        alone_out.append(captured.out)
        alone_err.append(captured.err)
    status = main(["check", "--json", *paths])
    captured = capsys.readouterr()
    assert status == 2
    assert captured.out == "".join(alone_out)
    assert captured.err == "".join(alone_err)
    # One line per file, in the order given: the unusable ones as {"file", "error"} objects.
    assert [json.loads(line)["file"] for line in captured.out.splitlines()] == paths


DYNAMO_LIGHT = (
    "bicycle dynamo light: NMOS lamp driver, divider bias\nVDD vdd 0 6\nRG1 vdd g 200k\nRG2 g 0 100k\n"
    "RD vdd d 2.2k\nM1 d g 0 0 nch W=20u L=2u\n.model nch nmos (vto=0.9 kp=100u)\n.op\n.end\n"
)


def _open_for_writing(fifo: Path, seconds: float) -> int:
    """`fifo` opened for writing without waiting, as soon as a reader has it open: until then
    the open fails with ENXIO (fifo(7)); on a loaded machine the check's thread may take a while
    to get there."""
    deadline = time.monotonic() + seconds
    while True:
        try:
            return os.open(fifo, os.O_WRONLY | os.O_NONBLOCK)
        except OSError as exc:
            if exc.errno != errno.ENXIO or time.monotonic() > deadline:
                raise
            time.sleep(0.02)


def test_on_a_terminal_a_result_is_not_held_back_while_a_later_netlist_is_slow_to_come(tmp_path):
    # The second netlist is a FIFO that gets its text only once the first file's verdict is on
    # the terminal (a netlist produced by a slow program, as with `<(...)`): before, the first
    # result waited for the second netlist to be read and solved, so it never came.
    first = tmp_path / "lamp.cir"
    first.write_text(DYNAMO_LIGHT)
    later = tmp_path / "later.cir"
    os.mkfifo(later)
    master, slave = pty.openpty()
    env = {**os.environ, "NO_COLOR": "1", "COLUMNS": "200"}
    process = subprocess.Popen(
        [sys.executable, "-m", "bridge", "check", str(first), str(later)],
        stdin=subprocess.DEVNULL, stdout=slave, stderr=slave, env=env,
    )
    os.close(slave)
    output = b""

    def read_until(done, seconds: float) -> bool:
        nonlocal output
        deadline = time.monotonic() + seconds
        while not done() and time.monotonic() < deadline:
            if select.select([master], [], [], 0.1)[0]:
                try:
                    chunk = os.read(master, 65536)
                except OSError:  # the other end is closed: the process is gone
                    return done()
                if not chunk:
                    return done()
                output += chunk
        return done()

    try:
        first_shown = read_until(lambda: f"{first} | ".encode() in output, 20)  # its batch row
        writer = _open_for_writing(later, 20)  # once the check has it open for reading
        with os.fdopen(writer, "w") as fifo:
            fifo.write(DYNAMO_LIGHT.replace("lamp driver", "tail-light driver"))
        read_until(lambda: process.poll() is not None and not select.select([master], [], [], 0.1)[0], 60)
    finally:
        process.kill()
        process.wait()
        os.close(master)
    text = re.sub(r"\x1b\[[0-9;]*m", "", output.decode())  # bold stays on a terminal under NO_COLOR
    assert first_shown, text
    # Both results' rows, in the order given, then the batch's summary line.
    assert text.index(f"{first} | ") < text.index(f"{later} | ") < text.index("2 stages: 2 agree")


def test_next_meanwhile_reports_in_between_while_the_next_item_is_slow():
    # The next item comes only once `meanwhile` has run: taken in this thread, it never would.
    released = threading.Event()
    calls: list[int] = []

    def items():
        assert released.wait(20)
        yield "second netlist"

    def meanwhile() -> None:
        calls.append(1)
        released.set()

    assert next_meanwhile(items(), meanwhile) == "second netlist"
    assert calls
    assert next_meanwhile(iter(()), lambda: None) is None


def test_next_meanwhile_raises_what_taking_the_item_raised():
    def items():
        raise KeyboardInterrupt
        yield

    with pytest.raises(KeyboardInterrupt):
        next_meanwhile(items(), lambda: None)
