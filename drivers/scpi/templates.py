"""Command templates with safe arithmetic: ``"CHANnel{input}:SCALe {volts / 8:.6g}"``.

A template is text with fields in braces, as in Python's format strings: ``{name}``, ``{name:spec}``,
or an arithmetic expression over names, ``{points / hertz / 10:.6g}``.  ``{{`` and ``}}`` are
literal braces.  Expressions are checked once, when the dialect is loaded, against a whitelist of
syntax (numbers, names, ``+ - * / // % **``, comparisons, ``and``/``or``/``not``, ``x if c else y``,
bitwise ``& | ^ << >>`` for status words, and the functions ``abs min max round int float floor
ceil``) and evaluated with simpleeval (a well-kept evaluator over Python's ``ast``; never ``eval``).
Every result is bounded in magnitude (:data:`MAX_MAGNITUDE`), so a typo cannot send 1e300 volts.

Pure functions, no I/O: used by the dialect loader and the role drivers.
"""

from __future__ import annotations

import ast
import math
import string
from collections.abc import Mapping
from dataclasses import dataclass
from dataclasses import field as dataclass_field
from typing import Any

import simpleeval

#: Largest magnitude an expression may produce (or pass through); above it the value is refused.
MAX_MAGNITUDE = 1e18
MAX_EXPRESSION_CHARS = 200
MAX_NODES = 64

FUNCTIONS: dict[str, Any] = {
    "abs": abs,
    "min": min,
    "max": max,
    "round": round,
    "int": int,
    "float": float,
    "floor": math.floor,
    "ceil": math.ceil,
}

_ALLOWED = (
    ast.Expression, ast.BinOp, ast.UnaryOp, ast.BoolOp, ast.Compare, ast.IfExp, ast.Call,
    ast.Name, ast.Load, ast.Constant,
    ast.Add, ast.Sub, ast.Mult, ast.Div, ast.FloorDiv, ast.Mod, ast.Pow,
    ast.BitAnd, ast.BitOr, ast.BitXor, ast.LShift, ast.RShift, ast.Invert,
    ast.USub, ast.UAdd, ast.Not, ast.And, ast.Or,
    ast.Eq, ast.NotEq, ast.Lt, ast.LtE, ast.Gt, ast.GtE,
)  # fmt: skip


class ExpressionError(ValueError):
    """An expression that is not allowed, or that cannot be evaluated; the message says why."""


@dataclass(frozen=True)
class Expression:
    """One checked expression and the names it reads."""

    text: str
    names: frozenset[str]
    #: simpleeval's parse of ``text``, made once when the file loads (parsing was two thirds of an
    #: evaluation: a template with arithmetic is rendered at every setting the driver sends)
    tree: Any = dataclass_field(default=None, compare=False, repr=False)

    def evaluate(self, values: Mapping[str, Any]) -> Any:
        """The value over ``values``; bounded, finite numbers only (strings only as a bare name)."""
        if self.text in values:  # a bare name: the common case, looked up once (no evaluator)
            return values[self.text]
        missing = sorted(n for n in self.names if n not in values)
        if missing:
            raise ExpressionError(f"{self.text!r}: no value for {', '.join(missing)}")
        for name in self.names:
            _check_number(name, values[name])
        evaluator = simpleeval.SimpleEval(names=dict(values), functions=FUNCTIONS)
        try:
            result = evaluator.eval(self.text, previously_parsed=self.tree)
        except (ArithmeticError, ValueError, TypeError, simpleeval.InvalidExpression) as exc:
            raise ExpressionError(f"{self.text!r}: {exc}") from None
        return _check_number(self.text, result)


def compile_expression(text: str, allowed: frozenset[str] | set[str]) -> Expression:
    """Check ``text`` against the whitelist and ``allowed`` names; raises :class:`ExpressionError`."""
    source = text.strip()
    if not source:
        raise ExpressionError("empty expression")
    if len(source) > MAX_EXPRESSION_CHARS:
        raise ExpressionError(f"expression longer than {MAX_EXPRESSION_CHARS} characters")
    try:
        tree = ast.parse(source, mode="eval")
    except SyntaxError as exc:
        raise ExpressionError(f"{source!r} is not an expression ({exc.msg})") from None
    nodes = list(ast.walk(tree))
    if len(nodes) > MAX_NODES:
        raise ExpressionError(f"{source!r} has more than {MAX_NODES} parts")
    names: set[str] = set()
    for node in nodes:
        if not isinstance(node, _ALLOWED):
            raise ExpressionError(f"{source!r}: {type(node).__name__} is not allowed here")
        if isinstance(node, ast.Constant) and not isinstance(node.value, int | float):
            raise ExpressionError(f"{source!r}: only numbers may be written in an expression")
        if isinstance(node, ast.Call):
            if not isinstance(node.func, ast.Name) or node.func.id not in FUNCTIONS:
                raise ExpressionError(
                    f"{source!r}: only the functions {', '.join(FUNCTIONS)} may be called"
                )
            if node.keywords:
                raise ExpressionError(f"{source!r}: functions take positional arguments only")
        elif isinstance(node, ast.Name) and not _is_called(node, nodes):
            names.add(node.id)
    unknown = sorted(names - set(allowed))
    if unknown:
        offer = ", ".join(sorted(allowed)) or "none"
        raise ExpressionError(f"unknown name {', '.join(unknown)} (known here: {offer})")
    return Expression(source, frozenset(names), simpleeval.SimpleEval.parse(source))


