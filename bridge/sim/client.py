"""Client of the ngspice worker: one child process started on first use and reused for every deck.

The worker is killed and replaced transparently when it crashes, hangs past a run's timeout, or
tells us that ngspice cannot recover; the failing run raises, the next one gets a fresh process,
so a batch goes on. The client takes SPICE text only: it never looks inside a netlist.

A run can be split in two (``submit`` then ``PendingRun.result``) so that the caller works on
something else while ngspice solves; ``spawn`` starts the worker early for the same reason.
"""

from __future__ import annotations

import contextlib
import functools
import json
import math
import os
import selectors
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
import weakref
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import field
from pathlib import Path
from types import MappingProxyType
from typing import IO, TYPE_CHECKING, Any

from bridge.records import record
from bridge.sim.locate import locate_ngspice
from bridge.sim.worker import run_forked, vector_key

# A plot's vectors are asked for by the same few names over and over (a check asks ~14 a stage):
# each name's key is worked out once (the same function, remembered).
_vector_key = functools.lru_cache(maxsize=1 << 12)(vector_key)

if TYPE_CHECKING:
    import numpy as np

    from bridge.netlist.emit import SpiceDeck

__all__ = [
    "NgspiceSession",
    "PendingRun",
    "SimResult",
    "SimulationFailed",
    "SimulatorCrashed",
    "SimulatorError",
    "SimulatorTimeout",
    "SimulatorUnavailable",
    "ngspice_available",
]

_PACKAGE_ROOT = Path(__file__).resolve().parents[2]  # the directory holding ``bridge/``
# What one read of the worker's answers asks for: a pipe's capacity, 65536 bytes on Linux (pipe(7)),
# more than a read of a pipe can return. os.read makes a buffer of the size asked for: with 1 MiB
# a read of a bench stage's 0.5 KB answer took ~20 µs, with 64 KiB 1.5 µs (and no fewer reads).
_READ_CHUNK = 1 << 16
_CAPTURE_TAIL = 2000  # bytes of the worker's captured output quoted when it dies


class SimulatorError(Exception):
    """Anything that kept ngspice from giving an answer."""


class SimulatorUnavailable(SimulatorError):
    """libngspice is missing or will not load; ``hint`` says how to install it."""

    def __init__(self, hint: str) -> None:
        super().__init__(hint)
        self.hint = hint


class SimulationFailed(SimulatorError):
    """ngspice ran the deck and gave no usable result (``kind``: no_convergence/simulator_error)."""

    def __init__(self, kind: str, message: str, messages: Sequence[str] = ()) -> None:
        super().__init__(f"{kind}: {message}")
        self.kind = kind
        self.message = message
        self.messages = tuple(messages)


class SimulatorCrashed(SimulatorError):
    """The worker process died (or broke the protocol); the next run starts a new one."""

    def __init__(self, message: str, returncode: int | None = None, output: str = "") -> None:
        super().__init__(message)
        self.returncode = returncode
        self.output = output


class SimulatorTimeout(SimulatorError, TimeoutError):
    """The worker did not answer in time and was killed; the next run starts a new one."""

    def __init__(self, message: str, timeout: float) -> None:
        super().__init__(message)
        self.timeout = timeout


@record(frozen=True, eq=False)
class SimResult:
    """The vectors of the plot one analysis made, keyed as the worker names them: float arrays,
    complex ones for an `.ac` plot."""

    plot: str
    vectors: Mapping[str, np.ndarray]
    messages: tuple[str, ...] = field(default=())
    # An operating point's values (a plot of one point), as floats by the same keys: what
    # ``scalar`` reads, without going through `vectors` (see ``_PointArrays``). None for any other plot.
    points: Mapping[str, float] | None = None

    def __getitem__(self, name: str) -> np.ndarray:
        """A vector by name; ``v(out)``, ``out``, ``i(v1)`` and ``v1#branch`` all work."""
        return self.vectors[_vector_key(name)]

    def __contains__(self, name: object) -> bool:
        return isinstance(name, str) and _vector_key(name) in self.vectors

    def scalar(self, name: str) -> float:
        """The single value of a vector of an operating point."""
        if self.points is not None:
            return self.points[_vector_key(name)]
        values = self[name]
        if values.shape != (1,):
            raise ValueError(f"{name} has {values.size} points, not one")
        return float(values[0])

    def scalar_if_any(self, name: str) -> float | None:
        """``scalar(name)`` when the plot has that vector, else None (one lookup for both)."""
        if self.points is not None:
            return self.points.get(_vector_key(name))
        values = self.vectors.get(_vector_key(name))
        if values is None:
            return None
        if values.shape != (1,):
            raise ValueError(f"{name} has {values.size} points, not one")
        return float(values[0])


