"""The ngspice worker: one child process holding one libngspice, reused for many decks.

Run as ``python -m bridge.sim.worker [--response-fd N] [--capture PATH] [--library PATH]``, or
forked from the client (``run_forked``), which then serves the same protocol.

Protocol, JSON Lines both ways:
- requests on stdin: ``{"id": n, "deck": text with its analysis line, "vectors": [names] | null}``
- responses on the response fd (never stdout: PySpice and ngspice chatter there): first a
  handshake ``{"handshake": true, "ok", "version", "library", "pid", "messages", "error", "forked"}``
  (``forked``: started by ``run_forked``, not as a fresh interpreter), then
  one ``{"id", "ok", "plot", "vectors": {name: [floats]}, "messages", "error", "kind", "retire"}``
  per request. ``kind`` is null, ``"no_convergence"`` or ``"simulator_error"``; ``retire`` true
  means ngspice asked to be unloaded (it cannot recover) and this process exits after answering.

Vector names are lower case; node voltages are keyed by the node name (ngspice's ``V(1)`` for a
numeric node becomes ``1``), branch currents as ``v1#branch``, device quantities as ``@m1[id]``.
"""

from __future__ import annotations

import argparse
import contextlib
import functools
import gc
import json
import os
import re
import signal
import sys
from collections.abc import Mapping
from typing import IO, Any, NoReturn

NO_CONVERGENCE = "no_convergence"
SIMULATOR_ERROR = "simulator_error"

_VOLTAGE_FORM = re.compile(r"^v\(([^,()]+)\)$")
_CURRENT_FORM = re.compile(r"^i\(([^,()]+)\)$")


def vector_key(name: str) -> str:
    """The key a vector has in a response: lower case, ``v(n)`` → ``n``, ``i(v1)`` → ``v1#branch``."""
    key = name.strip().lower()
    if match := _VOLTAGE_FORM.match(key):
        return match.group(1)
    if match := _CURRENT_FORM.match(key):
        return f"{match.group(1)}#branch"
    return key


# The keys of the names a plot holds, worked out once per name: deck after deck ngspice names the
# same vectors (`@m1[id]`, `vdd#branch`, the nodes), 14 of them for a bench stage's `.op`.
_plot_vector_key = functools.lru_cache(maxsize=1 << 12)(vector_key)


# --- which of ngspice's messages matter --------------------------------------------------------

# Progress fragments that ngspice prints without a newline in front of the message that matters.
_PROGRESS = re.compile(r"Trying gmin\s*=\s*\S+\s*|Supplies reduced to\s*\S+\s*%\s*")
_NOISE = re.compile(
    r"^(Note: One successful (gmin|source) step|Warning: Further gmin increment"
    r"|Note: No compatibility mode selected|Circuit: |Doing analysis at TEMP"
    r"|No\. of Data Rows|Reference value|Note: Transient op finished successfully)"
)
# stdout carries tables and banners; keep only its lines that say something went wrong.
_STDOUT_NOTABLE = re.compile(
    r"error|warning|singular|converg|timestep|fail|abort|can't|cannot|could not|unable"
    r"|undefined|unknown|not found",
    re.IGNORECASE,
)
_NO_CONVERGENCE = re.compile(
    r"timestep too small|converg|singular matrix|gmin stepping failed|source stepping failed"
    r"|DC solution failed|iteration limit|too many iterations",
    re.IGNORECASE,
)
_ABORTED = re.compile(r"simulation\(s\) aborted|simulation not started|circuit not parsed"
                      r"|cannot recover", re.IGNORECASE)
_ERROR_LINE = re.compile(r"error|fail|cannot|could not|unable|undefined|unknown", re.IGNORECASE)


def notable_messages(raw: list[str]) -> list[str]:
    """ngspice's callback lines reduced to those a finding can be made of, each once, in order.

    A line that follows one ending in ':' is its detail (``Error on line 3 ...:`` then the
    offending line) and is kept even when it was seen before.
    """
    kept: list[str] = []
    seen: set[str] = set()
    for line in raw:
        stream, _, text = line.partition(" ")
        text = _PROGRESS.sub("", text).strip()
        if not text or _NOISE.match(text):
            continue
        if stream != "stderr" and not _STDOUT_NOTABLE.search(text):
            continue
        is_detail = bool(kept) and kept[-1].endswith(":")
        if text in seen and not is_detail:
            continue
        seen.add(text)
        kept.append(text)
    return kept


