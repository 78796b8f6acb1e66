"""Every lint rule, by family, in the order their findings are reported for one card."""

from __future__ import annotations

from . import bias, cards, paths, suffixes
from .rule import Rule

# Each family module exposes RULES (its rule functions) and CODES (code → one line on what the
# rule finds, for `--select`/`--ignore` and the README's table).
FAMILIES = (suffixes, cards, paths, bias)
RULES: tuple[Rule, ...] = tuple(rule for family in FAMILIES for rule in family.RULES)
# The rules that judge the operating point: they run only where the path rules found one can
# exist (a simulator's answer for a circuit with no DC operating point is a fallback, not a bias).
AT_OPERATING_POINT: tuple[Rule, ...] = bias.RULES
NO_OPERATING_POINT = paths.CODES.keys()
CODES: dict[str, str] = {code: text for family in FAMILIES for code, text in family.CODES.items()}
