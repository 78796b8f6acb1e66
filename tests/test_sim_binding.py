"""PySpice imported with ngspice's C declarations from cffi's compiled table (bridge/sim/binding.py).

Checked against cffi itself: the table must declare what cffi makes of PySpice's own api.h when
it parses it, type by type and function by function; and a worker whose PySpice answers from the
table must read ngspice's results bit for bit as one whose PySpice parsed the header.
"""

from __future__ import annotations

import json
import subprocess
import sys

import cffi
import pytest

from bridge.sim import _ngspice_declarations as table
from bridge.sim.binding import DeclaredFFI, api_header, table_source


def _library_path() -> str | None:
    from bridge.sim.locate import locate_ngspice

    return locate_ngspice().path


def _layout(ffi, ctype, depth: int = 0) -> object:
    """A C type by what it is, not how it is spelt (the table writes ``struct ngcomplex`` where the
    parser writes ``ngcomplex_t``): kinds, sizes, field names and offsets, arguments, results."""
    if depth > 8:  # deep enough for api.h, and safe on a struct that points to itself
        return ctype.kind
    kind = ctype.kind
    if kind in {"primitive", "void"}:
        return ctype.cname
    if kind == "pointer":
        return ("pointer", _layout(ffi, ctype.item, depth + 1))
    if kind == "array":
        return ("array", ctype.length, _layout(ffi, ctype.item, depth + 1))
    if kind == "function":
        return ("function", tuple(_layout(ffi, a, depth + 1) for a in ctype.args),
                _layout(ffi, ctype.result, depth + 1), ctype.ellipsis)
    if kind in {"struct", "union"}:
        fields = tuple((name, field.offset, _layout(ffi, field.type, depth + 1)) for name, field in ctype.fields or ())
        return (kind, ffi.sizeof(ctype), fields)
    return (kind, ctype.cname)


def _declared(ffi, name: str) -> object:
    """A typedef's layout, through a pointer to it (valid for every typedef, a function's too)."""
    return _layout(ffi, ffi.typeof(f"{name} *"))


def _parsed() -> cffi.FFI:
    ffi = cffi.FFI()
    ffi.cdef(api_header())
    return ffi


def test_the_table_was_built_from_the_header_pyspice_declares() -> None:
    # When PySpice's api.h changes, the worker parses it again (correct, slower) until the table
    # is written anew: `python -m bridge.sim.binding`.
    assert api_header() == table.HEADER, "PySpice's api.h changed: run `python -m bridge.sim.binding`"


def test_the_tables_types_are_cffis_reading_of_the_header() -> None:
    parsed, compiled = _parsed(), table.ffi
    typedefs, structs, unions = parsed.list_types()
    assert compiled.list_types() == (typedefs, structs, unions)
    assert len(typedefs) > 10 and {"vector_info", "vecvaluesall", "pvecinfoall"} <= set(typedefs)
    for name in typedefs:
        assert _declared(compiled, name) == _declared(parsed, name), name


def test_the_tables_functions_are_cffis_reading_of_the_header() -> None:
    path = _library_path()
    if path is None:
        pytest.skip("libngspice is not installed")
    parsed, compiled = _parsed(), table.ffi
    theirs, own = parsed.dlopen(path), compiled.dlopen(path)
    names = sorted(name for name in dir(theirs) if name.startswith(("ngSpice", "ngGet")))
    assert {"ngSpice_Init", "ngSpice_Command", "ngGet_Vec_Info", "ngSpice_AllVecs"} <= set(names)
    assert sorted(name for name in dir(own) if name.startswith(("ngSpice", "ngGet"))) == names
    for name in names:
        own_type, their_type = compiled.typeof(getattr(own, name)), parsed.typeof(getattr(theirs, name))
        assert _layout(compiled, own_type) == _layout(parsed, their_type), name