def classify_failure(messages: list[str]) -> str:
    """A failed analysis is a convergence problem when ngspice says so, else a simulator error."""
    if any(_NO_CONVERGENCE.search(message) for message in messages):
        return NO_CONVERGENCE
    return SIMULATOR_ERROR


_ADVISORY = re.compile(r"^(warning|note)\b", re.IGNORECASE)


def summarise_error(messages: list[str], fallback: str) -> str:
    """One line for a failure: the first error (not a warning or note) with its detail lines."""
    groups: list[str] = []
    index = 0
    while index < len(messages):
        parts = [messages[index]]
        index += 1
        if parts[0].endswith(":"):
            detail = messages[index:index + 2]
            index += len(detail)
            parts = [f"{parts[0]} {'; '.join(detail)}"] if detail else parts
        groups.append(parts[0])
    for group in groups:
        if not _ADVISORY.match(group) and _ERROR_LINE.search(group):
            return group
    return fallback


def _ensure_end(deck: str) -> str:
    """ngspice silently ignores a deck without ``.end``; add it when the caller left it out."""
    lines = [line for line in deck.replace("\r\n", "\n").split("\n") if line.strip()]
    if not lines or lines[-1].strip().lower() != ".end":
        lines.append(".end")
    return "\n".join(lines) + "\n"


# --- the simulator ---------------------------------------------------------------------------