def _is_called(name: ast.Name, nodes: list[ast.AST]) -> bool:
    return any(isinstance(n, ast.Call) and n.func is name for n in nodes)


def _check_number(what: str, value: Any) -> Any:
    if isinstance(value, bool):
        return value
    if not isinstance(value, int | float):
        raise ExpressionError(f"{what}: {value!r} is not a number")
    if abs(value) > MAX_MAGNITUDE or not math.isfinite(value):  # big ints first: no overflow
        raise ExpressionError(f"{what}: the value is not finite or above {MAX_MAGNITUDE:g}")
    return value


@dataclass(frozen=True)
class Field:
    expression: Expression
    spec: str


#: Texts a template keeps (see :meth:`Template.render`); past this it renders without keeping.
MAX_KEPT_RENDERS = 256
#: Value types whose equal values always print the same (a float zero aside: ``-0.0 == 0.0``).
_KEYED_TYPES = frozenset({int, float, str, bool})
_ABSENT = object()


@dataclass(frozen=True)
class Template:
    """A checked command template: literal text and fields, in order."""

    text: str
    parts: tuple[str | Field, ...]
    #: Texts rendered before, by the values read (:meth:`render`).  Lives and dies with the
    #: template: a reloaded dialect compiles new templates, so nothing kept outlives its file.
    _kept: dict[tuple[Any, ...], str] = dataclass_field(
        default_factory=dict, init=False, compare=False, repr=False
    )
    #: The value names a render reads (every field's expression text, by which a bare name is
    #: looked up, and the names in it) when a field computes; None when every field is a bare name
    #: (then a lookup and a format cost less than building a key: nothing is kept).
    _reads: tuple[str, ...] | None = dataclass_field(
        default=None, init=False, compare=False, repr=False
    )

    def __post_init__(self) -> None:
        fields = [part for part in self.parts if isinstance(part, Field)]
        if all(f.expression.names == {f.expression.text} for f in fields) and fields:
            return
        reads: list[str] = []
        for f in fields:
            for name in (f.expression.text, *sorted(f.expression.names)):
                if name not in reads:
                    reads.append(name)
        object.__setattr__(self, "_reads", tuple(reads))

    @property
    def names(self) -> frozenset[str]:
        out: set[str] = set()
        for part in self.parts:
            if isinstance(part, Field):
                out |= part.expression.names
        return frozenset(out)

    def render(self, values: Mapping[str, Any]) -> str:
        """The command text; booleans as ON/OFF, a field value may not hold ``;`` or a newline.

        A template is data: its render of the same values is the same text.  So a template with
        arithmetic (``{volts / 8:.6g}``: 11 us to evaluate) or with no field at all keeps the text
        by the values it read (each with its type: ``1``, ``1.0`` and ``True`` print differently)
        and gives it again (1 us).  Only values of the plain types are keys, never a float zero
        (``-0.0`` equals ``0.0`` but prints ``-0``); a render that raises keeps nothing.
        """
        if self._reads is None:
            return self._render(values)
        key = self._key(values)
        if key is not None:
            kept = self._kept.get(key)
            if kept is not None:
                return kept
        text = self._render(values)
        if key is not None and len(self._kept) < MAX_KEPT_RENDERS:
            self._kept[key] = text
        return text

    def _key(self, values: Mapping[str, Any]) -> tuple[Any, ...] | None:
        key: list[Any] = []
        for name in self._reads or ():
            value = values.get(name, _ABSENT)
            kind = type(value)
            if kind not in _KEYED_TYPES:
                if value is not _ABSENT:
                    return None
            elif kind is float and not value:
                return None
            key += (kind, value)
        return tuple(key)

    def _render(self, values: Mapping[str, Any]) -> str:
        out: list[str] = []
        for part in self.parts:
            if isinstance(part, str):
                out.append(part)
                continue
            value = part.expression.evaluate(values)
            if isinstance(value, bool):
                value = "ON" if value else "OFF"
            try:
                text = format(value, part.spec)
            except (ValueError, TypeError) as exc:
                raise ExpressionError(
                    f"{{{part.expression.text}:{part.spec}}} cannot format {value!r}: {exc}"
                ) from None
            if ";" in text or "\n" in text or "\r" in text:
                raise ExpressionError(
                    f"{part.expression.text}={value!r}: a command argument may not hold a "
                    "newline or ';'"
                )
            out.append(text)
        return "".join(out)


def compile_template(text: str, allowed: frozenset[str] | set[str]) -> Template:
    """Parse and check a template; raises :class:`ExpressionError` naming the problem."""
    if any(c in text for c in "\r\n"):
        raise ExpressionError("a template may not contain a line break")
    parts: list[str | Field] = []
    try:
        parsed = list(string.Formatter().parse(text))
    except ValueError as exc:
        raise ExpressionError(f"bad template {text!r}: {exc}") from None
    for literal, field, spec, conversion in parsed:
        if literal:
            parts.append(literal)
        if field is None:
            continue
        if conversion is not None:
            raise ExpressionError(f"{{{field}!{conversion}}}: conversions are not allowed")
        if spec and "{" in spec:
            raise ExpressionError(f"{{{field}:{spec}}}: nested fields are not allowed")
        parts.append(Field(compile_expression(field, allowed), spec or ""))
    return Template(text, tuple(parts))
