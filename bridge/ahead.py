"""Netlists read, and their hand and level-1 columns solved, ahead in a second process.

Most of a many-file `check` goes to work that needs no simulator: reading each netlist and
solving its own columns. With a few files or more and a second CPU, a forked helper does that
for every file in turn and pipes each result back (a `Prepared`, pickled: plain data), while
this process sends decks to ngspice, compares and prints. Data still flows one way: the helper
only produces what the checks consume, and it never talks to ngspice (the pipes to the worker
are closed in it). If the helper dies or its answer cannot be read, the files it has not
delivered are prepared here instead: the output is the same either way, only slower.
"""

from __future__ import annotations

import contextlib
import copyreg
import functools
import gc
import io
import mmap
import os
import pickle
import select
import signal
import threading
from collections.abc import Callable, Iterator, Sequence
from typing import TypeVar

from .analysis.dcsolve import BulkJunctions, OperatingPoint
from .analysis.hand import HandDevice, HandSolution
from .check import NotASingleStage, OwnColumns, solve_own_columns
from .devices.mos1.load import Level1Point, TerminalConductances
from .netlist import Location, NetlistError, read_netlist
from .netlist.circuit import Analysis, Circuit, Directive, Element, ModelCard, Notice, Origin, Parameter, Waveform
from .records import record
from .vocabulary import Expectations, Finding

# Below this many files the fork (a few ms) and the pickling cost more than they save.
AHEAD_FROM = 4


@record(frozen=True)
class Prepared:
    """One netlist ready for its check: the circuit and the columns that need no simulator."""

    circuit: Circuit
    own: OwnColumns


@record(frozen=True)
class Unusable:
    """A netlist that cannot be checked: the file as given, the message and where it points
    (in that file or one it includes), and the located text printed for it."""

    file: str
    message: str
    location: Location
    rendered: str  # ``FILE:LINE:COL: message``, then the line and a caret where that helps

    @classmethod
    def from_error(cls, file: str, exc: NetlistError) -> Unusable:
        return cls(file, exc.message, exc.location, exc.render())


# What the pipe leaves out of the records it pickles, and why: this process never reads it in a
# check, whatever the view (the table, --json, --details; --steps keeps the working). A record
# arrives with these fields made anew by the factory given (empty); a Circuit's lookups never go
# (Circuit.__getstate__).
_LEFT_OUT: dict[type, dict[str, Callable[[], object]]] = {
    # Fields as written (``Element.written``): only lint's rules read them, and equality ignores
    # them. Of a bench stage's `Prepared`, 0.8 of 3.5 KB and a third of the time unpickling it.
    Element: {"written": dict},
}
# Without --steps, the hand working too (``HandSolution.steps``, ``.assumptions``): shown by
# --steps alone, and written when first read, so pickling it wrote it: for the 200 bench stages
# that writing was a third of pickling a `Prepared` and its text 40 % of the 5.9 KB sent (0.21 →
# 0.09 ms a stage pickled, 5.9 → 3.5 KB). Left out by the reduction, nothing is copied or written.
_LEFT_OUT_WITHOUT_STEPS: dict[type, dict[str, Callable[[], object]]] = {
    HandSolution: {"steps": tuple, "assumptions": tuple},
}

# The records a `Prepared` or an `Unusable` is made of, each pickled by its fields alone (see
# ``_pipe_dispatch_table``): frozen dataclasses (state: their fields) and named tuples.
_RECORDS = (
    Prepared, Unusable, Location, OwnColumns, Circuit, Element, Origin, ModelCard, Parameter, Analysis,
    Directive, Notice, Waveform, HandSolution, HandDevice, OperatingPoint, Finding,
)
_NAMED_TUPLES = (Level1Point, TerminalConductances, BulkJunctions)


def _by_fields(record: object) -> tuple[object, ...]:
    """pickle's own reduction of a plain frozen dataclass (its class, then its fields as state),
    made here without pickle's generic search for a reduction (``__reduce_ex__``, then
    ``__getnewargs_ex__``, ``__getnewargs__``, ``__getstate__``): the same bytes, ~20 % less CPU."""
    return copyreg.__newobj__, (type(record),), record.__dict__


def _by_state(record: object) -> tuple[object, ...]:
    """As ``_by_fields``, for a record with its own ``__getstate__`` (a Circuit: its fields alone)."""
    return copyreg.__newobj__, (type(record),), record.__getstate__()  # type: ignore[attr-defined]


def _by_values(record: tuple) -> tuple[object, ...]:
    """pickle's own reduction of a named tuple (its class and its values), made directly."""
    return copyreg.__newobj__, (type(record), *record)