def test_the_table_source_declares_the_header_it_carries() -> None:
    # What `python -m bridge.sim.binding` writes: loaded, it answers like the committed table.
    namespace: dict[str, object] = {}
    exec(compile(table_source(api_header()), "<table>", "exec"), namespace)  # noqa: S102 (our own text)
    assert namespace["HEADER"] == api_header()
    written = namespace["ffi"]
    for name in table.ffi.list_types()[0]:
        assert _declared(written, name) == _declared(table.ffi, name), name


def test_another_header_is_parsed_and_answers_instead_of_the_table() -> None:
    class TableFFI(DeclaredFFI):
        table_ffi = table.ffi
        table_header = table.HEADER
        NULL = table.ffi.NULL

    same = TableFFI()
    same.cdef(table.HEADER)  # the table's own header: nothing to parse
    assert same._ffi is table.ffi and same.sizeof("vecvalues") == table.ffi.sizeof("vecvalues")

    other = TableFFI()
    assert other.sizeof("int") == 4  # remembered from the table: must not outlive the cdef below
    other.cdef("typedef struct { double gain; int stages; } tide_gauge_t;")
    assert isinstance(other._ffi, cffi.FFI)
    assert other.sizeof("tide_gauge_t") == 16
    with pytest.raises(cffi.CDefError):
        other.typeof("vecvalues")  # the table no longer answers
    other.cdef("typedef double tide_level_t;")  # a later cdef adds to the same parsed declarations
    assert other.sizeof("tide_gauge_t") == 16 and other.sizeof("tide_level_t") == 8
    other.cdef(table.HEADER)  # the table's header too, now parsed like any other text
    assert other.sizeof("vecvalues") == table.ffi.sizeof("vecvalues") and other.sizeof("tide_level_t") == 8


# Runs one deck through a Simulator in a fresh interpreter; "parsed" imports PySpice first, so its
# module (and its FFI) is the one PySpice makes by parsing the header.
_RUN = r"""
import json, sys
if sys.argv[2] == "parsed":
    import PySpice.Spice.NgSpice.Shared
from bridge.sim.worker import Simulator
simulator = Simulator(sys.argv[1])
from PySpice.Spice.NgSpice import Shared
answer = simulator.simulate({"id": 1, "deck": sys.argv[3], "vectors": None})
print(json.dumps({"answer": answer, "ffi": type(Shared.ffi).__name__,
                  "pycparser": "pycparser" in sys.modules}))
"""

# A rain-gauge heater switch: a PMOS high-side switch, its gate pulled by a divider.
_HEATER = """rain gauge heater switch
VBAT bat 0 9
R1 bat g 22k
R2 g 0 33k
RH d 0 47
M1 d g bat bat heat W=600u L=2u
.model heat pmos (vto=-1.3 kp=25u lambda=0.015 gamma=0.4)
.save all @m1[id] @m1[gm] @m1[vdsat]
.op
.end
"""


def _run(mode: str) -> dict:
    path = _library_path()
    if path is None:
        pytest.skip("libngspice is not installed")
    completed = subprocess.run([sys.executable, "-c", _RUN, path, mode, _HEATER], capture_output=True,
                               text=True, timeout=60, stdin=subprocess.DEVNULL)
    assert completed.returncode == 0, completed.stderr
    return json.loads(completed.stdout.splitlines()[-1])


def test_a_worker_answering_from_the_table_reads_ngspice_as_one_that_parsed_the_header() -> None:
    from_table, parsed = _run("table"), _run("parsed")
    assert from_table["ffi"] == "TableFFI" and not from_table["pycparser"]
    assert parsed["ffi"] == "FFI" and parsed["pycparser"]
    assert from_table["answer"]["ok"] and parsed["answer"]["ok"]
    vectors = from_table["answer"]["vectors"]
    assert {"d", "g", "@m1[id]", "@m1[gm]"} <= set(vectors)
    assert vectors == parsed["answer"]["vectors"]  # JSON keeps each float's repr: to the bit
    assert from_table["answer"]["messages"] == parsed["answer"]["messages"]