class Simulator:
    """libngspice behind PySpice's shared-mode wrapper, reset between decks."""

    def __init__(self, library_path: str) -> None:
        os.environ["NGSPICE_LIBRARY_PATH"] = library_path
        import logging

        # PySpice logs ("Unsupported Ngspice version", "Unit is None ...") would only land in
        # the capture; silencing them saves the formatting.
        logging.getLogger("PySpice").setLevel(logging.CRITICAL + 1)
        from .binding import shared_module

        shared = shared_module()  # PySpice's own module, its C declarations loaded ahead

        # PySpice signals every failure as NameError or a subclass of it (NgSpiceCommandError,
        # NgSpiceCircuitError), including the return codes of the library calls.
        self._errors: tuple[type[Exception], ...] = (NameError,)

        class _Library(shared.NgSpiceShared):
            """Collects every line ngspice prints and notices its 'controlled exit'."""

            def send_char(self, message: str, ngspice_id: int) -> int:
                raw_lines.append(message)
                return 0

            @staticmethod
            def _exit(exit_status, immediate_unloading, quit_exit, ngspice_id, user_data):
                exits.append(exit_status)
                return exit_status

        raw_lines: list[str] = []
        exits: list[int] = []
        self._raw = raw_lines
        self._exits = exits
        # Whether ngspice holds no circuit and no plot but its `const`: so after start-up and after
        # each deck's `remcirc` and `destroy all`; a deck that finds it so needs no `destroy all`.
        self._cleared = True
        # PySpice formats the path with str.format(); keep braces in a path literal.
        _Library.LIBRARY_PATH = library_path.replace("{", "{{").replace("}", "}}")
        self._ngspice = _Library(ngspice_id=0, send_data=False)
        self.library_path = library_path
        self.banner = notable_messages(raw_lines)
        self.version = self._version(raw_lines)
        # A libngspice built with OpenMP (Debian's links libgomp) loads BSIM3/BSIM4 instances on
        # `num_threads` threads, 2 unless set (ngspice's spinit.in: "set the number of threads in
        # openmp; default (if compiled with --enable-openmp) is: 2"). A check's decks hold one or
        # two transistors, and on a busy machine the threads' spin-waits took most of the CPU: the
        # 177 test netlists with their 16 BSIM stages, 2 CPUs held by two other jobs, 5.6–11.7 s
        # wall and 4.8–8.4 s CPU against 2.2–2.7 s and 1.3–1.6 s on one thread (1.35 s idle), and
        # a card's fit grid could pass its 10 s timeout. One thread: the same device equations.
        self._quietly("set num_threads=1")
        raw_lines.clear()

    @property
    def retired(self) -> bool:
        """ngspice asked to be detached: the library cannot run another deck in this process."""
        return bool(self._exits)

    def _version(self, raw: list[str]) -> str:
        for line in raw:
            if match := re.search(r"ngspice-(\S+)", line):
                return match.group(1)
        version = self._ngspice.ngspice_version
        return str(version) if version is not None else "unknown"

    def _quietly(self, command: str) -> None:
        # PySpice raises on any stderr line (ngspice writes notes there); the messages are
        # already collected, so whether a command "failed" is decided elsewhere.
        with contextlib.suppress(*self._errors):
            self._ngspice.exec_command(command)

    def simulate(self, request: dict[str, Any]) -> dict[str, Any]:
        request_id = request.get("id")
        deck = request.get("deck")
        wanted = request.get("vectors")
        if not isinstance(deck, str):
            return _failure(request_id, "request has no deck text", [], SIMULATOR_ERROR)
        if wanted is not None and not (
            isinstance(wanted, list) and all(isinstance(name, str) for name in wanted)
        ):
            return _failure(request_id, "vectors must be a list of names", [], SIMULATOR_ERROR)

        self._raw.clear()
        if not self._cleared:  # the previous deck stopped before its own clearing
            self._quietly("destroy all")
        self._cleared = False
        # PySpice calls a load failed when the word "error" appears anywhere (a title will do)
        # and a run failed on any stderr line: judge by the plot and the messages instead.
        with contextlib.suppress(*self._errors):
            self._ngspice.load_circuit(_ensure_end(deck))
        if not self.retired:
            with contextlib.suppress(*self._errors):
                self._ngspice.run()
        plot_name, vectors, problem = self._read_last_plot()
        messages = notable_messages(self._raw)
        if not self.retired:
            self._quietly("remcirc")
            self._quietly("destroy all")
            self._cleared = True
        self._raw.clear()

        aborted = any(_ABORTED.search(message) for message in messages)
        if self.retired:
            problem = "ngspice cannot recover from this deck and must be restarted"
        elif problem is None and aborted:
            problem = "the analysis was aborted"
        if problem is not None:
            kind = SIMULATOR_ERROR if self.retired else classify_failure(messages)
            response = _failure(request_id, summarise_error(messages, problem), messages, kind)
            response["plot"] = plot_name
            response["retire"] = self.retired
            return response
        if wanted is not None:
            keys = [vector_key(name) for name in wanted]
            missing = [key for key in keys if key not in vectors]
            if missing:
                error = f"vectors not in plot {plot_name}: {', '.join(missing)}"
                response = _failure(request_id, error, messages, SIMULATOR_ERROR)
                response["plot"] = plot_name
                return response
            vectors = {key: vectors[key] for key in keys}
        return {
            "id": request_id,
            "ok": True,
            "plot": plot_name,
            "vectors": vectors,
            "messages": messages,
            "error": None,
            "kind": None,
            "retire": False,
        }

    def _read_last_plot(self) -> tuple[str | None, dict[str, Any], str | None]:
        """The vectors of the plot the analysis made, or why there is none worth reading."""
        if self.retired:
            return None, {}, "ngspice cannot recover"
        try:
            plot_name = self._ngspice.last_plot
        except (IndexError, *self._errors):
            return None, {}, "ngspice produced no plot"
        if plot_name == "const":
            return None, {}, "the analysis produced no plot"
        vectors = self._read_plot_directly(plot_name)
        if vectors is None:
            vectors = self._read_plot_through_pyspice(plot_name)
        _drop_absent_device_vectors(vectors)
        if not vectors or any(_length(values) == 0 for values in vectors.values()):
            return plot_name, {}, f"the analysis produced no data (plot {plot_name})"
        return plot_name, vectors, None

    def _read_plot_directly(self, plot_name: str) -> dict[str, list[float]] | None:
        """The plot's real vectors by their keys (see ``vector_key``), read through PySpice's own
        handle on the library as its ``plot`` reads them (``ngSpice_AllVecs``, then
        ``ngGet_Vec_Info`` of each), without building PySpice's Plot, Vector and unit objects and
        numpy copies on the way (0.16 of the 0.61 ms a `.op` deck costs the worker). None when
        this PySpice has no such handle, or the plot holds a complex vector (an `.ac` plot's
        ``v_compdata``): then ``_read_plot_through_pyspice`` reads it."""
        from PySpice.Spice.NgSpice import Shared

        library, ffi = getattr(self._ngspice, "_ngspice_shared", None), getattr(Shared, "ffi", None)
        if library is None or ffi is None:
            return None
        names = library.ngSpice_AllVecs(plot_name.encode())
        vectors: dict[str, list[float]] = {}
        index = 0
        while names[index] != ffi.NULL:
            try:
                name = ffi.string(names[index]).decode("utf8")
            except UnicodeDecodeError:
                return None  # a name PySpice keeps as bytes: its own reading decides what happens
            index += 1
            info = library.ngGet_Vec_Info(f"{plot_name}.{name}".encode())
            if info == ffi.NULL:
                continue
            if info.v_compdata != ffi.NULL:
                return None  # an .ac plot: PySpice's reading turns it into complex arrays
            length = info.v_length
            vectors[_plot_vector_key(name)] = ffi.unpack(info.v_realdata, length) if length > 0 else []
        return vectors

    def _read_plot_through_pyspice(self, plot_name: str) -> dict[str, Any]:
        """The plot's vectors by their keys, through PySpice's ``plot``."""
        import numpy as np

        plot = self._ngspice.plot(None, plot_name)
        vectors: dict[str, Any] = {}
        for name, vector in plot.items():
            # The array PySpice read from ngspice, without wrapping it in its unit classes first
            # (the same numbers, at a fraction of the cost); through them if it is not there.
            data = getattr(vector, "_data", None)
            if not isinstance(data, np.ndarray):
                data = np.asarray(vector.to_waveform())
            if np.iscomplexobj(data):
                # An .ac plot: PySpice hands ngspice's complex vectors over as complex128 arrays
                # (Shared.NgSpiceShared.plot, from v_compdata); sent as their two parts.
                vectors[vector_key(name)] = {"re": data.real.tolist(), "im": data.imag.tolist()}
                continue
            vectors[vector_key(name)] = np.asarray(data, dtype=float).tolist()
        return vectors


