"""How the project's records (its dataclasses) are made, and copies of frozen records, made
cheaply where a solver makes them in its loops."""

from __future__ import annotations

import dataclasses
import inspect
import sys
from collections.abc import Callable, Iterable
from operator import attrgetter
from reprlib import recursive_repr
from typing import Any, TypeVar

T = TypeVar("T")


def with_fields(record: T, drop: Iterable[str] = (), **changes: Any) -> T:
    """``dataclasses.replace(record, **changes)`` for a dataclass whose ``__init__`` does nothing
    but set its fields (no ``__post_init__``, no ``InitVar``): its instance dict copied with
    `changes`, without replace's walk over every field and the frozen ``__init__`` (the
    attribution's re-solves make several such copies a stage). The values a ``cached_property``
    keeps in that dict come along: `drop` names those that do not hold for the changes."""
    copy = object.__new__(type(record))
    fields = vars(copy)
    fields.update(vars(record), **changes)
    for name in drop:
        fields.pop(name, None)
    return copy


# How every record of the project is made. A record is a stdlib dataclass: ``dataclasses``
# reads its fields (``fields``, ``replace``, ``asdict`` and pickling work as on any dataclass),
# and `record` adds the methods that ``@dataclass`` would generate, with the same behaviour.
# Python 3.11 and 3.12 compile each generated method from its own text with its own ``exec``
# (~90 µs each, six for a frozen record with equality); here only ``__init__`` is compiled for
# each class, and ``__repr__``, ``__eq__``, ``__hash__``, ``__setattr__`` and ``__delattr__``
# are the generic ones below, written once.


def record(cls: type | None = None, /, *, eq: bool = True, frozen: bool = False) -> Any:
    """``@dataclass``, ``@dataclass(frozen=True)``, ``@dataclass(eq=False)``: the same class,
    built with one compiled method instead of up to six. Fields are declared as for a dataclass
    (defaults, ``field(default_factory=..., init=False, repr=False, compare=False)``, a
    ``__post_init__`` without arguments); ``InitVar``, ``ClassVar`` and keyword-only fields are
    refused. Generated as ``@dataclass`` would: ``__init__`` (a frozen record's through
    ``object.__setattr__``), ``__repr__`` of the fields with ``repr``, and with `eq`: ``__eq__``
    over the fields with ``compare`` (same class only, as tuples, as dataclass compares them up to
    Python 3.12; 3.13's compares field by field), ``__hash__`` over those
    (`frozen`) or ``None``; a method the class defines itself is kept. A frozen record takes no
    assignment and no deletion of any attribute (``FrozenInstanceError``); a subclass of a record
    is declared a record too, as frozen as its bases. ``__dataclass_params__`` says what
    ``dataclasses`` itself generated (no ``__init__``, ``__repr__`` or ``__eq__``)."""
    def make(cls: type) -> type:
        return _make_record(cls, eq=eq, frozen=frozen)
    return make if cls is None else make(cls)


def _make_record(cls: type, *, eq: bool, frozen: bool) -> type:
    own = cls.__dict__
    had_doc = bool(own.get("__doc__"))
    explicit_hash = "__hash__" in own and not (own["__hash__"] is None and "__eq__" in own)
    for base in cls.__mro__[1:]:
        if "__dataclass_fields__" in base.__dict__ and (base.__setattr__ is _frozen_setattr) != frozen:
            raise TypeError(f"record {cls.__qualname__} (frozen={frozen}) cannot extend {base.__qualname__} "
                            f"(frozen={not frozen})")
    if frozen and ("__setattr__" in own or "__delattr__" in own):
        raise TypeError(f"record {cls.__qualname__} is frozen: it cannot define __setattr__ or __delattr__")
    cls = dataclasses.dataclass(cls, init=False, repr=False, eq=False)
    fields = dataclasses.fields(cls)
    if len(fields) != len(cls.__dataclass_fields__) or any(f.kw_only for f in fields):
        raise TypeError(f"record {cls.__qualname__}: InitVar, ClassVar and keyword-only fields are not handled")
    if "__init__" not in own:
        cls.__init__ = _init_method(cls, fields, frozen)
        if not had_doc:  # as dataclass words a class without a docstring, from the signature
            cls.__doc__ = cls.__name__ + str(inspect.signature(cls)).replace(" -> None", "")
    if "__repr__" not in own:
        cls.__repr__ = _record_repr
    if eq:
        compared = tuple(f.name for f in fields if f.compare)
        cls.__record_compared__ = _values_of(compared)
        if "__eq__" not in own:
            cls.__eq__ = _record_eq
        if not explicit_hash and frozen:
            hashed = tuple(f.name for f in fields if (f.compare if f.hash is None else f.hash))
            cls.__record_hashed__ = _values_of(hashed)
            cls.__hash__ = _record_hash
        elif not explicit_hash:
            cls.__hash__ = None
    if frozen:
        cls.__setattr__ = _frozen_setattr
        cls.__delattr__ = _frozen_delattr
    return cls


