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
import os
import signal
import threading
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, TypeVar

from .check import NotASingleStage, OwnColumns, solve_own_columns
from .netlist import Location, NetlistError, read_netlist
from .netlist.circuit import Circuit
from .vocabulary import Expectations

# multiprocessing (its connections, and the shared memory behind RawValue) is imported when a
# helper is forked: a check without one does not pay for it.
if TYPE_CHECKING:
    from multiprocessing.connection import Connection

# Below this many files the fork (a few ms) and the pickling cost more than they save.
AHEAD_FROM = 4


@dataclass(frozen=True)
class Prepared:
    """One netlist ready for its check: the circuit and the columns that need no simulator."""

    circuit: Circuit
    own: OwnColumns


@dataclass(frozen=True)
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


def worth_a_helper(count: int, *, cpus: int | None = None, load: float | None = None) -> bool:
    """Whether `count` files are worth a second process on this machine (`cpus` and `load`, the
    load average of the last minute, are this machine's unless given).

    The helper wins wall time only on a CPU nothing else wants: the check itself keeps one busy
    (this process and the ngspice worker take turns), and the helper costs CPU of its own (the
    fork, pickling, a file both took). So a helper needs a CPU idle besides that one, with half a
    CPU to spare: load < cpus - 1.5. Measured with `check --json` of the 200 bench stages on 2
    CPUs at load 9: with the helper 2.05 s CPU and 5.3 s wall, without 1.82 s and 5.0 s (medians
    of 4, alternating; see DEVELOPERS.md, Speed notes).
    """
    if count < AHEAD_FROM or not hasattr(os, "fork"):
        return False
    if cpus is None:
        try:
            cpus = len(os.sched_getaffinity(0))
        except AttributeError:  # not on every platform
            cpus = os.cpu_count() or 1
    if load is None:
        try:
            load = os.getloadavg()[0]
        except (AttributeError, OSError):  # no load average here: the CPUs alone decide
            load = 0.0
    return cpus > 1 and load < cpus - 1.5


class Preparation:
    """The files of `paths` prepared in order, helped by a forked process when `helper` is true.

    The helper takes the files from the front, one after the other; whenever its next result is
    not in yet, this process takes one from the back itself (so both CPUs stay busy whatever
    the share of simulating and printing) and keeps it until its turn. The one number they share
    is where this process's part begins: written only here, read by the helper before each file.
    A file both took (the helper had read the number just before it moved) is used from here.

    Iterate once. The helper is forked at construction: before the caller starts any thread (a
    progress bar's, say), since only the forking thread lives on in the child.
    """

    def __init__(self, paths: Sequence[str], expectations: Expectations | None, *, helper: bool) -> None:
        self.paths = list(paths)
        self.expectations = expectations
        self.helper_pid: int | None = None
        self.taken_here = 0  # files this process prepared while the helper was busy
        self._from_helper: Connection | None = None
        self._back = len(self.paths)  # from here on, the files are this process's
        self._shared_back: Any = None  # `_back` as the helper reads it (a RawValue), once forked
        self._kept: dict[int, Prepared | Unusable] = {}
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
        return self._from_helper is not None and self._from_helper.poll()

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

    def _item(self, index: int) -> Prepared | Unusable:
        while index < self._back and self._from_helper is not None:
            if not self._from_helper.poll() and self._back - 1 > index:
                self._take_from_back()  # the helper is on `index`: the last free file is done here
                continue
            received = self._receive()
            if received is not None and received[0] == index:
                return received[1]
        if index >= self._back:
            return self._kept.pop(index)
        return prepare(self.paths[index], self.expectations)  # no helper (any more)

    def _take_from_back(self) -> None:
        self._back -= 1
        self._shared_back.value = self._back
        self._kept[self._back] = prepare(self.paths[self._back], self.expectations)
        self.taken_here += 1

    def _receive(self) -> tuple[int, Prepared | Unusable] | None:
        """The helper's next (index, item), or None when the helper is gone (then stopped)."""
        assert self._from_helper is not None
        try:
            received = self._from_helper.recv()
            index, item = received
            if not isinstance(index, int) or not isinstance(item, (Prepared, Unusable)):
                raise TypeError(type(item).__name__)
        except Exception:  # gone (EOFError, OSError) or an answer that cannot be read
            self.close()
            return None
        return index, item

    def _fork(self) -> None:
        from multiprocessing import Pipe, RawValue

        # lark is not loaded here for both: most cards read without it (parser.plain_card), and a
        # process that meets a card needing it loads it then.
        self._shared_back = RawValue("l", self._back)
        receiving, sending = Pipe(duplex=False)
        pid = os.fork()
        if pid == 0:  # the helper
            code = 1
            try:
                receiving.close()
                keep = sending.fileno()
                # Every other descriptor goes, the pipes to the ngspice worker among them: the
                # helper never simulates, and the worker must see its client alone.
                os.closerange(3, keep)
                os.closerange(keep + 1, os.sysconf("SC_OPEN_MAX"))
                index = 0
                while index < self._shared_back.value:
                    sending.send((index, prepare(self.paths[index], self.expectations)))
                    index += 1
                code = 0
            except BaseException:  # noqa: BLE001 - the parent prepares what was not sent
                pass
            finally:
                os._exit(code)  # no atexit handlers, no flushing of buffers the parent owns
        sending.close()
        self.helper_pid = pid
        self._from_helper = receiving


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
