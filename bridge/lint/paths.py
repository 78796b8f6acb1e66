"""Lint rules: the paths family (being written)."""

from __future__ import annotations

from .rule import Rule

RULES: tuple[Rule, ...] = ()
CODES: dict[str, str] = {}