def _pipe_dispatch_table(working: bool) -> dict[type, Callable[..., tuple[object, ...]]]:
    """The reductions of the helper's pickler: every record by its fields (the same bytes as pickle's
    own), less what `_LEFT_OUT` (and, without the working shown, `_LEFT_OUT_WITHOUT_STEPS`) names."""
    table: dict[type, Callable[..., tuple[object, ...]]] = dict(copyreg.dispatch_table)
    for cls in _RECORDS:
        table[cls] = _by_state if "__getstate__" in vars(cls) else _by_fields
    for cls in _NAMED_TUPLES:
        table[cls] = _by_values
    for cls, left_out in (_LEFT_OUT if working else {**_LEFT_OUT, **_LEFT_OUT_WITHOUT_STEPS}).items():
        table[cls] = functools.partial(_leaving_out, left_out, table[cls])
    return table


def _leaving_out(left_out: dict[str, Callable[[], object]], reduction: Callable[..., tuple[object, ...]],
                 record: object) -> tuple[object, ...]:
    """`reduction`'s of `record`, with the fields of `left_out` made anew by their factories (the
    record itself unchanged: its state is copied)."""
    cls, args, state = reduction(record)
    state = state.copy()
    for name, empty in left_out.items():
        state[name] = empty()
    return cls, args, state


def _pipe_pickler(file: io.BytesIO, working: bool = True) -> pickle.Pickler:
    pickler = pickle.Pickler(file, protocol=pickle.HIGHEST_PROTOCOL)
    pickler.dispatch_table = _pipe_dispatch_table(working)
    return pickler


def pickled_for_the_pipe(item: tuple[int, Prepared | Unusable], working: bool = True) -> bytes:
    """`item` (an index and what was prepared) as the helper sends it first in a stream (see
    ``_PipeStream``); ``pickle.loads`` reads it."""
    buffer = io.BytesIO()
    _pipe_pickler(buffer, working).dump(item)
    return buffer.getvalue()


# The helper's results are one pickle stream of up to this many items: one Pickler there and one
# Unpickler here for all of them, both made anew every `_STREAM_ITEMS` items (see ``_PipeStream``).
_STREAM_ITEMS = 32


class _PipeStream:
    """The helper's side of the pipe: its results pickled as one stream, each item one frame's
    pickle (``_write_frame``), read here by ``_StreamReader``.

    A stream's pickler keeps what it has pickled in its memo: an object met again later in the
    stream goes as a reference to it, and the classes of the records and the names of their
    fields, the same in every item, are written (and read here) once per stream instead of once
    per item. Over the 200 bench stages and tests/batch_corpus the later items refer back only to
    immutable objects (strings, classes, the empty frozenset; with the working, numpy's float64
    dtype and scalar constructor): no other object is shared between two netlists' results, and
    anything the helper shared would arrive shared as it is when this process prepares them.
    Both memos hold what went through them (nothing sent is freed, so no object's id is reused,
    and nothing sent is changed: frozen records); to bound that, a stream is cut every
    `_STREAM_ITEMS` items. A pickle that fails ends the helper (the memos would no longer match)."""

    def __init__(self, working: bool = True) -> None:
        self._buffer = io.BytesIO()
        self._working = working  # False: the hand working left out (``_LEFT_OUT_WITHOUT_STEPS``)
        self._pickler: pickle.Pickler | None = None
        self._sent = 0

    def pickled(self, item: tuple[int, Prepared | Unusable]) -> bytes:
        """`item`'s pickle, the next of the stream."""
        if self._sent % _STREAM_ITEMS == 0:
            self._pickler = _pipe_pickler(self._buffer, self._working)
        assert self._pickler is not None
        self._buffer.seek(0)
        self._buffer.truncate()
        self._pickler.dump(item)
        self._sent += 1
        return self._buffer.getvalue()


class _StreamReader:
    """This process's side of ``_PipeStream``: each frame's pickle read by the stream's Unpickler
    (whose memo holds the stream so far), made anew where the helper's pickler was."""

    def __init__(self) -> None:
        self._frame = _Frame()
        self._unpickler: pickle.Unpickler | None = None
        self._received = 0

    def unpickled(self, payload: bytes) -> object:
        if self._received % _STREAM_ITEMS == 0:
            self._unpickler = pickle.Unpickler(self._frame)
        assert self._unpickler is not None
        self._frame.hold(payload)
        self._received += 1
        item = self._unpickler.load()
        if not self._frame.read_to_end():
            raise pickle.UnpicklingError("a frame holds more than one pickle")
        return item