def _length(values: list[float] | dict[str, list[float]]) -> int:
    """The points of a vector as the response carries it: a list, or a complex one's parts."""
    return len(values["re"]) if isinstance(values, dict) else len(values)


def _drop_absent_device_vectors(vectors: dict[str, Any]) -> None:
    """Remove the device vectors the device's model does not have.

    A `.save @m1[von]` for a model without `von` (BSIM3 and BSIM4 call their threshold `vth`)
    leaves a vector of length 0 in the plot, beside full ones (seen with `ngspice -b` and
    `display`, ngspice 39). It is absent, not a failed analysis: the caller finds it missing.
    """
    for key in [key for key, values in vectors.items() if not _length(values) and key.startswith("@")]:
        del vectors[key]


def _failure(request_id: Any, error: str, messages: list[str], kind: str) -> dict[str, Any]:
    return {
        "id": request_id,
        "ok": False,
        "plot": None,
        "vectors": {},
        "messages": messages,
        "error": error,
        "kind": kind,
        "retire": False,
    }


# --- process plumbing --------------------------------------------------------------------------


def _redirect_std_streams(capture: str) -> None:
    """Point fds 1 and 2 at the capture so nothing ngspice or PySpice prints reaches a terminal."""
    target = os.open(capture, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o600)
    sys.stdout.flush()
    sys.stderr.flush()
    os.dup2(target, 1)
    os.dup2(target, 2)
    os.close(target)


def _send(channel: IO[bytes], message: dict[str, Any]) -> None:
    channel.write(json.dumps(message, separators=(",", ":")).encode("utf-8") + b"\n")
    channel.flush()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m bridge.sim.worker")
    parser.add_argument("--response-fd", type=int, default=None,
                        help="fd for responses (default: the original stdout)")
    parser.add_argument("--capture", default=os.devnull,
                        help="file that receives everything printed on fds 1 and 2")
    parser.add_argument("--library", default=None, help="path of libngspice")
    args = parser.parse_args(argv)

    # Take the response channel before fd 1 is redirected, so a hand-run worker answers on the
    # terminal while ngspice's chatter goes to the capture.
    response_fd = args.response_fd if args.response_fd is not None else os.dup(1)
    channel = os.fdopen(response_fd, "wb")
    _redirect_std_streams(args.capture)
    return serve(channel, args.library, sys.stdin.buffer)