def ngspice_available(library: str | None = None) -> tuple[bool, str]:
    """Whether libngspice can be found, and one line for the user; never raises."""
    location = locate_ngspice(library)
    return location.found, location.hint


class _Worker:
    """One running worker process and the two pipes to it."""

    def __init__(self, library_path: str, startup_timeout: float, wait: bool = True) -> None:
        capture_fd, self.capture_path = tempfile.mkstemp(prefix="biasbridge-ngspice-", suffix=".log")
        # ngspice writes files of its own into its working folder (BSIM3's parameter check leaves
        # `b3v33check.log`): the worker runs in a private folder, removed with it, never the user's.
        self.workdir = _private_workdir()
        library_path = os.path.abspath(library_path)
        response_read, response_write = os.pipe()
        env = dict(os.environ)
        env["NGSPICE_LIBRARY_PATH"] = library_path
        env["PYTHONPATH"] = os.pathsep.join(
            [str(_PACKAGE_ROOT), *(os.path.abspath(p) for p in env.get("PYTHONPATH", "").split(os.pathsep) if p)]
        )
        command = [
            sys.executable, "-m", "bridge.sim.worker",
            "--response-fd", str(response_write),
            "--capture", self.capture_path,
            "--library", library_path,
        ]
        try:
            if _fork_is_safe(capture_fd, response_read, response_write):
                self.process: subprocess.Popen | _ForkedProcess = _fork_worker(
                    library_path, capture_fd, response_write, self.workdir,
                    {"NGSPICE_LIBRARY_PATH": env["NGSPICE_LIBRARY_PATH"], "PYTHONPATH": env["PYTHONPATH"]})
            else:
                # stdout/stderr go to the capture from the first instruction on (an import error
                # lands there too); the worker then moves its fds 1 and 2 onto the same file.
                self.process = subprocess.Popen(
                    command,
                    stdin=subprocess.PIPE,
                    stdout=capture_fd,
                    stderr=capture_fd,
                    pass_fds=(response_write,),
                    env=env,
                    cwd=self.workdir,
                )
        except BaseException:
            os.close(response_read)
            os.close(capture_fd)
            os.unlink(self.capture_path)
            shutil.rmtree(self.workdir, ignore_errors=True)
            raise
        finally:
            os.close(response_write)
        os.close(capture_fd)
        self._responses = response_read
        self._selector = selectors.DefaultSelector()
        self._selector.register(response_read, selectors.EVENT_READ)
        self._buffer = bytearray()
        self._next_id = 1
        self._finalizer = weakref.finalize(
            self, _reap, self.process, self._selector, response_read, self.capture_path, self.workdir
        )
        self._spawned = time.monotonic()
        self.forked = isinstance(self.process, _ForkedProcess)  # else a fresh interpreter (exec)
        self._startup_timeout = startup_timeout
        self.ready = False  # the handshake has been read
        self.ready_at = math.inf
        if wait:
            self.wait_ready()

    def wait_ready(self) -> None:
        """Read the handshake (once): raises when the worker cannot run ngspice."""
        if self.ready:
            return
        try:
            handshake = self._read_message(self._spawned + self._startup_timeout, self._startup_timeout,
                                           during="start-up")
        except BaseException:
            self.close()
            raise
        self.startup_seconds = time.monotonic() - self._spawned
        if not handshake.get("handshake"):
            self.close()
            raise SimulatorCrashed("ngspice worker sent no handshake")
        if not handshake.get("ok"):
            self.close()
            raise SimulatorUnavailable(str(handshake.get("error") or "ngspice did not start"))
        self.version = str(handshake.get("version"))
        self.forked = handshake.get("forked") is True  # as the worker itself says
        self.banner = tuple(handshake.get("messages") or ())
        self.ready_at = time.monotonic()
        self.ready = True

    @property
    def pid(self) -> int:
        return self.process.pid

    def request(self, deck: str, vectors: Sequence[str] | None, timeout: float) -> dict[str, Any]:
        request_id = self.send(deck, vectors)
        return self.receive(request_id, time.monotonic() + timeout, timeout)

    def send(self, deck: str, vectors: Sequence[str] | None) -> int:
        """Write one request; the answer is read by ``receive``."""
        request_id = self._next_id
        self._next_id += 1
        line = json.dumps({"id": request_id, "deck": deck,
                           "vectors": list(vectors) if vectors is not None else None})
        try:
            assert self.process.stdin is not None
            self.process.stdin.write(line.encode("utf-8") + b"\n")
            self.process.stdin.flush()
        except (BrokenPipeError, OSError) as exc:
            raise self._crashed(f"ngspice worker was gone before the deck was sent ({exc})") from None
        return request_id

    def receive(self, request_id: int, deadline: float, timeout: float) -> dict[str, Any]:
        """The answer to request `request_id`, waiting until `deadline` (time.monotonic)."""
        reply = self._read_message(deadline, timeout, during="a run")
        if reply.get("id") != request_id:
            raise self._crashed(f"ngspice worker answered request {reply.get('id')!r}, "
                                f"expected {request_id}")
        return reply

    def _read_message(self, deadline: float, timeout: float, during: str) -> dict[str, Any]:
        while (end := self._buffer.find(b"\n")) < 0:
            # Past the deadline an answer already waiting in the pipe still counts: the caller
            # may have been busy elsewhere while ngspice answered in time.
            remaining = max(0.0, deadline - time.monotonic())
            if not self._selector.select(remaining):
                self.kill()
                raise SimulatorTimeout(
                    f"ngspice did not answer within {timeout:g} s during {during}; "
                    f"worker {self.pid} killed", timeout)
            chunk = os.read(self._responses, _READ_CHUNK)
            if not chunk:
                raise self._crashed(f"ngspice worker died during {during}")
            self._buffer += chunk
        line = bytes(self._buffer[:end])
        del self._buffer[:end + 1]
        try:
            message = json.loads(line)
        except ValueError:
            raise self._crashed("ngspice worker sent a malformed response") from None
        if not isinstance(message, dict):
            raise self._crashed("ngspice worker sent a malformed response")
        return message

    def answers_waiting(self) -> int | None:
        """The complete messages already sent by the worker (read now, without waiting), or None
        once it has closed its end: reading a message then does not wait either."""
        while self._selector.select(0):
            chunk = os.read(self._responses, _READ_CHUNK)
            if not chunk:
                return None
            self._buffer += chunk
        return self._buffer.count(b"\n")

    def _crashed(self, message: str) -> SimulatorCrashed:
        """Make sure the process is gone and describe how it ended."""
        try:
            returncode = self.process.wait(timeout=1.0)
        except subprocess.TimeoutExpired:
            self.kill()
            returncode = self.process.returncode
        if returncode is not None and returncode < 0:
            try:
                how = f"killed by {signal.Signals(-returncode).name}"
            except ValueError:
                how = f"killed by signal {-returncode}"
        else:
            how = f"exit status {returncode}"
        output = self.captured_output()
        return SimulatorCrashed(f"{message} (pid {self.pid}, {how})", returncode, output)

    def captured_output(self) -> str:
        """The end of what the worker printed on its stdout and stderr."""
        try:
            with open(self.capture_path, "rb") as capture:
                capture.seek(0, os.SEEK_END)
                capture.seek(max(0, capture.tell() - _CAPTURE_TAIL))
                return capture.read().decode("utf-8", "replace")
        except OSError:
            return ""

    def kill(self) -> None:
        if self.process.poll() is None:
            self.process.kill()
        self.process.wait()

    def close(self) -> None:
        self._finalizer()


