"""Every lint rule, by family, in the order their findings are reported for one card."""

from __future__ import annotations

from . import bias, cards, paths, suffixes
from .rule import Rule

# Each family module exposes RULES (its rule functions) and CODES (code → one line on what the
# rule finds, for `--select`/`--ignore` and the README's table).
FAMILIES = (suffixes, cards, paths, bias)
RULES: tuple[Rule, ...] = tuple(rule for family in FAMILIES for rule in family.RULES)
CODES: dict[str, str] = {code: text for family in FAMILIES for code, text in family.CODES.items()}