class _Frame:
    """One frame's bytes as a file for an Unpickler (which reads a file only: ``read``,
    ``readinto`` and ``readline``, as io.BufferedIOBase has them)."""

    def __init__(self) -> None:
        self._data = b""
        self._at = 0

    def hold(self, data: bytes) -> None:
        self._data, self._at = data, 0

    def read_to_end(self) -> bool:
        return self._at == len(self._data)

    def read(self, size: int = -1) -> bytes:
        start = self._at
        self._at = len(self._data) if size < 0 else min(start + size, len(self._data))
        return self._data[start:self._at]

    def readinto(self, buffer: bytearray | memoryview) -> int:
        view = memoryview(buffer).cast("B")
        data = self.read(len(view))
        view[:len(data)] = data
        return len(data)

    def readline(self) -> bytes:
        start = self._at
        self._at = self._data.find(b"\n", start) + 1 or len(self._data)
        return self._data[start:self._at]


# A frame on the pipe: the length of the pickle that follows, then the pickle.
_LENGTH_BYTES = 8


def _write_frame(fd: int, payload: bytes) -> None:
    data = memoryview(len(payload).to_bytes(_LENGTH_BYTES, "little") + payload)
    while data:
        data = data[os.write(fd, data):]


def _read_exactly(file: io.FileIO, size: int) -> bytes | None:
    """`size` bytes from `file`, or None when it ends first."""
    chunks = []
    while size:
        chunk = file.read(size)
        if not chunk:
            return None
        chunks.append(chunk)
        size -= len(chunk)
    return b"".join(chunks)


def prepare(path: str, expectations: Expectations | None) -> Prepared | Unusable:
    """Read `path` and solve its own columns; a netlist that cannot be checked gives its
    located message (``FILE:LINE:COL: ...``) instead."""
    try:
        circuit = read_netlist(path)
        if expectations is not None:
            from .expect import check_against_circuit  # with its TOML reader: only for --expect

            check_against_circuit(expectations, set(circuit.nodes()), {e.name.lower() for e in circuit.elements})
        return Prepared(circuit, solve_own_columns(circuit))
    except NetlistError as exc:
        return Unusable.from_error(path, exc)
    except NotASingleStage as exc:
        return Unusable.from_error(path, NetlistError(str(exc), Location(path, 1, 1)))


def worth_a_helper(
    count: int, *, cpus: int | None = None, load: float | None = None, beside: Sequence[int] = (),
) -> bool:
    """Whether `count` files are worth a second process on this machine (`cpus`, and `load`, what
    the machine runs besides this check, are this machine's unless given; `beside`: the pids of
    this check's own other processes, the ngspice worker starting up, see ``busy_elsewhere``).

    The check itself keeps one CPU busy (this process and the ngspice worker take turns), and the
    helper takes another and costs CPU of its own (the fork, pickling, a file both took). So a
    helper is forked only where a CPU is idle besides the check's, with half a CPU to spare:
    load < cpus - 1.5; on a busy machine what it gains is CPU the other jobs would have had.
    Measured earlier with `check --json` of the 200 bench stages on 2 CPUs at load 9: with the
    helper 2.05 s CPU and 5.3 s wall, without 1.82 s and 5.0 s (medians of 4, alternating; see
    DEVELOPERS.md, Speed notes).

    The load is read at this instant (``busy_elsewhere``), not as the 1-minute load average: that
    average counts this check's own previous runs, so on 2 CPUs a bench or a CI job running checks
    back to back never got a helper, even alone on the machine. Measured on 2 CPUs shared with
    other jobs (an idle machine could not be had), the same command with the helper forced on and
    off, alternating, medians, the readings as the check saw them where it asks (runnable tasks:
    this process and its worker among them):

        machine                          wall on / off   CPU on / off    1-min load  runnable
        other jobs (5 runs each)         3.82 / 4.13 s   1.90 / 1.85 s   4.2-5.5     5-8
        and `yes` holding a core (3, 4)  6.19 / 7.79 s   1.89 / 1.77 s   6.6-7.3     4-11
        fewer other jobs (4 runs each)   1.52 / 1.74 s   1.11 / 1.16 s   2.6-2.9     4-5

    At load 7.4, 500 readings 2 ms apart counted 5-8 runnable tasks, never 2 or fewer: the
    instant's count sees a loaded machine as the average does, and says no helper on all three.
    """
    if count < AHEAD_FROM or not hasattr(os, "fork"):
        return False
    if cpus is None:
        try:
            cpus = len(os.sched_getaffinity(0))
        except AttributeError:  # not on every platform
            cpus = os.cpu_count() or 1
    if load is None:
        load = busy_elsewhere(beside)
    return cpus > 1 and load < cpus - 1.5


