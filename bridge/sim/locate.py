"""Find the ngspice shared library without the user setting any path.

Order: an explicit path given by the caller, then ``NGSPICE_LIBRARY_PATH`` (an explicit setting
is honoured strictly: if it names a missing file we say so rather than quietly using another
library), then the usual directories, then ``ctypes.util.find_library("ngspice")`` (the dynamic
loader's cache: a library in a directory of its own) resolved against those directories. Debian
ships ``libngspice.so.0`` (package ``libngspice0``); PySpice on its own asks for
``libngspice.so``, which only the ``-dev`` package provides. The directories come first because
find_library runs ``ldconfig -p`` in a child process on Linux (~1 ms CPU and 1–9 ms wall, median
~3, at load 4–5 here, before the worker can start), and for a distribution's package both ways
give the same file: the cache's soname (``libngspice.so.0``) is looked up in the same directories
in the same order (Debian 12's libngspice0: /usr/lib/x86_64-linux-gnu/libngspice.so.0 either way).
"""

from __future__ import annotations

import functools
import os
import sysconfig
from collections.abc import Mapping
from pathlib import Path
from typing import NamedTuple

ENV_VARIABLE = "NGSPICE_LIBRARY_PATH"
INSTALL_HINT = "install it with `apt-get install ngspice libngspice0` (Debian/Ubuntu)"

# Library file names in the order we prefer them: the runtime soname first.
_LIBRARY_NAMES = ("libngspice.so.0", "libngspice.so", "libngspice.dylib")


class LibraryLocation(NamedTuple):
    """Where libngspice is (``path`` is None when not found) and one line saying so."""

    path: str | None
    hint: str

    @property
    def found(self) -> bool:
        return self.path is not None


def _library_dirs() -> list[Path]:
    """Directories a distribution or a source build puts libngspice in."""
    multiarch = sysconfig.get_config_var("MULTIARCH") or "x86_64-linux-gnu"
    dirs = [
        f"/usr/lib/{multiarch}",
        "/usr/lib",
        "/usr/lib64",
        f"/usr/local/lib/{multiarch}",
        "/usr/local/lib",
        "/opt/homebrew/lib",
    ]
    return [Path(d) for d in dict.fromkeys(dirs)]


def _resolve_soname(name: str, dirs: list[Path]) -> str:
    """Turn a bare soname from find_library into a full path when we can see the file."""
    if os.path.isabs(name):
        return name
    for directory in dirs:
        candidate = directory / name
        if candidate.is_file():
            return str(candidate)
    return name  # the dynamic loader can still open a bare soname through its cache


@functools.lru_cache(maxsize=1)
def _system_soname() -> str | None:
    """``ctypes.util.find_library("ngspice")``, asked once a process: on Linux it runs
    ``ldconfig -p`` in a child process (and, where that finds nothing, gcc and ld), ~4 ms CPU and
    6 ms wall here, and `check` asks twice (``ngspice_available``, then the session). Asked only
    when no usual directory holds the library."""
    import ctypes.util

    return ctypes.util.find_library("ngspice")


def locate_ngspice(
    explicit: str | None = None,
    *,
    environ: Mapping[str, str] | None = None,
    search: bool = True,
) -> LibraryLocation:
    """Return the path of libngspice (or None) and a one-line hint for the user.

    ``explicit`` overrides everything; ``environ`` replaces ``os.environ`` and ``search=False``
    turns off the system search (both for tests and for callers that want one answer only).
    """
    env = os.environ if environ is None else environ
    if explicit is not None:
        if Path(explicit).is_file():
            return LibraryLocation(explicit, f"ngspice library: {explicit}")
        return LibraryLocation(
            None, f"ngspice library {explicit} does not exist: fix the path, or {INSTALL_HINT}"
        )

    configured = env.get(ENV_VARIABLE)
    if configured:
        if Path(configured).is_file():
            return LibraryLocation(configured, f"ngspice library: {configured} (from {ENV_VARIABLE})")
        return LibraryLocation(
            None,
            f"ngspice not found: {ENV_VARIABLE}={configured} is not a file; "
            f"fix or unset it, or {INSTALL_HINT}",
        )

    if search:
        dirs = _library_dirs()
        for directory in dirs:
            for name in _LIBRARY_NAMES:
                candidate = directory / name
                if candidate.is_file():
                    return LibraryLocation(str(candidate), f"ngspice library: {candidate}")
        soname = _system_soname()
        if soname:
            path = _resolve_soname(soname, dirs)
            return LibraryLocation(path, f"ngspice library: {path}")

    return LibraryLocation(None, f"ngspice not found: {INSTALL_HINT}")
