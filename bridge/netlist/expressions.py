"""`{expr}` / `'expr'` values: a small tree and its evaluation against `.param` values."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping

from bridge.records import record


class ExpressionError(ValueError):
    """An expression that cannot be evaluated; `offset` is its place in the card text."""

    def __init__(self, message: str, offset: int, inside: str | None = None) -> None:
        super().__init__(message)
        self.offset = offset
        self.inside = inside  # the `.func` whose body failed, once the error is moved to its call

    def at_call(self, function: str, offset: int) -> ExpressionError:
        """The same failure, placed at a call of `.func function` in the card being read."""
        if self.inside is not None:
            return ExpressionError(str(self), offset, self.inside)
        return ExpressionError(f"{self} (in the body of `.func {function}`)", offset, function)


@record(frozen=True)
class Literal:
    """A number in an expression (or a plain value), in SI; `offset` is its place in the card text."""

    value: float
    offset: int = 0


@record(frozen=True)
class Reference:
    """A name in an expression, as written: a `.param`, a `.func` argument or `pi`."""

    name: str
    offset: int


@record(frozen=True)
class Unary:
    """A sign before an operand: `-x`."""

    operator: str
    operand: Expr
    offset: int


@record(frozen=True)
class Binary:
    """`left operator right`, the operator one of `+ - * / ^`."""

    operator: str
    left: Expr
    right: Expr
    offset: int


@record(frozen=True)
class Call:
    """A built-in function or a `.func` applied to its arguments: `sqrt(x)`, `f(a, b)`."""

    function: str
    arguments: tuple[Expr, ...]
    offset: int


Expr = Literal | Reference | Unary | Binary | Call


@record(frozen=True)
class UserFunction:
    """A `.func name(args) {body}` definition."""

    name: str
    parameters: tuple[str, ...]
    body: Expr


def _checked_log(x: float) -> float:
    if x <= 0:
        raise ValueError("log of a value that is not positive")
    return math.log(x)


def _checked_sqrt(x: float) -> float:
    if x < 0:
        raise ValueError("sqrt of a negative value")
    return math.sqrt(x)


# name → (function, number of arguments or None for "one or more").
BUILTINS: dict[str, tuple[Callable[..., float], int | None]] = {
    "sqrt": (_checked_sqrt, 1),
    "exp": (math.exp, 1),
    "log": (_checked_log, 1),  # natural log, as in ngspice expressions
    "ln": (_checked_log, 1),
    "log10": (lambda x: _checked_log(x) / math.log(10), 1),
    "abs": (abs, 1),
    # Two arguments, as in ngspice's numparam: it reads `max(x)` as max(x, 1) and `max(a, b, c)`
    # as max(a, c), and refuses a fourth (ngspice 39, measured with `ngspice -b`).
    "min": (min, 2),
    "max": (max, 2),
    "pow": (math.pow, 2),
    "pwr": (lambda x, y: math.copysign(abs(x) ** y, x), 2),
    "sin": (math.sin, 1),
    "cos": (math.cos, 1),
    "tan": (math.tan, 1),
    "atan": (math.atan, 1),
    "sinh": (math.sinh, 1),
    "cosh": (math.cosh, 1),
    "tanh": (math.tanh, 1),
    "floor": (math.floor, 1),
    "ceil": (math.ceil, 1),
    "int": (lambda x: float(int(x)), 1),
    "sgn": (lambda x: float((x > 0) - (x < 0)), 1),
}

CONSTANTS: dict[str, float] = {"pi": math.pi}

_MAX_DEPTH = 64


def evaluate(
    expr: Expr,
    scope: Mapping[str, float],
    functions: Mapping[str, UserFunction] | None = None,
    _depth: int = 0,
    _calling: tuple[str, ...] = (),
) -> float:
    """Value of `expr`; `scope` maps lower-case parameter names to values."""
    if _depth > _MAX_DEPTH:
        raise ExpressionError(f"expression nested more than {_MAX_DEPTH} levels deep", _offset(expr))
    if isinstance(expr, Literal):
        return expr.value
    if isinstance(expr, Reference):
        key = expr.name.lower()
        if key in scope:
            return scope[key]
        if key in CONSTANTS:
            return CONSTANTS[key]
        raise ExpressionError(f"undefined parameter `{expr.name}`", expr.offset)
    functions = functions or {}
    if isinstance(expr, Unary):
        value = evaluate(expr.operand, scope, functions, _depth + 1, _calling)
        return -value if expr.operator == "-" else value
    if isinstance(expr, Binary):
        return _chain(expr, scope, functions, _depth, _calling)
    return _call(expr, scope, functions, _depth, _calling)


def _chain(
    expr: Binary, scope: Mapping[str, float], functions: Mapping[str, UserFunction], depth: int,
    calling: tuple[str, ...],
) -> float:
    """A run of operators grouped to the left (`a + b - c + ...`), folded in a loop: a sum of a
    thousand terms is long, not deeply nested (ngspice 39 reads one; measured with `ngspice -b`)."""
    links: list[Binary] = []
    node: Expr = expr
    while isinstance(node, Binary):
        links.append(node)
        node = node.left
    value = evaluate(node, scope, functions, depth + 1, calling)
    for link in reversed(links):
        value = _binary(link, value, evaluate(link.right, scope, functions, depth + 1, calling))
    return value


def _binary(expr: Binary, left: float, right: float) -> float:
    try:
        if expr.operator == "+":
            result = left + right
        elif expr.operator == "-":
            result = left - right
        elif expr.operator == "*":
            result = left * right
        elif expr.operator == "/":
            result = left / right
        else:
            result = math.pow(left, right)
    except ZeroDivisionError:
        raise ExpressionError("division by zero", expr.offset) from None
    except (OverflowError, ValueError):
        raise ExpressionError(f"`{left:g} {expr.operator} {right:g}` has no real value", expr.offset) from None
    if not math.isfinite(result):
        raise ExpressionError("result is not a finite number", expr.offset)
    return result


def _call(
    expr: Call, scope: Mapping[str, float], functions: Mapping[str, UserFunction], depth: int,
    calling: tuple[str, ...] = (),
) -> float:
    key = expr.function.lower()
    arguments = [evaluate(a, scope, functions, depth + 1, calling) for a in expr.arguments]
    if key in functions:
        user = functions[key]
        if key in calling:  # ngspice 39 crashes on such a netlist (measured with `ngspice -b`)
            cycle = " → ".join((*calling[calling.index(key):], key))
            raise ExpressionError(
                f"`.func {user.name}` calls itself ({cycle}): it has no value", expr.offset, user.name
            )
        if len(arguments) != len(user.parameters):
            raise ExpressionError(
                f"`{expr.function}` takes {len(user.parameters)} argument(s), got {len(arguments)}",
                expr.offset,
            )
        inner = dict(scope)
        inner.update(zip(user.parameters, arguments))
        try:
            return evaluate(user.body, inner, functions, depth + 1, (*calling, key))
        except ExpressionError as exc:
            # The offset of a failure inside the body is in the `.func` card, not in this one:
            # point at the call instead, and name the function where the failure was.
            raise exc.at_call(user.name, expr.offset) from None
    if key not in BUILTINS:
        raise ExpressionError(f"unknown function `{expr.function}`", expr.offset)
    function, arity = BUILTINS[key]
    if (arity is None and not arguments) or (arity is not None and len(arguments) != arity):
        wanted = "at least 1" if arity is None else str(arity)
        raise ExpressionError(
            f"`{expr.function}` takes {wanted} argument(s), got {len(arguments)}{_ngspice_reading(key, arguments)}",
            expr.offset,
        )
    try:
        result = float(function(*arguments))
    except (ValueError, OverflowError) as exc:
        raise ExpressionError(f"`{expr.function}`: {exc}", expr.offset) from None
    if not math.isfinite(result):
        raise ExpressionError(f"`{expr.function}` gives a value that is not finite", expr.offset)
    return result


def _ngspice_reading(function: str, arguments: list[float]) -> str:
    """What ngspice 39 makes of `min`/`max` with one or three arguments (measured with `ngspice -b`),
    so the designer sees why the count matters; nothing for other functions or counts."""
    if function not in ("min", "max") or len(arguments) not in (1, 3):
        return ""
    written = "x" if len(arguments) == 1 else "a, b, c"
    read = "x, 1" if len(arguments) == 1 else "a, c"
    return f": ngspice 39 reads `{function}({written})` as `{function}({read})`; write the two values meant"


def _offset(expr: Expr) -> int:
    return expr.offset


def references(expr: Expr) -> set[str]:
    """Lower-case parameter names an expression reads."""
    if isinstance(expr, Reference):
        return {expr.name.lower()}
    if isinstance(expr, Unary):
        return references(expr.operand)
    if isinstance(expr, Binary):
        return references(expr.left) | references(expr.right)
    if isinstance(expr, Call):
        return set().union(*(references(a) for a in expr.arguments)) if expr.arguments else set()
    return set()
