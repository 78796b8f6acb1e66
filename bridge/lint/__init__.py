"""Bias lint: the classic bias mistakes of a single-transistor stage, each at its card's line
with a code, a severity and a fix, before (and beside) any simulation.

The contract every rule module keeps (`rule.py`): a rule is a function
``(LintContext) -> list[Finding]`` that reads the Circuit and the solutions in the context,
never netlist text, and returns `vocabulary.Finding`s with `code`, `severity`, `line`
(the card's first line), `column` when it points inside the line, `subject` (the element or
node) and `fix`. Rule modules are one per family; `run.py` runs them over many files.
"""
