"""`records.record` builds the classes `@dataclass` would: the same construction, repr, equality,
hashing, immutability, `dataclasses` functions and pickling, with one compiled method a class."""

from __future__ import annotations

import copy
import dataclasses
import importlib
import inspect
import pickle
import pkgutil
import sys
import typing
from collections.abc import Callable
from dataclasses import field

import pytest
from conftest import EXAMPLES

import bridge
from bridge import records
from bridge.records import record


def _declared_both_ways(body: Callable[[], dict], **flags: bool) -> tuple[type, type]:
    """The class written by `body` (annotations, defaults, methods) made by ``@dataclass`` and by
    ``@record`` with the same flags, both named ``Sample``."""
    return dataclasses.dataclass(type("Sample", (), body()), **flags), record(type("Sample", (), body()), **flags)


_BODIES = {
    "plain": lambda: {"__annotations__": {"vto": "float", "kp": "float"}},
    "defaults": lambda: {"__annotations__": {"name": "str", "w": "float", "l": "float", "notes": "list"},
                 "w": 1e-6, "l": 2e-6, "notes": field(default_factory=list)},
    "hidden and uncompared": lambda: {"__annotations__": {"node": "str", "volts": "float", "cache": "dict"},
                              "volts": field(default=0.0, repr=False),
                              "cache": field(default_factory=dict, compare=False, repr=False)},
    "not hashed": lambda: {"__annotations__": {"node": "str", "volts": "float"},
                           "volts": field(default=1.5, hash=False)},
    "one field": lambda: {"__annotations__": {"self": "float"}},
    "no field": lambda: {"__annotations__": {}},
    "set after init": lambda: {"__annotations__": {"vds": "float", "vgs": "float", "overdrive": "float"},
                       "overdrive": field(init=False),
                       "__post_init__": lambda self: object.__setattr__(self, "overdrive", self.vgs - 0.7)},
    "factory not in init": lambda: {"__annotations__": {"vds": "float", "seen": "list", "label": "str"},
                            "seen": field(init=False, default_factory=list),
                            "label": field(init=False, default="M1")},
}

def _hash_or_error(value: object) -> object:
    try:
        return hash(value)
    except TypeError as error:  # a field that is a list or a dict
        return str(error)


_FLAGS = [{"frozen": True}, {"frozen": True, "eq": False}, {}, {"eq": False}]


def _arguments(name: str) -> list[tuple[tuple, dict]]:
    return {
        "plain": [((0.7, 2e-5), {}), ((0.7,), {"kp": 2e-5}), ((), {"vto": -0.4, "kp": 1e-5})],
        "defaults": [(("M1",), {}), (("M2", 5e-6), {"notes": ["sized"]}), (("M3",), {"l": 1e-6})],
        "hidden and uncompared": [(("drain",), {}), (("gate", 1.2), {"cache": {"a": 1}})],
        "not hashed": [(("vdd",), {}), (("out", 2.0), {})],
        "one field": [((3.0,), {}), ((), {"self": float("nan")})],
        "no field": [((), {})],
        "set after init": [((2.0, 1.1), {})],
        "factory not in init": [((0.3,), {})],
    }[name]


@pytest.mark.parametrize("flags", _FLAGS, ids=str)
@pytest.mark.parametrize("name", list(_BODIES))
def test_a_record_behaves_as_the_dataclass_it_replaces(name: str, flags: dict) -> None:
    plain, ours = _declared_both_ways(_BODIES[name], **flags)
    assert str(inspect.signature(ours)) == str(inspect.signature(plain))
    assert ours.__doc__ == plain.__doc__  # both written from the signature (no docstring here)
    assert [(f.name, f.default, f.init, f.repr, f.compare) for f in dataclasses.fields(ours)] == \
        [(f.name, f.default, f.init, f.repr, f.compare) for f in dataclasses.fields(plain)]
    assert ours.__match_args__ == plain.__match_args__
    assert ours.__init__.__module__ == plain.__init__.__module__ == __name__
    assert ours.__init__.__qualname__ == plain.__init__.__qualname__
    assert typing.get_type_hints(ours.__init__) == typing.get_type_hints(plain.__init__)
    assert (ours.__hash__ is None) == (plain.__hash__ is None)
    made = [(plain(*args, **kwargs), ours(*args, **kwargs)) for args, kwargs in _arguments(name)]
    for a, b in made:
        assert repr(b) == repr(a)
        assert vars(b) == vars(a)
        assert dataclasses.asdict(b) == dataclasses.asdict(a)
        assert dataclasses.astuple(b) == dataclasses.astuple(a)
        if plain.__hash__ is not None and flags.get("eq", True):
            assert _hash_or_error(b) == _hash_or_error(a)
        twin_a, twin_b = copy.copy(a), copy.copy(b)
        if sys.version_info < (3, 13):  # 3.13's dataclass compares field by field, a record as tuples
            assert (b == twin_b) == (a == twin_a) and (b != twin_b) == (a != twin_a)
        assert (b == a) is False and (a == b) is False  # another class
        init_fields = [f.name for f in dataclasses.fields(ours) if f.init]
        if init_fields:
            changed = init_fields[0]
            value = getattr(b, changed)
            assert repr(dataclasses.replace(b, **{changed: value})) == repr(dataclasses.replace(a, **{changed: value}))
    for (a1, b1), (a2, b2) in zip(made, made[1:]):
        assert (b1 == b2) == (a1 == a2)
    # immutability: the same error and words (frozen), or an attribute set as on any object
    a, b = made[0]
    assert _assigned_and_deleted(b) == _assigned_and_deleted(a)