def _fork_is_safe(*fds: int) -> bool:
    """Whether the worker can be forked from this process rather than exec'd: POSIX, and no
    other thread alive (only the forking thread lives on in the child, so a lock another thread
    holds, a progress bar's say, would stay held there forever). Not on macOS: "the fork start
    method should be considered unsafe as it can lead to crashes of the subprocess" there
    (Python's multiprocessing documentation, 3.8 change note, bpo-33725). The pipes must not sit
    on fds 0-2, which the child moves them onto."""
    return (hasattr(os, "fork") and sys.platform != "darwin" and threading.active_count() == 1
            and threading.current_thread() is threading.main_thread() and min(fds) > 2)


def _fork_worker(library_path: str, capture_fd: int, response_write: int, workdir: str,
                 environment: Mapping[str, str]) -> _ForkedProcess:
    """The worker as a child forked from this process (``worker.run_forked``): it shares the
    interpreter and the modules already imported, numpy among them, instead of starting its
    own. The caller checks ``_fork_is_safe`` first."""
    with contextlib.suppress(ImportError):  # without it, the child's PySpice says so in the handshake
        import numpy  # noqa: F401 - shared with the child; the caller imports it anyway

    request_read, request_write = os.pipe()
    # What this process has buffered is written by it alone: flushed now, and the child never
    # flushes the stream objects it inherits.
    for stream in (sys.stdout, sys.stderr):
        with contextlib.suppress(Exception):
            stream.flush()
    try:
        pid = os.fork()
    except BaseException:
        os.close(request_read)
        os.close(request_write)
        raise
    if pid == 0:  # the worker: never returns into the caller's code
        try:
            run_forked(request_read, response_write, capture_fd, workdir, environment, library_path)
        finally:
            os._exit(1)
    os.close(request_read)
    return _ForkedProcess(pid, open(request_write, "wb"))  # noqa: SIM115 - closed by _reap


