"""Evaluation of parsed expressions over numbers, quantities, strings, lists and the board namespace.

Rules: ``+``/``-`` need operands of one kind (two numbers, or two quantities of one dimension: a bare
number is not added to ``40 mV``); ``*`` and ``/`` scale a quantity by a number, and a quantity divided
by one of its own dimension is a plain number; comparisons follow the same rules; ``and``/``or``/``not``
take booleans only (no truthiness).  Division by zero, NaN and infinity are errors.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from .expressions import (
    MAX_INTEGER,
    MAX_TEXT,
    Attr,
    Binary,
    Call,
    Const,
    ExpressionError,
    Index,
    ListOf,
    Name,
    Node,
    Unary,
)
from .units import Quantity, clean, format_number, unit_factor

MAX_LIST = 10_000


def describe(value: Any) -> str:
    """A short text of a value for error messages."""
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int | float):
        return f"the number {format_number(value)}"
    if isinstance(value, Quantity):
        return f"the {value.dimension} quantity {value}"
    if isinstance(value, str):
        return f"the text {value!r}"
    if isinstance(value, Sequence):
        return "a list"
    if isinstance(value, Mapping):
        return "a namespace"
    return type(value).__name__


def is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _finite(value: Any, offset: int) -> Any:
    """``value`` if within the bounds every result keeps: finite, whole numbers up to 2**53 (larger
    ones continue as floats), text up to MAX_TEXT characters."""
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) > MAX_INTEGER:
        try:
            value = float(value)
        except OverflowError:
            raise ExpressionError("result is not a finite number", offset) from None
    if isinstance(value, float) and not math.isfinite(value):
        raise ExpressionError("result is not a finite number", offset)
    if isinstance(value, Quantity) and not math.isfinite(value.si):
        raise ExpressionError("result is not a finite number", offset)
    if isinstance(value, str) and len(value) > MAX_TEXT:
        raise ExpressionError(f"text longer than {MAX_TEXT} characters", offset)
    return value


def _bounded_concat(a: str, b: str, offset: int) -> str:
    """``a + b``, refused before it is built when longer than MAX_TEXT."""
    if len(a) + len(b) > MAX_TEXT:
        raise ExpressionError(f"text longer than {MAX_TEXT} characters", offset)
    return a + b


def _same_kind(op: str, a: Any, b: Any, offset: int) -> None:
    if is_number(a) and is_number(b):
        return
    if isinstance(a, Quantity) and isinstance(b, Quantity) and a.dimension == b.dimension:
        return
    if isinstance(a, str) and isinstance(b, str) and op in ("+", "==", "!=", "<", "<=", ">", ">="):
        return
    hint = (
        " (write the number with a unit)"
        if isinstance(a, Quantity) or isinstance(b, Quantity)
        else ""
    )
    raise ExpressionError(f"cannot apply {op!r} to {describe(a)} and {describe(b)}{hint}", offset)


def _magnitude(value: Any) -> Any:
    return value.si if isinstance(value, Quantity) else value


def _arith(op: str, a: Any, b: Any, offset: int) -> Any:
    if op in ("+", "-"):
        _same_kind(op, a, b, offset)
        if isinstance(a, Quantity):
            si = a.si + b.si if op == "+" else a.si - b.si
            return Quantity(clean(si), a.dimension, a.unit)
        if isinstance(a, str):
            return _bounded_concat(a, b, offset)
        return a + b if op == "+" else a - b
    if op == "*":
        if is_number(a) and is_number(b):
            return a * b
        if isinstance(a, Quantity) and is_number(b):
            return Quantity(clean(a.si * b), a.dimension, a.unit)
        if is_number(a) and isinstance(b, Quantity):
            return Quantity(clean(b.si * a), b.dimension, b.unit)
        raise ExpressionError(f"cannot multiply {describe(a)} by {describe(b)}", offset)
    if b == 0 or (isinstance(b, Quantity) and b.si == 0):
        raise ExpressionError("division by zero", offset)
    if is_number(a) and is_number(b):
        return a / b
    if isinstance(a, Quantity) and is_number(b):
        return Quantity(clean(a.si / b), a.dimension, a.unit)
    if isinstance(a, Quantity) and isinstance(b, Quantity) and a.dimension == b.dimension:
        return clean(a.si / b.si)
    raise ExpressionError(f"cannot divide {describe(a)} by {describe(b)}", offset)


def _compare(op: str, a: Any, b: Any, offset: int) -> bool:
    if op in ("==", "!="):
        if isinstance(a, bool) or isinstance(b, bool):
            equal = a is b
        elif isinstance(a, Quantity) or isinstance(b, Quantity) or (is_number(a) and is_number(b)):
            _same_kind(op, a, b, offset)
            equal = math.isclose(_magnitude(a), _magnitude(b), rel_tol=1e-12, abs_tol=0.0)
        else:
            equal = a == b
        return equal if op == "==" else not equal
    _same_kind(op, a, b, offset)
    x, y = _magnitude(a), _magnitude(b)
    return {"<": x < y, "<=": x <= y, ">": x > y, ">=": x >= y}[op]


def _boolean(value: Any, offset: int, what: str) -> bool:
    if not isinstance(value, bool):
        raise ExpressionError(f"{what} needs a boolean, got {describe(value)}", offset)
    return value


def _rounding(fn: Callable[[float], Any], name: str) -> Callable[[list[Any], int], Any]:
    def apply(args: list[Any], offset: int) -> Any:
        if len(args) != 1:
            raise ExpressionError(f"{name}() takes one argument", offset)
        (x,) = args
        if isinstance(x, Quantity):
            factor = unit_factor(x.unit)
            return Quantity(clean(fn(x.si / factor) * factor), x.dimension, x.unit)
        if not is_number(x):
            raise ExpressionError(f"{name}() needs a number, got {describe(x)}", offset)
        return int(fn(x))

    return apply


def _extreme(pick: Callable[..., Any], name: str) -> Callable[[list[Any], int], Any]:
    def apply(args: list[Any], offset: int) -> Any:
        if len(args) == 1 and isinstance(args[0], list | tuple):
            args = list(args[0])
        if not args:
            raise ExpressionError(f"{name}() needs at least one value", offset)
        for other in args[1:]:
            _same_kind(name, args[0], other, offset)
        return pick(args, key=_magnitude)

    return apply


def _abs(args: list[Any], offset: int) -> Any:
    if len(args) != 1:
        raise ExpressionError("abs() takes one argument", offset)
    (x,) = args
    if isinstance(x, Quantity):
        return Quantity(abs(x.si), x.dimension, x.unit)
    if not is_number(x):
        raise ExpressionError(f"abs() needs a number, got {describe(x)}", offset)
    return abs(x)


def _sqrt(args: list[Any], offset: int) -> Any:
    if len(args) != 1 or not is_number(args[0]):
        raise ExpressionError("sqrt() takes one plain number", offset)
    if args[0] < 0:
        raise ExpressionError("sqrt() of a negative number", offset)
    return math.sqrt(args[0])


def _len(args: list[Any], offset: int) -> Any:
    if len(args) != 1 or not isinstance(args[0], list | tuple | str):
        raise ExpressionError("len() takes one list", offset)
    return len(args[0])


_FUNCTIONS: Mapping[str, Callable[[list[Any], int], Any]] = {
    "min": _extreme(min, "min"),
    "max": _extreme(max, "max"),
    "abs": _abs,
    "round": _rounding(round, "round"),
    "floor": _rounding(math.floor, "floor"),
    "ceil": _rounding(math.ceil, "ceil"),
    "sqrt": _sqrt,
    "len": _len,
}


def evaluate(node: Node, env: Mapping[str, Any]) -> Any:
    """Value of ``node`` with the names in ``env``; :class:`ExpressionError` with an offset."""
    if isinstance(node, Const):
        return node.value
    if isinstance(node, Name):
        if node.name not in env:
            raise ExpressionError(f"unknown name {node.name!r}", node.offset)
        return env[node.name]
    if isinstance(node, Unary):
        value = evaluate(node.operand, env)
        if node.op == "not":
            return not _boolean(value, node.offset, "'not'")
        if node.op == "-":
            return (
                _arith("*", value, -1, node.offset)
                if not isinstance(value, str)
                else _bad(node, value)
            )
        return (
            _arith("*", value, 1, node.offset) if not isinstance(value, str) else _bad(node, value)
        )
    if isinstance(node, Binary):
        return _binary(node, env)
    if isinstance(node, Call):
        args = [evaluate(a, env) for a in node.args]
        return _finite(_FUNCTIONS[node.function](args, node.offset), node.offset)
    if isinstance(node, Attr):
        target = evaluate(node.target, env)
        if not isinstance(target, Mapping) or node.name not in target:
            raise ExpressionError(f"{describe(target)} has no field {node.name!r}", node.offset)
        return target[node.name]
    if isinstance(node, Index):
        return _index(evaluate(node.target, env), evaluate(node.index, env), node.offset)
    if isinstance(node, ListOf):
        return [evaluate(item, env) for item in node.items]
    raise ExpressionError("unsupported expression", node.offset)


def _bad(node: Unary, value: Any) -> Any:
    raise ExpressionError(f"cannot apply {node.op!r} to {describe(value)}", node.offset)


def _binary(node: Binary, env: Mapping[str, Any]) -> Any:
    left = evaluate(node.left, env)
    if node.op in ("and", "or"):
        first = _boolean(left, node.offset, repr(node.op))
        if (node.op == "and" and not first) or (node.op == "or" and first):
            return first
        return _boolean(evaluate(node.right, env), node.right.offset, repr(node.op))
    right = evaluate(node.right, env)
    if node.op == "in":
        if not isinstance(right, list | tuple):
            raise ExpressionError(
                f"'in' needs a list on its right, got {describe(right)}", node.offset
            )
        return any(
            _compare("==", left, item, node.offset)
            for item in right
            if type(item) is type(left) or (is_number(item) and is_number(left))
        )
    if node.op in ("==", "!=", "<", "<=", ">", ">="):
        return _compare(node.op, left, right, node.offset)
    if isinstance(left, list | tuple) or isinstance(right, list | tuple):
        raise ExpressionError(f"cannot apply {node.op!r} to a list", node.offset)
    return _finite(_arith(node.op, left, right, node.offset), node.offset)


def _index(target: Any, key: Any, offset: int) -> Any:
    if isinstance(target, Mapping):
        if key not in target:
            known = ", ".join(map(str, target)) or "none"
            raise ExpressionError(f"no entry {key!r} (known: {known})", offset)
        return target[key]
    if isinstance(target, list | tuple):
        if (
            not isinstance(key, int)
            or isinstance(key, bool)
            or not -len(target) <= key < len(target)
        ):
            raise ExpressionError(f"index {key!r} outside the list of {len(target)}", offset)
        return target[key]
    raise ExpressionError(f"cannot index {describe(target)}", offset)