class _Factory:
    """A parameter left to its field's ``default_factory``, as dataclass marks it (and shows it in
    the signature)."""

    def __repr__(self) -> str:
        return "<factory>"


_FACTORY = _Factory()


def _init_method(cls: type, fields: tuple[dataclasses.Field, ...], frozen: bool) -> Any:
    """The ``__init__`` ``@dataclass`` generates for `fields`, compiled from its text as dataclass
    compiles it: in the class's module (whose names its annotations read), the defaults and
    factories handed in as a closure."""
    self = "__record_self__" if any(f.name == "self" for f in fields) else "self"
    closure: dict[str, Any] = {"__record_factory__": _FACTORY, "__record_set__": object.__setattr__}
    # A frozen record's fields are stored straight into its instance dict: what dataclass's
    # ``object.__setattr__`` for each field does when no field's name is a data descriptor of the
    # class (else each goes through ``object.__setattr__``); 1.24 → 0.49 µs for eleven fields.
    into_dict = frozen and not any(hasattr(type(getattr(cls, f.name, None)), "__set__") for f in fields)
    params, body = [self], [f"__record_dict__ = {self}.__dict__"] if into_dict else []
    for f in fields:
        default = f"__record_default_{f.name}__"
        has_factory = f.default_factory is not dataclasses.MISSING
        if has_factory:
            closure[default] = f.default_factory
        elif f.default is not dataclasses.MISSING:
            closure[default] = f.default
        if f.init:
            params.append(f"{f.name}=__record_factory__" if has_factory
                          else f"{f.name}={default}" if default in closure else f.name)
            value = f"{default}() if {f.name} is __record_factory__ else {f.name}" if has_factory else f.name
        elif has_factory:
            value = f"{default}()"
        else:
            continue  # the class attribute holds its default (or nothing sets it)
        if into_dict:
            body.append(f"__record_dict__[{f.name!r}] = {value}")
        else:
            body.append(f"__record_set__({self}, {f.name!r}, {value})" if frozen else f"{self}.{f.name} = {value}")
    if hasattr(cls, "__post_init__"):
        body.append(f"{self}.__post_init__()")
    text = (f"def __record_init__({', '.join(closure)}):\n"
            f" def __init__({', '.join(params)}):\n" + "".join(f"  {line}\n" for line in body or ["pass"])
            + " return __init__")
    module = sys.modules.get(cls.__module__)
    made: dict[str, Any] = {}
    exec(text, vars(module) if module else {}, made)
    init = made["__record_init__"](**closure)
    init.__qualname__ = f"{cls.__qualname__}.__init__"
    init.__annotations__ = {f.name: f.type for f in fields if f.init} | {"return": None}
    return init


def _values_of(names: tuple[str, ...]) -> Callable[[Any], tuple]:
    """A function giving a record's fields `names` as a tuple, as the generated ``__eq__`` and
    ``__hash__`` of a dataclass build it."""
    if len(names) == 1:
        one = attrgetter(names[0])
        return lambda record: (one(record),)
    return attrgetter(*names) if names else lambda record: ()


@recursive_repr()
def _record_repr(self: Any) -> str:
    shown = ", ".join(f"{f.name}={getattr(self, f.name)!r}" for f in dataclasses.fields(self) if f.repr)
    return f"{self.__class__.__qualname__}({shown})"


def _record_eq(self: Any, other: Any) -> Any:
    if other.__class__ is self.__class__:
        values = self.__class__.__record_compared__
        return values(self) == values(other)
    return NotImplemented


def _record_hash(self: Any) -> int:
    return hash(self.__class__.__record_hashed__(self))


def _frozen_setattr(self: Any, name: str, value: Any) -> None:
    raise dataclasses.FrozenInstanceError(f"cannot assign to field {name!r}")


def _frozen_delattr(self: Any, name: str) -> None:
    raise dataclasses.FrozenInstanceError(f"cannot delete field {name!r}")
