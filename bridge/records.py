"""Copies of frozen records, made cheaply where a solver makes them in its loops."""

from __future__ import annotations

from collections.abc import Iterable
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