def _assigned_and_deleted(target: object) -> tuple[str, str]:
    """What assigning a new attribute, then deleting a field, does to `target`."""
    outcome = []
    for change in (lambda: setattr(target, "extra", 1), lambda: delattr(target, next(iter(vars(target)), "extra"))):
        try:
            change()
            outcome.append("done")
        except dataclasses.FrozenInstanceError as error:
            outcome.append(f"FrozenInstanceError: {error}")
    return tuple(outcome)


def test_methods_a_record_defines_itself_are_kept() -> None:
    plain, ours = _declared_both_ways(lambda: {"__annotations__": {"node": "str"},
                                               "__repr__": lambda self: f"<{self.node}>",
                                               "__eq__": lambda self, other: isinstance(other, type(self)),
                                               "__hash__": lambda self: 7}, frozen=True)
    assert repr(ours("drain")) == repr(plain("drain")) == "<drain>"
    assert ours("a") == ours("b") and hash(ours("a")) == hash(plain("a")) == 7
    # a class that writes __eq__ alone: Python leaves it unhashable, a frozen dataclass hashes its
    # fields, a mutable one stays unhashable
    for frozen in (True, False):
        plain, ours = _declared_both_ways(lambda: {"__annotations__": {"node": "str"},
                                                   "__eq__": lambda self, other: True}, frozen=frozen)
        assert (ours.__hash__ is None) == (plain.__hash__ is None) == (not frozen)
        assert ours("a") == ours("b")
        if frozen:
            assert hash(ours("a")) == hash(plain("a"))


def test_a_subclass_record_extends_its_base() -> None:
    @record(frozen=True)
    class Base:
        """Base."""
        vdd: float
        vss: float = 0.0

    @record(frozen=True)
    class Split(Base):
        """Split."""
        rails: tuple = ()

    split = Split(5.0, -5.0, ("vdd", "vss"))
    assert repr(split).endswith(".<locals>.Split(vdd=5.0, vss=-5.0, rails=('vdd', 'vss'))")
    assert split == Split(5.0, -5.0, ("vdd", "vss")) and split != Base(5.0, -5.0)
    assert hash(split) == hash((5.0, -5.0, ("vdd", "vss")))
    with pytest.raises(TypeError, match="frozen"):
        @record
        class Loose(Base):
            """A mutable subclass of a frozen record, which dataclass refuses too."""
            extra: int = 0


def test_a_frozen_record_stores_its_fields_as_dataclass_does_even_through_a_descriptor() -> None:
    # A frozen record's __init__ writes its instance dict directly unless a field's name is a data
    # descriptor of the class: then, as dataclass does, through object.__setattr__ (the setter runs).
    def with_a_setter_base():
        class Base:
            """A base whose `gain` is a property with a setter."""
            @property
            def gain(self) -> float:
                return self.__dict__["stored"]

            @gain.setter
            def gain(self, value: float) -> None:
                self.__dict__["stored"] = 2 * value
        return Base

    @dataclasses.dataclass(frozen=True)
    class Twin(with_a_setter_base()):
        gain: float

    @record(frozen=True)
    class Made(with_a_setter_base()):
        gain: float

    assert Made(3.0).gain == Twin(3.0).gain == 6.0
    assert vars(Made(3.0)) == vars(Twin(3.0)) == {"stored": 6.0}

    @record(frozen=True)
    class Plain:
        """Two fields, stored straight into the instance dict."""
        vto: float
        kp: float = 1e-4
    assert vars(Plain(0.7)) == {"vto": 0.7, "kp": 1e-4}
    with pytest.raises(dataclasses.FrozenInstanceError):
        Plain(0.7).vto = 0.8