class _ForkedProcess:
    """A forked worker, with the part of ``subprocess.Popen`` the client uses (pid, stdin,
    returncode, poll, wait, kill)."""

    def __init__(self, pid: int, stdin: IO[bytes]) -> None:
        self.pid = pid
        self.stdin = stdin
        self.returncode: int | None = None
        self.args = [sys.executable, "-m", "bridge.sim.worker", "(forked)"]  # for TimeoutExpired

    def _reaped(self, flags: int) -> bool:
        try:
            pid, status = os.waitpid(self.pid, flags)
        except ChildProcessError:  # reaped elsewhere (SIGCHLD ignored): its status is lost, as Popen says
            self.returncode = 0
            return True
        if pid == self.pid:
            self.returncode = os.waitstatus_to_exitcode(status)
            return True
        return False

    def poll(self) -> int | None:
        if self.returncode is None:
            self._reaped(os.WNOHANG)
        return self.returncode

    def wait(self, timeout: float | None = None) -> int:
        if timeout is None:
            while self.returncode is None:
                self._reaped(0)
            return self.returncode
        deadline = time.monotonic() + timeout
        delay = 0.0005  # as Popen.wait polls
        while self.poll() is None:
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                raise subprocess.TimeoutExpired(self.args, timeout)
            time.sleep(min(delay, remaining))
            delay = min(delay * 2, 0.05)
        return self.returncode

    def kill(self) -> None:
        if self.poll() is None:
            with contextlib.suppress(ProcessLookupError):
                os.kill(self.pid, signal.SIGKILL)


def _private_workdir() -> str:
    return tempfile.mkdtemp(prefix="biasbridge-ngspice-")


