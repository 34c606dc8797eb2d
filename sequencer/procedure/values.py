"""Values written in a procedure, kept as templates until the plan gives their variables values.

* a plain YAML scalar (``40 mV``, ``3``, ``true``, ``x1``) is a :class:`Literal`;
* a string that is one ``{expression}`` is an :class:`Expr` and takes the expression's value;
* a string with ``{expression}`` parts among text (``trace_{output}``) is an :class:`Interp`, always
  text; ``{{`` and ``}}`` stand for literal braces;
* a list is a :class:`ListOf`; ``{linspace: [start, stop, count]}`` and ``{range: [start, stop, step]}``
  (stop included when it falls on a step) are series, allowed where a list of values is.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from drivers.errors import Location, Problem
from drivers.yamlsafe import YamlMap, YamlSeq

from .evaluate import describe, evaluate, is_number
from .expressions import MAX_TEXT, Attr, ExpressionError, Name, Node, names_in, parse_expression
from .units import Quantity, clean, format_number, read_quantity

MAX_SERIES = 10_000


class TemplateError(ValueError):
    """A template could not be resolved; carries the location to report."""

    def __init__(self, location: Location, message: str) -> None:
        super().__init__(message)
        self.problem = Problem(location, message)


@dataclass(frozen=True)
class Template:
    location: Location


@dataclass(frozen=True)
class Literal(Template):
    value: Any


@dataclass(frozen=True)
class Expr(Template):
    text: str
    node: Node
    start: int = 0  # offset of the expression inside ``text``


@dataclass(frozen=True)
class Interp(Template):
    text: str
    parts: tuple[str | Expr, ...]


@dataclass(frozen=True)
class ListOf(Template):
    items: tuple[Template, ...]


@dataclass(frozen=True)
class Series(Template):
    how: str  # "linspace" | "range"
    start: Template
    stop: Template
    third: Template  # count (linspace) or step (range)


def expression_problem(
    location: Location, text: str, exc: ExpressionError, start: int = 0
) -> Problem:
    """``file:line:col: message (at offset N in 'text')``."""
    return Problem(location, f"{exc.message} (at offset {exc.offset + start} in {text!r})")


def split_braces(text: str) -> list[str | tuple[int, str]]:
    """Text parts and ``(offset, expression)`` parts of ``text``."""
    parts: list[str | tuple[int, str]] = []
    buf: list[str] = []
    i = 0
    while i < len(text):
        c = text[i]
        if c in "{}" and text[i : i + 2] in ("{{", "}}"):
            buf.append(c)
            i += 2
        elif c == "{":
            end = text.find("}", i + 1)
            if end < 0:
                raise ExpressionError("'{' without its closing '}'", i)
            if buf:
                parts.append("".join(buf))
                buf = []
            parts.append((i + 1, text[i + 1 : end]))
            i = end + 1
        elif c == "}":
            raise ExpressionError("'}' without its opening '{' (write '}}' for a brace)", i)
        else:
            buf.append(c)
            i += 1
    if buf:
        parts.append("".join(buf))
    return parts


def parse_expression_text(text: str, location: Location, problems: list[Problem]) -> Expr | None:
    """A bare expression (``when:``); surrounding braces are allowed."""
    stripped = text.strip()
    start = text.find(stripped)
    if stripped.startswith("{") and stripped.endswith("}") and "}" not in stripped[1:-1]:
        stripped, start = stripped[1:-1], start + 1
    try:
        return Expr(location, text, parse_expression(stripped), start)
    except ExpressionError as exc:
        problems.append(expression_problem(location, text, exc, start))
        return None


def parse_value(
    raw: Any, location: Location, problems: list[Problem], *, series: bool = False
) -> Template | None:
    """Template of a YAML value; problems are appended (and None returned) on bad syntax."""
    if isinstance(raw, YamlSeq):
        items = [parse_value(v, raw.where(i), problems, series=False) for i, v in enumerate(raw)]
        if any(item is None for item in items):
            return None
        return ListOf(location, tuple(i for i in items if i is not None))
    if isinstance(raw, YamlMap | Mapping):
        return _parse_series(raw, location, problems) if series else _not_here(location, problems)
    if isinstance(raw, float) and not math.isfinite(raw):
        problems.append(Problem(location, "a value must be a finite number"))
        return None
    if not isinstance(raw, str) or ("{" not in raw and "}" not in raw):
        return Literal(location, raw)
    try:
        parts = split_braces(raw)
    except ExpressionError as exc:
        problems.append(expression_problem(location, raw, exc))
        return None
    built: list[str | Expr] = []
    for part in parts:
        if isinstance(part, str):
            built.append(part)
            continue
        offset, text = part
        try:
            built.append(Expr(location, raw, parse_expression(text), offset))
        except ExpressionError as exc:
            problems.append(expression_problem(location, raw, exc, offset))
            return None
    if len(built) == 1 and isinstance(built[0], Expr):
        return built[0]
    return Interp(location, raw, tuple(built))


def _not_here(location: Location, problems: list[Problem]) -> None:
    problems.append(Problem(location, "expected a value or a list here, not a mapping"))
    return None


def _parse_series(
    raw: Mapping[str, Any], location: Location, problems: list[Problem]
) -> Template | None:
    keys = list(raw)
    if len(keys) != 1 or keys[0] not in ("linspace", "range"):
        problems.append(
            Problem(
                location,
                "a series is {linspace: [start, stop, count]} or {range: [start, stop, step]}",
            )
        )
        return None
    how = keys[0]
    body = raw[how]
    where = raw.where(how) if isinstance(raw, YamlMap) else location
    if not isinstance(body, list) or len(body) != 3:
        problems.append(
            Problem(
                where,
                f"{how} needs three values: [start, stop, {'count' if how == 'linspace' else 'step'}]",
            )
        )
        return None
    items = [
        parse_value(v, body.where(i) if isinstance(body, YamlSeq) else where, problems)
        for i, v in enumerate(body)
    ]
    if any(i is None for i in items):
        return None
    start, stop, third = items
    assert start is not None and stop is not None and third is not None
    return Series(location, how, start, stop, third)


def references(template: Template | None) -> list[tuple[Expr, Node]]:
    """Every (expression, name-or-attribute node) the template reads."""
    if template is None:
        return []
    if isinstance(template, Expr):
        found: list[tuple[Expr, Node]] = []
        for name in names_in(template.node):
            found.append((template, name))
        for attr in _attrs(template.node):
            found.append((template, attr))
        return found
    if isinstance(template, Interp):
        return [r for p in template.parts if isinstance(p, Expr) for r in references(p)]
    if isinstance(template, ListOf):
        return [r for item in template.items for r in references(item)]
    if isinstance(template, Series):
        return references(template.start) + references(template.stop) + references(template.third)
    return []


def _attrs(node: Node) -> list[Attr]:
    found: list[Attr] = []
    stack = [node]
    while stack:
        item = stack.pop()
        if isinstance(item, Attr):
            found.append(item)
        stack.extend(v for v in vars(item).values() if isinstance(v, Node))
        stack.extend(
            v for t in vars(item).values() if isinstance(t, tuple) for v in t if isinstance(v, Node)
        )
    return found


def as_param(value: Any) -> Any:
    """A literal text with a unit becomes a :class:`Quantity`; lists convert item by item."""
    if isinstance(value, str):
        read = read_quantity(value)
        return read if isinstance(read, Quantity) else value
    if isinstance(value, list | tuple):
        return [as_param(v) for v in value]
    return value


def resolve(template: Template, env: Mapping[str, Any]) -> Any:
    """Value of ``template`` with the variables in ``env``; :class:`TemplateError` when it fails."""
    if isinstance(template, Literal):
        return template.value
    if isinstance(template, Expr):
        try:
            return evaluate(template.node, env)
        except ExpressionError as exc:
            raise TemplateError(
                template.location,
                expression_problem(template.location, template.text, exc, template.start).message,
            ) from None
    if isinstance(template, Interp):
        return _interpolate(template, env)
    if isinstance(template, ListOf):
        return [resolve(item, env) for item in template.items]
    if isinstance(template, Series):
        return _series(template, env)
    raise TemplateError(template.location, "unsupported value")


def _interpolate(template: Interp, env: Mapping[str, Any]) -> str:
    """The text of ``template``, refused as soon as it grows past MAX_TEXT characters."""
    out: list[str] = []
    size = 0
    for part in template.parts:
        text = part if isinstance(part, str) else as_text(resolve(part, env))
        size += len(text)
        if size > MAX_TEXT:
            raise TemplateError(template.location, f"text longer than {MAX_TEXT} characters")
        out.append(text)
    return "".join(out)


def as_text(value: Any) -> str:
    """Text of a value inside an interpolated string (``40mV``, ``3``, ``x5``)."""
    if isinstance(value, Quantity):
        return value.compact()
    if isinstance(value, bool | int | float):
        return format_number(value)
    if isinstance(value, list | tuple):
        return ",".join(as_text(v) for v in value)
    return str(value)


def _series(t: Series, env: Mapping[str, Any]) -> list[Any]:
    start, stop, third = (as_param(resolve(x, env)) for x in (t.start, t.stop, t.third))
    if not _same(start, stop):
        raise TemplateError(
            t.location,
            f"{t.how}: start and stop must be alike, got {describe(start)} and {describe(stop)}",
        )
    if t.how == "linspace":
        if not is_number(third) or int(third) != third or not 1 <= third <= MAX_SERIES:
            raise TemplateError(
                t.third.location, f"linspace count must be a whole number from 1 to {MAX_SERIES}"
            )
        n = int(third)
        steps = [i / (n - 1) if n > 1 else 0.0 for i in range(n)]
        return [_between(start, stop, f) for f in steps]
    if not _same(start, third):
        raise TemplateError(
            t.third.location, f"range step must be like start, got {describe(third)}"
        )
    a, b, step = (x.si if isinstance(x, Quantity) else x for x in (start, stop, third))
    if step == 0 or (b - a) * step < 0:
        raise TemplateError(t.third.location, "range step is zero or points away from stop")
    count = (b - a) / step + 1e-9  # counted before anything is built
    if not math.isfinite(count) or count >= MAX_SERIES:
        shown = f"{math.floor(count) + 1:,}" if math.isfinite(count) else "endless"
        raise TemplateError(t.location, f"range has {shown} values, above {MAX_SERIES}")
    n = math.floor(count) + 1
    if n > MAX_SERIES:
        raise TemplateError(t.location, f"range has {n} values, above {MAX_SERIES}")
    if is_number(start) and all(isinstance(x, int) for x in (start, stop, third)):
        return [start + i * third for i in range(n)]
    return [_between(start, stop, (i * step) / (b - a) if b != a else 0.0) for i in range(n)]


def _same(a: Any, b: Any) -> bool:
    if is_number(a) and is_number(b):
        return True
    return isinstance(a, Quantity) and isinstance(b, Quantity) and a.dimension == b.dimension


def _between(start: Any, stop: Any, fraction: float) -> Any:
    if isinstance(start, Quantity):
        return Quantity(
            clean(start.si + (stop.si - start.si) * fraction), start.dimension, start.unit
        )
    return clean(start + (stop - start) * fraction)


def is_name_ref(template: Template | None) -> str | None:
    """The variable name when the template is exactly ``{name}``."""
    if isinstance(template, Expr) and isinstance(template.node, Name):
        return template.node.name
    return None