def test_record_refuses_fields_it_does_not_build() -> None:
    with pytest.raises(TypeError, match="keyword-only"):
        @record(frozen=True)
        class Keyword:
            """A keyword-only field."""
            vto: float = field(kw_only=True)
    with pytest.raises(TypeError, match="keyword-only"):
        @record(frozen=True)
        class Held:
            """An InitVar."""
            vto: dataclasses.InitVar[float]


def _bridge_records() -> list[type]:
    modules = [importlib.import_module(info.name) for info in pkgutil.walk_packages(bridge.__path__, "bridge.")
               if not info.name.endswith("__main__")]
    return [value for module in modules for value in vars(module).values()
            if isinstance(value, type) and value.__module__ == module.__name__ and dataclasses.is_dataclass(value)]


def test_every_record_of_the_project_is_made_by_record() -> None:
    # how records are made is said once: every dataclass of bridge comes through records.record,
    # so the one method compiled for it is its __init__ (dataclass compiled up to six)
    classes = _bridge_records()
    assert len(classes) > 100
    for cls in classes:
        compiled = {name for name, value in vars(cls).items()
                    if getattr(inspect.unwrap(value), "__code__", None) is not None
                    and inspect.unwrap(value).__code__.co_filename == "<string>"}
        assert compiled == {"__init__"}, cls.__qualname__
        if "__repr__" not in vars(cls) or vars(cls)["__repr__"] is records._record_repr:
            assert cls.__repr__ is records._record_repr, cls.__qualname__


def _records_in(value: object, seen: dict[int, object]) -> None:
    if id(value) in seen:
        return
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        seen[id(value)] = value
        for f in dataclasses.fields(value):
            _records_in(getattr(value, f.name, None), seen)
    elif isinstance(value, dict):
        for item in value.values():
            _records_in(item, seen)
    elif isinstance(value, (list, tuple)):
        for item in value:
            _records_in(item, seen)


def _as_dataclass(cls: type) -> type:
    """The same fields declared with ``@dataclass`` and the flags the record was made with."""
    body: dict = {"__annotations__": {}, "__qualname__": cls.__qualname__}
    for f in dataclasses.fields(cls):
        body["__annotations__"][f.name] = f.type
        body[f.name] = field(default=f.default, default_factory=f.default_factory, init=f.init, repr=f.repr,
                             hash=f.hash, compare=f.compare)
    eq = cls.__eq__ is not object.__eq__
    frozen = cls.__setattr__ is records._frozen_setattr
    return dataclasses.dataclass(type(cls.__name__, (), body), eq=eq, frozen=frozen)


def test_the_records_of_a_check_show_compare_and_hash_as_dataclass_made_them(required_ngspice_session) -> None:
    # every record a check hands back, next to a @dataclass twin holding the same fields
    from bridge.check import check_circuit
    from bridge.netlist import read_netlist

    seen: dict[int, object] = {}
    for name in ("cs_divider.cir", "greenhouse_cs_gain.cir", "pmos_cs.cir"):
        circuit = read_netlist(EXAMPLES / name)
        _records_in(circuit, seen)
        _records_in(check_circuit(circuit, required_ngspice_session, tolerance=0.05), seen)
    kinds = {type(value) for value in seen.values()}
    assert len(kinds) >= 8
    twins = {cls: _as_dataclass(cls) for cls in kinds}
    for value in seen.values():
        twin = object.__new__(twins[type(value)])
        vars(twin).update({f.name: getattr(value, f.name) for f in dataclasses.fields(value)
                           if hasattr(value, f.name)})
        assert repr(value) == repr(twin)
        if type(value).__hash__ is not None and type(value).__eq__ is not object.__eq__:
            assert _hash_or_error(value) == _hash_or_error(twin), type(value).__qualname__
            assert value == copy.copy(value)
        back = pickle.loads(pickle.dumps(value))
        assert type(back) is type(value) and repr(back) == repr(value)