def serve(channel: IO[bytes], library: str | None, requests: IO[bytes], forked: bool = False) -> int:
    """Load ngspice, send the handshake on `channel`, then answer each request line of
    `requests` until it ends (or ngspice retires); the exit status."""
    # Ctrl-C belongs to the parent, which kills this process when it gives up on a run.
    signal.signal(signal.SIGINT, signal.SIG_IGN)

    from bridge.sim.locate import locate_ngspice

    location = locate_ngspice(library) if library else locate_ngspice()
    library = library or location.path
    if library is None:
        _send(channel, {"handshake": True, "ok": False, "error": location.hint, "pid": os.getpid()})
        return 3
    try:
        simulator = Simulator(library)
    except Exception as exc:  # a library that will not load is reported, not raised
        _send(channel, {
            "handshake": True, "ok": False, "pid": os.getpid(), "library": library,
            "error": f"cannot load ngspice library {library}: {exc}",
        })
        return 3
    _send(channel, {
        "handshake": True, "ok": True, "pid": os.getpid(), "library": library,
        "version": simulator.version, "messages": simulator.banner, "error": None, "forked": forked,
    })

    for line in requests:
        if not line.strip():
            continue
        try:
            request = json.loads(line)
            if not isinstance(request, dict):
                raise ValueError("a request is a JSON object")
        except ValueError as exc:
            _send(channel, _failure(None, f"malformed request: {exc}", [], SIMULATOR_ERROR))
            continue
        try:
            response = simulator.simulate(request)
        except Exception as exc:  # a bug here must not look like ngspice's verdict on the deck
            response = _failure(request.get("id"), f"worker error: {exc!r}", [], SIMULATOR_ERROR)
            response["retire"] = True
        _send(channel, response)
        if response["retire"]:
            return 4
    return 0


# The stream objects a forked worker inherited from its client: kept referenced and never flushed
# or closed in the worker, so that nothing the client had buffered is written a second time.
_INHERITED_STREAMS: list[object] = []


def run_forked(requests_fd: int, response_fd: int, capture_fd: int, workdir: str,
               environment: Mapping[str, str], library: str) -> NoReturn:
    """Become, in a child forked from the client (``client._fork_worker``), the worker that
    ``python -m bridge.sim.worker`` would be, and leave with ``os._exit``: never returns.

    Set up as the exec'd worker is: requests on fd 0, fds 1 and 2 on the capture, the response
    fd, nothing else open; the private working folder; the environment with `environment`
    added; signal handlers the client installed back to their defaults (as an exec resets
    them; ignored signals stay ignored); the warning filters Python starts with. The client's
    objects are frozen (``gc.freeze``): none is collected, finalized or flushed here.
    """
    code = 1
    try:
        gc.freeze()
        os.dup2(requests_fd, 0)
        os.dup2(capture_fd, 1)
        os.dup2(capture_fd, 2)
        os.closerange(3, response_fd)
        os.closerange(response_fd + 1, os.sysconf("SC_OPEN_MAX"))
        _INHERITED_STREAMS.extend((sys.stdin, sys.stdout, sys.stderr))
        sys.stdin = open(0, encoding="utf-8", errors="surrogateescape", closefd=False)  # noqa: SIM115
        sys.stdout = open(1, "w", encoding="utf-8", errors="backslashreplace", closefd=False)  # noqa: SIM115
        sys.stderr = open(2, "w", encoding="utf-8", errors="backslashreplace",  # noqa: SIM115
                          closefd=False, buffering=1)
        _default_signals()
        os.chdir(workdir)
        os.environ.update(environment)
        _default_warnings()
        channel = os.fdopen(response_fd, "wb")
        code = serve(channel, library, sys.stdin.buffer, forked=True)
    except BaseException:  # noqa: BLE001 - said in the capture, as an exec'd worker's traceback is
        with contextlib.suppress(BaseException):
            import traceback

            traceback.print_exc()
    finally:
        with contextlib.suppress(BaseException):
            sys.stdout.flush()
            sys.stderr.flush()
        os._exit(code)  # no atexit handlers, no finalizers of the client's objects


def _default_signals() -> None:
    """Signals with a Python handler (the CLI's SIGTERM, say) back to the default action, and no
    wake-up fd: as an exec leaves them. SIGINT is ignored by ``serve``."""
    for number in signal.valid_signals():
        with contextlib.suppress(OSError, ValueError):
            if number != signal.SIGINT and callable(signal.getsignal(number)):
                signal.signal(number, signal.SIG_DFL)
    signal.set_wakeup_fd(-1)
    import faulthandler

    if faulthandler.is_enabled():  # onto the capture, not the client's (now closed) fd
        faulthandler.cancel_dump_traceback_later()
        faulthandler.disable()
        faulthandler.enable()


def _default_warnings() -> None:
    """The warning filters a Python started without -W has (the client's may make errors of
    warnings, as a test runner's do)."""
    import warnings

    warnings.resetwarnings()
    for category in (DeprecationWarning, PendingDeprecationWarning, ImportWarning, ResourceWarning):
        warnings.simplefilter("ignore", category)
    warnings.filterwarnings("default", category=DeprecationWarning, module="__main__")


if __name__ == "__main__":
    sys.exit(main())