def _reap(process: subprocess.Popen | _ForkedProcess, selector: selectors.BaseSelector, responses: int,
          capture_path: str, workdir: str) -> None:
    """Kill the worker and release what it held (also run when a session is garbage-collected)."""
    if process.poll() is None:
        process.kill()
    process.wait()
    if process.stdin is not None:
        with contextlib.suppress(OSError):
            process.stdin.close()
    selector.close()
    os.close(responses)
    with contextlib.suppress(OSError):
        os.unlink(capture_path)
    shutil.rmtree(workdir, ignore_errors=True)


class PendingRun:
    """A deck sent to the worker; ``result()`` waits for ngspice's answer.

    Made by ``NgspiceSession.submit``. One run is in flight at a time: submitting the next deck
    first reads this one's answer, which ``result()`` then returns (or raises) as usual.
    """

    def __init__(self, session: NgspiceSession, worker: _Worker, request_id: int, timeout: float) -> None:
        self._session = session
        self._worker = worker
        self._request_id = request_id
        self._timeout = timeout
        self._sent = time.monotonic()
        self._reply: dict[str, Any] | None = None
        self._error: BaseException | None = None

    @property
    def done(self) -> bool:
        """Whether the answer (or the failure) has been read."""
        return self._reply is not None or self._error is not None

    @property
    def answered(self) -> bool:
        """Whether ``result()`` would return without waiting for the worker: its answer (or its
        end) has arrived. Never waits itself."""
        with self._session._lock:
            if self.done or self._worker is not self._session._worker:
                return True  # read, or the worker was replaced: result() says so at once
            waiting = self._worker.answers_waiting()
            # A worker still starting sends its handshake first.
            return waiting is None or waiting >= (1 if self._worker.ready else 2)

    def result(self) -> SimResult:
        """The vectors of the plot the deck made; raises as ``NgspiceSession.run`` does."""
        with self._session._lock:
            self._session._collect(self)
        if self._error is not None:
            raise self._error
        assert self._reply is not None
        return _sim_result(self._reply)


def _sim_result(reply: Mapping[str, Any]) -> SimResult:
    import numpy as np  # here, not at import: a session is made (and its worker spawned) first

    messages = tuple(str(message) for message in reply.get("messages") or ())
    if not reply.get("ok"):
        raise SimulationFailed(str(reply.get("kind") or "simulator_error"),
                               str(reply.get("error") or "ngspice failed"), messages)
    vectors = reply.get("vectors") or {}
    points = _single_points(vectors)
    if points is not None:
        return SimResult(plot=str(reply.get("plot")), vectors=_PointArrays(points), messages=messages,
                         points=MappingProxyType(points))
    arrays = {}
    for name, values in vectors.items():
        if isinstance(values, dict):  # an .ac plot's complex vector, in its two parts
            array = np.asarray(values["re"], dtype=float) + 1j * np.asarray(values["im"], dtype=float)
        else:
            array = np.asarray(values, dtype=float)
        array.setflags(write=False)
        arrays[name] = array
    return SimResult(plot=str(reply.get("plot")), vectors=MappingProxyType(arrays), messages=messages)


def _single_points(vectors: Mapping[str, Any]) -> dict[str, float] | None:
    """An operating point's vectors, each one real value (every vector of an `.op` plot): the floats
    the answer holds, by name. None for any other plot."""
    try:
        (single,) = zip(*vectors.values(), strict=True)  # one value each, or ValueError
    except (TypeError, ValueError):
        return None
    if not all(type(value) is float for value in single):
        return None
    return dict(zip(vectors, single))


class _PointArrays(Mapping):
    """An operating point's `vectors`: read-only one-value arrays, made at the first look
    (``_point_arrays``); a check reads the floats (``SimResult.points``) and never makes them."""

    def __init__(self, points: Mapping[str, float]) -> None:
        self._points = points
        self._arrays: dict[str, Any] | None = None

    def __getitem__(self, name: str) -> Any:
        if self._arrays is None:
            import numpy as np

            self._arrays = _point_arrays(self._points, np)
        return self._arrays[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._points)

    def __len__(self) -> int:
        return len(self._points)

    def __contains__(self, name: object) -> bool:
        return name in self._points