LOADAVG = "/proc/loadavg"  # Linux, proc(5)


def busy_elsewhere(beside: Sequence[int] = ()) -> float:
    """What the machine runs now besides this check: the runnable tasks that `LOADAVG` counts at
    this instant (the first number of its 4th field, proc(5)), less this process and those of
    `beside` that are running (state R in /proc/PID/stat). Where that file cannot be read, the
    1-minute load average (which counts this check's earlier runs too); else 0, the CPUs decide."""
    try:
        with open(LOADAVG, encoding="ascii") as file:
            runnable = int(file.read().split()[3].split("/")[0])
    except (OSError, IndexError, ValueError):
        try:
            return os.getloadavg()[0]
        except (AttributeError, OSError):  # no load average here
            return 0.0
    return float(max(0, runnable - 1 - sum(_running(pid) for pid in beside)))


def _running(pid: int) -> bool:
    """Whether process `pid` is runnable now (its state in /proc/PID/stat, after the name)."""
    try:
        with open(f"/proc/{pid}/stat", "rb") as file:
            return file.read().rpartition(b")")[2].split()[0] == b"R"
    except (OSError, IndexError):
        return False


class Preparation:
    """The files of `paths` prepared in order, helped by a forked process when `helper` is true.

    The helper takes the files from the front, one after the other; whenever its next result is
    not in yet, this process takes one from the back itself (so both CPUs stay busy whatever
    the share of simulating and printing) and keeps it until its turn. The one number they share
    is where this process's part begins: written only here, read by the helper before each file.
    A file both took (the helper had read the number just before it moved) is used from here.

    Iterate once. The helper is forked at construction: before the caller starts any thread (a
    progress bar's, say), since only the forking thread lives on in the child. With `working`
    False (no view will show the hand derivation: `check` without --steps) the helper sends each
    hand solution without its working (see ``_LEFT_OUT_WITHOUT_STEPS``).
    """

    def __init__(
        self, paths: Sequence[str], expectations: Expectations | None, *, helper: bool, working: bool = True,
    ) -> None:
        self.paths = list(paths)
        self.expectations = expectations
        self.working = working
        self.helper_pid: int | None = None
        self.taken_here = 0  # files this process prepared while the helper was busy
        self._from_helper: io.FileIO | None = None  # the read end of the helper's pipe (unbuffered)
        self._back = len(self.paths)  # from here on, the files are this process's
        self._shared_memory: mmap.mmap | None = None  # shared with the helper, once forked
        self._shared_back: memoryview | None = None  # `_back` as the helper reads it: [0]
        self._kept: dict[int, Prepared | Unusable] = {}
        self._stream = _StreamReader()  # the helper's pickles, read in the order they come
        self._next = 0  # the index of the next item the iteration hands out
        if helper and len(self.paths) > 1:
            self._fork()

    def __iter__(self) -> Iterator[Prepared | Unusable]:
        try:
            for index in range(len(self.paths)):
                self._next = index
                yield self._item(index)
            self._next = len(self.paths)
        finally:
            self.close()

    def at_hand(self) -> bool:
        """Whether the next item comes without a file prepared here or a wait for the helper
        (so without a wait that a slow netlist could make long)."""
        index = self._next
        if index >= len(self.paths) or index >= self._back:
            return True
        return self._from_helper is not None and self._helper_has_sent()

    def _helper_has_sent(self, timeout: float = 0.0) -> bool:
        """Whether the helper's pipe has something to read (a result, or its end), waiting up to
        `timeout` seconds for it."""
        assert self._from_helper is not None
        return bool(select.select([self._from_helper], [], [], timeout)[0])

    def close(self) -> None:
        """Stop the helper (if it still runs) and reap it."""
        if self._from_helper is not None:
            self._from_helper.close()
            self._from_helper = None
        if self.helper_pid is not None:
            with contextlib.suppress(ProcessLookupError):
                os.kill(self.helper_pid, signal.SIGKILL)
            with contextlib.suppress(ChildProcessError):
                os.waitpid(self.helper_pid, 0)
            self.helper_pid = None
        if self._shared_memory is not None:
            assert self._shared_back is not None
            self._shared_back.release()
            self._shared_memory.close()
            self._shared_memory = self._shared_back = None

    def _item(self, index: int) -> Prepared | Unusable:
        while index < self._back and self._from_helper is not None:
            if not self._helper_has_sent() and self._back - 1 > index:
                self._take_from_back()  # the helper is on `index`: the last free file is done here
                continue
            received = self._receive()
            if received is not None and received[0] == index:
                return received[1]
        if index >= self._back:
            return self._kept.pop(index)
        return prepare(self.paths[index], self.expectations)  # no helper (any more)

    def _take_from_back(self) -> None:
        assert self._shared_back is not None
        self._back -= 1
        self._shared_back[0] = self._back
        self._kept[self._back] = prepare(self.paths[self._back], self.expectations)
        self.taken_here += 1

    def _receive(self) -> tuple[int, Prepared | Unusable] | None:
        """The helper's next (index, item), or None when the helper is gone (then stopped)."""
        assert self._from_helper is not None
        try:
            header = _read_exactly(self._from_helper, _LENGTH_BYTES)
            payload = _read_exactly(self._from_helper, int.from_bytes(header, "little")) if header else None
            if payload is None:
                raise EOFError("the helper is gone")
            index, item = self._stream.unpickled(payload)  # type: ignore[misc]
            if not isinstance(index, int) or not isinstance(item, (Prepared, Unusable)):
                raise TypeError(type(item).__name__)
        except Exception:  # gone (EOFError, OSError) or an answer that cannot be read
            self.close()
            return None
        return index, item

    def _fork(self) -> None:
        # lark is not loaded here for both: most cards read without it (parser.plain_card), and a
        # process that meets a card needing it loads it then. The one shared number is 8 bytes of
        # an anonymous shared mapping, written in one store (as multiprocessing's RawValue is, but
        # without importing multiprocessing and ctypes: ~8 ms); results come through a plain pipe.
        self._shared_memory = mmap.mmap(-1, 8, flags=mmap.MAP_SHARED)
        self._shared_back = memoryview(self._shared_memory).cast("q")
        self._shared_back[0] = self._back
        receiving, sending = os.pipe()
        # Everything alive now is moved out of the cyclic GC's reach (gc.freeze, as Python's gc
        # documentation advises right before a fork without exec): neither process's collections
        # then write into the objects both share, so their pages are not copied on write. The
        # 200 bench stages, helper forked, alternating with and without (17 rounds, load 1–1.5):
        # CPU 0.724 → 0.680 s, wall 0.470 → 0.458 s; 13 rounds earlier 0.536 → 0.519, 0.346 → 0.327.
        gc.freeze()
        try:
            pid = os.fork()
        except BaseException:
            os.close(receiving)
            os.close(sending)
            raise
        if pid == 0:  # the helper
            code = 1
            try:
                # Every other descriptor goes, the pipes to the ngspice worker among them: the
                # helper never simulates, and the worker must see its client alone.
                os.closerange(3, sending)
                os.closerange(sending + 1, os.sysconf("SC_OPEN_MAX"))
                shared_back = self._shared_back
                stream = _PipeStream(self.working)
                index = 0
                while index < shared_back[0]:
                    item = prepare(self.paths[index], self.expectations)
                    _write_frame(sending, stream.pickled((index, item)))
                    index += 1
                code = 0
            except BaseException:  # noqa: BLE001 - the parent prepares what was not sent
                pass
            finally:
                os._exit(code)  # no atexit handlers, no flushing of buffers the parent owns
        os.close(sending)
        self.helper_pid = pid
        # Unbuffered, so that `select` sees every byte not yet read; closed with its object.
        self._from_helper = io.FileIO(receiving, "rb")


T = TypeVar("T")


def next_meanwhile(items: Iterator[T], meanwhile: Callable[[], None], every: float = 0.01) -> T | None:
    """The next of `items` (None at the end), taken in a thread of its own while this thread runs
    `meanwhile` every `every` seconds: so that what is ready is reported while a slow netlist is
    read or solved. Only the thread taken from `items` may touch what it uses meanwhile; an
    exception it raises is raised here."""
    taken: list[T | None] = []
    failed: list[BaseException] = []

    def take() -> None:
        try:
            taken.append(next(items, None))
        except BaseException as exc:  # noqa: BLE001 - raised again in the caller's thread
            failed.append(exc)

    # A daemon: an interrupted check does not wait at exit for a netlist still being read.
    thread = threading.Thread(target=take, name="biasbridge-prepare", daemon=True)
    thread.start()
    while thread.is_alive():
        meanwhile()
        thread.join(every)
    if failed:
        raise failed[0]
    return taken[0]
