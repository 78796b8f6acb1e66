"""PySpice's shared-mode wrapper, imported with ngspice's C declarations compiled ahead.

PySpice declares libngspice's API to cffi by parsing its ``api.h`` at every start
(``cffi.FFI().cdef``, which imports pycparser): importing PySpice and initialising ngspice took
82–95 ms CPU in a fresh process with numpy loaded, 38–56 ms without the parser (four runs each,
idle machine; importing pycparser ~25 ms, the parse ~8). cffi's out-of-line ABI mode keeps the same
declarations as a compact table that loads in well under a millisecond:
``_ngspice_declarations.py`` is that table, emitted by cffi itself from PySpice's own ``api.h``
(``python -m bridge.sim.binding`` writes it again), with the header text it was built from.

While PySpice's module is imported, ``cffi.FFI`` stands for ``DeclaredFFI``: PySpice's one
``ffi = FFI()`` is then an object answering from the table, and its later ``ffi.cdef(api.h)``
costs a string comparison. Everything else is PySpice's own code driving libngspice, unchanged.
When the header PySpice declares is not the text the table holds (another PySpice), or the table
cannot be loaded (another cffi), the declarations are parsed as PySpice does: slower, the same.
"""

from __future__ import annotations

import sys
from types import ModuleType
from typing import Any

SHARED = "PySpice.Spice.NgSpice.Shared"
# The table's name inside cffi (a label: it is loaded as bridge.sim._ngspice_declarations).
TABLE_NAME = "_ngspice_declarations"


class DeclaredFFI:
    """In place of ``cffi.FFI`` while PySpice's module is imported: its ``FFI()`` and ``FFI.NULL``.

    An instance answers from the compiled table (``table_ffi``); ``cdef`` of the header the table
    was built from does nothing; any other text is parsed into a plain ``cffi.FFI`` that answers
    from then on (and parses every later ``cdef``)."""

    table_ffi: Any = None
    table_header: str = ""
    NULL: Any = None

    def __init__(self) -> None:
        self._ffi = self.table_ffi

    def cdef(self, source: str, **options: Any) -> None:
        if self._ffi is self.table_ffi:
            if source == self.table_header and not options:
                return
            import cffi

            self.__dict__.clear()  # drop the answers remembered from the table
            self._ffi = cffi.FFI()
        self._ffi.cdef(source, **options)  # declared as PySpice's own FFI would be, one cdef after another

    def __getattr__(self, name: str) -> Any:
        # Only for names not yet looked up: each is remembered on the instance, so PySpice's calls
        # (ffi.string, ffi.unpack, ffi.callback, ...) reach the cffi object's own methods directly.
        value = getattr(self.__dict__["_ffi"], name)
        setattr(self, name, value)
        return value


def shared_module() -> ModuleType:
    """PySpice's ``Shared`` module (``NgSpiceShared``), declared from the table when it can be."""
    if SHARED in sys.modules:  # imported before, declared however it was then
        return sys.modules[SHARED]
    try:
        import cffi

        from . import _ngspice_declarations as table
    except Exception:  # no table for this cffi: PySpice parses the header itself
        table = None
    if table is None:
        import PySpice.Spice.NgSpice.Shared as shared

        return shared

    class TableFFI(DeclaredFFI):
        table_ffi = table.ffi
        table_header = table.HEADER
        NULL = table.ffi.NULL

    saved = cffi.FFI
    cffi.FFI = TableFFI
    try:
        import PySpice.Spice.NgSpice.Shared as shared
    finally:
        cffi.FFI = saved
    return shared


def api_header() -> str:
    """The text of the ``api.h`` PySpice declares to cffi (found beside its module, not imported)."""
    from importlib.util import find_spec
    from pathlib import Path

    spec = find_spec("PySpice.Spice.NgSpice")
    if spec is None or spec.origin is None:
        raise ImportError("PySpice is not installed")
    return Path(spec.origin).with_name("api.h").read_text()


def table_source(header: str) -> str:
    """The text of ``_ngspice_declarations.py`` for ``header``: cffi's out-of-line ABI table, then
    the header itself."""
    import contextlib
    import io
    import tempfile
    from pathlib import Path

    import cffi

    ffi = cffi.FFI()
    ffi.set_source(TABLE_NAME, None)
    ffi.cdef(header)
    with tempfile.TemporaryDirectory() as folder:
        emitted = Path(folder) / f"{TABLE_NAME}.py"
        with contextlib.redirect_stdout(io.StringIO()):  # cffi says "generating <path>"
            ffi.emit_python_code(str(emitted))
        body = emitted.read_text()
    return (
        "# ngspice's shared-library API as cffi's out-of-line ABI table, emitted by cffi from\n"
        "# PySpice's api.h: do not edit; `python -m bridge.sim.binding` writes it again.\n"
        "# ruff: noqa\n"
        f"{body}\nHEADER = {header!r}\n"
    )


def main() -> int:
    """Write the table again from the installed PySpice's header (atomically)."""
    from pathlib import Path

    from ..report.files import write_text_atomically

    target = Path(__file__).with_name(f"{TABLE_NAME}.py")
    write_text_atomically(target, table_source(api_header()))
    print(f"wrote {target}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