def _point_arrays(points: Mapping[str, float], np: Any) -> dict[str, Any]:
    """An operating point's values as read-only one-value views of one array, the same values and
    shapes as one array each (half the time: 6.2 against 10.2 µs for a bench stage's 13 vectors)."""
    flat = np.array(list(points.values()), dtype=float)
    flat.setflags(write=False)
    return {name: flat[index:index + 1] for index, name in enumerate(points)}


class NgspiceSession:
    """ngspice through one reused worker process; use as a context manager.

    ``run`` takes SPICE text with its analysis line and returns the vectors of the plot it made;
    ``submit`` sends it and returns at once, with a ``PendingRun`` to collect the answer from.
    Constructing a session raises ``SimulatorUnavailable`` when libngspice cannot be found; the
    worker itself starts on the first run (or ``version``), or earlier with ``spawn``.
    """

    available = staticmethod(ngspice_available)

    def __init__(self, library: str | None = None, *, startup_timeout: float = 30.0) -> None:
        location = locate_ngspice(library)
        if location.path is None:
            raise SimulatorUnavailable(location.hint)
        self.library_path: str = location.path
        self.startup_timeout = startup_timeout
        self.workers_started = 0  # workers that came up (handshake read)
        self._worker: _Worker | None = None
        self._version: str | None = None
        self._unavailable: str | None = None  # once the library will not load, do not respawn
        self._pending: PendingRun | None = None
        self._lock = threading.Lock()
        self._closed = False

    def __enter__(self) -> NgspiceSession:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    @property
    def version(self) -> str:
        """ngspice's version as the library reports it (e.g. ``"39"``); starts the worker."""
        if self._version is None:
            with self._lock:
                worker = self._worker
                if worker is not None and not worker.ready:
                    self._finish_start(worker)  # a spawned worker: its handshake says it
                else:
                    self._ensure_worker()
        assert self._version is not None
        return self._version

    @property
    def worker_pid(self) -> int | None:
        """The pid of the running worker, or None before the first run and after a failure."""
        worker = self._worker
        return worker.pid if worker is not None else None

    @property
    def worker_forked(self) -> bool | None:
        """Whether the running worker was forked from this process (else exec'd as a fresh
        interpreter), as its handshake says; None until a worker's handshake is read."""
        worker = self._worker
        return worker.forked if worker is not None and worker.ready else None

    @property
    def startup_seconds(self) -> float | None:
        """How long the running worker took from spawn to handshake (None until it is known)."""
        worker = self._worker
        return worker.startup_seconds if worker is not None and worker.ready else None

    def spawn(self) -> None:
        """Start the worker process now and return without waiting for it.

        Its start-up (loading PySpice and libngspice) then runs beside the caller's own work,
        and the first run waits only for what is left of it. Problems are reported by that
        first run, as without ``spawn``. Where it can (``_fork_is_safe``: no other thread
        alive) the worker is forked from this process after numpy is imported here, else it is
        a fresh interpreter (``python -m bridge.sim.worker``).
        """
        with self._lock:
            if self._closed or self._unavailable is not None:
                return
            if self._worker is not None and self._worker.process.poll() is None:
                return
            self._discard_worker()
            try:
                self._worker = _Worker(self.library_path, self.startup_timeout, wait=False)
            except OSError:
                return  # the first run tries again and says why it cannot

    def run(self, deck: SpiceDeck, vectors: Sequence[str] | None = None,
            timeout: float = 10.0) -> SimResult:
        """Simulate one deck; ``vectors`` limits the answer to those names (all when None).

        Only a SpiceDeck made by the emitter is accepted: the user's own text (and with it any
        `.control` block) never reaches ngspice.

        Raises SimulationFailed when ngspice gives no result, SimulatorCrashed/SimulatorTimeout
        when the worker dies or hangs (it is replaced on the next run).
        """
        return self.submit(deck, vectors, timeout).result()

    def submit(self, deck: SpiceDeck, vectors: Sequence[str] | None = None,
               timeout: float = 10.0) -> PendingRun:
        """Send one deck and return at once; ``result()`` on the answer waits for it.

        The same rules and failures as ``run``; ``timeout`` counts from when the worker can take
        the deck. A failure to send raises here, anything later from ``result()``.
        """
        # Imported here: a session is made (and its worker spawned) before the netlist front end loads.
        from bridge.netlist.emit import SpiceDeck

        if not isinstance(deck, SpiceDeck):
            raise TypeError("NgspiceSession.run takes a SpiceDeck from bridge.netlist.emit, not text")
        deck_text = deck.text
        if isinstance(vectors, str):
            vectors = [vectors]
        with self._lock:
            if self._pending is not None:
                self._collect(self._pending)  # its answer is read now and kept for its owner
            worker = self._ensure_worker(ready=False)
            try:
                request_id = worker.send(deck_text, vectors)
            except BaseException as exc:
                if isinstance(exc, SimulatorCrashed) and not worker.ready:
                    self._finish_start(worker)  # a worker that never came up: its handshake says why
                # Gone or Ctrl-C: the worker's state is unknown, so it goes.
                self._discard_worker()
                raise
            pending = PendingRun(self, worker, request_id, timeout)
            self._pending = pending
        return pending

    def close(self) -> None:
        """Kill the worker; the session cannot run after this."""
        with self._lock:
            self._closed = True
            self._discard_worker()

    def _collect(self, pending: PendingRun) -> None:
        """Read the answer to `pending` into it (once); called with the lock held."""
        if pending.done:
            return
        if self._pending is pending:
            self._pending = None
        worker = pending._worker
        if worker is not self._worker:
            pending._error = SimulatorError("the ngspice session is closed" if self._closed
                                            else "the ngspice worker was replaced before it answered")
            return
        try:
            if not worker.ready:
                self._finish_start(worker)
            deadline = max(pending._sent, worker.ready_at) + pending._timeout
            reply = worker.receive(pending._request_id, deadline, pending._timeout)
        except Exception as exc:
            # Crash, timeout, a broken start-up: the worker's state is unknown, so it goes.
            if worker is self._worker:
                self._discard_worker()
            pending._error = exc
            return
        except BaseException:  # Ctrl-C while waiting
            if worker is self._worker:
                self._discard_worker()
            pending._error = SimulatorError("the run was interrupted")
            raise
        if reply.get("retire"):
            self._discard_worker()
        pending._reply = reply

    def _finish_start(self, worker: _Worker) -> None:
        """Read a spawned worker's handshake; it fails as a start-up fails."""
        try:
            worker.wait_ready()
        except SimulatorUnavailable as exc:
            self._worker = None
            self._unavailable = exc.hint
            raise
        except BaseException:
            self._worker = None
            raise
        self.workers_started += 1
        self._version = worker.version

    def _ensure_worker(self, ready: bool = True) -> _Worker:
        """The running worker, started if need be; with `ready` False a spawned one need not
        have finished starting."""
        if self._closed:
            raise SimulatorError("the ngspice session is closed")
        if self._unavailable is not None:
            raise SimulatorUnavailable(self._unavailable)
        worker = self._worker
        if worker is not None and not worker.ready and (ready or worker.process.poll() is not None):
            self._finish_start(worker)
        if self._worker is None or self._worker.process.poll() is not None:
            self._discard_worker()
            try:
                self._worker = _Worker(self.library_path, self.startup_timeout, wait=ready)
            except SimulatorUnavailable as exc:
                self._unavailable = exc.hint
                raise
            if ready:
                self.workers_started += 1
                self._version = self._worker.version
        return self._worker

    def _discard_worker(self) -> None:
        worker, self._worker = self._worker, None
        if worker is not None:
            worker.close()
