"""The expression language of procedures: tokenizer and Pratt parser (never Python ``eval``).

Grammar (lowest to highest precedence)::

    expr    := or
    or      := and ("or" and)*
    and     := not ("and" not)*
    not     := "not" not | compare
    compare := sum (("==" | "!=" | "<" | "<=" | ">" | ">=" | "in") sum)*
    sum     := product (("+" | "-") product)*
    product := unary (("*" | "/") unary)*
    unary   := ("-" | "+") unary | postfix
    postfix := atom ("." NAME | "[" expr "]" | "(" args ")")*
    atom    := NUMBER [UNIT] | STRING | NAME | "true" | "false" | "(" expr ")" | "[" items "]"

``40 mV`` is a quantity literal (a number followed by a unit); ``×``, ``÷``, ``−``, ``≤``, ``≥``, ``≠``
are accepted for ``*``, ``/``, ``-``, ``<=``, ``>=``, ``!=``.  Every node carries the character offset
where it starts, so errors point inside the expression.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from .units import UNIT_PATTERN, make_quantity

MAX_LENGTH = 1000
MAX_DEPTH = 40
#: Largest whole number an expression keeps (2**53: beyond it a float is no longer exact, and
#: Python's integers would grow without limit: a parameter squaring itself 30 times has a billion
#: digits).  Fractional values are floats, bounded by being finite.
MAX_INTEGER = 2**53
#: Longest text an expression or an interpolated string may produce (doubling a string 30 times
#: would need gigabytes).
MAX_TEXT = 4096
FUNCTIONS = ("min", "max", "abs", "round", "floor", "ceil", "sqrt", "len")
KEYWORDS = ("and", "or", "not", "in", "true", "false")


class ExpressionError(ValueError):
    """A syntax or evaluation error at ``offset`` characters into the expression."""

    def __init__(self, message: str, offset: int) -> None:
        super().__init__(message)
        self.message = message
        self.offset = offset


@dataclass(frozen=True)
class Token:
    kind: str  # "num", "qty", "str", "name", "op", "end"
    text: str
    offset: int
    value: object = None


@dataclass(frozen=True)
class Node:
    offset: int


@dataclass(frozen=True)
class Const(Node):
    value: object


@dataclass(frozen=True)
class Name(Node):
    name: str


@dataclass(frozen=True)
class Unary(Node):
    op: str
    operand: Node


@dataclass(frozen=True)
class Binary(Node):
    op: str
    left: Node
    right: Node


@dataclass(frozen=True)
class Call(Node):
    function: str
    args: tuple[Node, ...]


@dataclass(frozen=True)
class Attr(Node):
    target: Node
    name: str


@dataclass(frozen=True)
class Index(Node):
    target: Node
    index: Node


@dataclass(frozen=True)
class ListOf(Node):
    items: tuple[Node, ...]


_ALIASES = {"×": "*", "÷": "/", "−": "-", "≤": "<=", "≥": ">=", "≠": "!="}
_TOKEN_RE = re.compile(
    r"(?P<space>\s+)"
    r"|(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)(?:\s*(?P<unit>"
    + UNIT_PATTERN
    + r")(?![\w/]))?"
    r"|(?P<name>[A-Za-z_][A-Za-z0-9_]*)"
    r"|(?P<str>'[^'\\]*'|\"[^\"\\]*\")"
    r"|(?P<op>==|!=|<=|>=|[-+*/()\[\],.<>×÷−≤≥≠])"
)


def tokenize(text: str) -> list[Token]:
    """Split ``text`` into tokens; an unknown character is an :class:`ExpressionError`."""
    if len(text) > MAX_LENGTH:
        raise ExpressionError(f"expression longer than {MAX_LENGTH} characters", 0)
    tokens: list[Token] = []
    pos = 0
    while pos < len(text):
        match = _TOKEN_RE.match(text, pos)
        if match is None:
            raise ExpressionError(f"unexpected character {text[pos]!r}", pos)
        kind = match.lastgroup if match.lastgroup != "unit" else "num"
        if kind == "num":
            number = (
                float(match["num"]) if any(c in match["num"] for c in ".eE") else int(match["num"])
            )
            if isinstance(number, int) and number > MAX_INTEGER:
                number = _as_float(number, pos)  # in floats beyond 2**53 (bounded: finite)
            if match["unit"]:
                tokens.append(Token("qty", match[0], pos, make_quantity(number, match["unit"])))
            else:
                tokens.append(Token("num", match[0], pos, number))
        elif kind == "str":
            tokens.append(Token("str", match[0], pos, match[0][1:-1]))
        elif kind == "op":
            tokens.append(Token("op", _ALIASES.get(match[0], match[0]), pos))
        elif kind == "name":
            tokens.append(Token("name", match[0], pos))
        pos = match.end()
    tokens.append(Token("end", "", len(text)))
    return tokens


def _as_float(number: int, offset: int) -> float:
    try:
        return float(number)
    except OverflowError:
        raise ExpressionError("number too large to be a finite float", offset) from None


# binding powers of infix operators
_INFIX = {
    "or": 1,
    "and": 2,
    "==": 4,
    "!=": 4,
    "<": 4,
    "<=": 4,
    ">": 4,
    ">=": 4,
    "in": 4,
    "+": 5,
    "-": 5,
    "*": 6,
    "/": 6,
}
_POSTFIX_POWER = 8


class _Parser:
    def __init__(self, text: str) -> None:
        self.tokens = tokenize(text)
        self.pos = 0
        self.depth = 0

    @property
    def current(self) -> Token:
        return self.tokens[self.pos]

    def advance(self) -> Token:
        token = self.tokens[self.pos]
        self.pos += 1
        return token

    def expect(self, text: str) -> Token:
        token = self.current
        if token.kind != "op" or token.text != text:
            found = "end of expression" if token.kind == "end" else repr(token.text)
            raise ExpressionError(f"expected {text!r}, found {found}", token.offset)
        return self.advance()

    def parse(self) -> Node:
        node = self.expression(0)
        if self.current.kind != "end":
            raise ExpressionError(f"unexpected {self.current.text!r}", self.current.offset)
        return node

    def expression(self, min_power: int) -> Node:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise ExpressionError(
                f"expression nested deeper than {MAX_DEPTH} levels", self.current.offset
            )
        left = self.prefix()
        while True:
            token = self.current
            op = token.text if token.kind in ("op", "name") else ""
            if token.kind == "op" and op in ("(", "[", ".") and min_power < _POSTFIX_POWER:
                left = self.postfix(left)
                continue
            power = _INFIX.get(op)
            if power is None or power <= min_power:
                break
            self.advance()
            left = Binary(left.offset, op, left, self.expression(power))
        self.depth -= 1
        return left

    def prefix(self) -> Node:
        token = self.advance()
        if token.kind in ("num", "qty", "str"):
            return Const(token.offset, token.value)
        if token.kind == "name":
            if token.text in ("true", "false"):
                return Const(token.offset, token.text == "true")
            if token.text == "not":
                return Unary(token.offset, "not", self.expression(3))
            if token.text in KEYWORDS:
                raise ExpressionError(f"unexpected {token.text!r}", token.offset)
            return Name(token.offset, token.text)
        if token.kind == "op" and token.text in ("-", "+"):
            return Unary(token.offset, token.text, self.expression(7))
        if token.kind == "op" and token.text == "(":
            node = self.expression(0)
            self.expect(")")
            return node
        if token.kind == "op" and token.text == "[":
            return ListOf(token.offset, self.items("]"))
        found = "end of expression" if token.kind == "end" else repr(token.text)
        raise ExpressionError(f"expected a value, found {found}", token.offset)

    def items(self, closing: str) -> tuple[Node, ...]:
        items: list[Node] = []
        if self.current.kind == "op" and self.current.text == closing:
            self.advance()
            return ()
        while True:
            items.append(self.expression(0))
            if self.current.kind == "op" and self.current.text == ",":
                self.advance()
                continue
            self.expect(closing)
            return tuple(items)

    def postfix(self, target: Node) -> Node:
        token = self.advance()
        if token.text == ".":
            name = self.advance()
            if name.kind != "name":
                raise ExpressionError("expected a name after '.'", name.offset)
            return Attr(target.offset, target, name.text)
        if token.text == "[":
            index = self.expression(0)
            self.expect("]")
            return Index(target.offset, target, index)
        if not isinstance(target, Name) or target.name not in FUNCTIONS:
            raise ExpressionError(
                f"only the functions {', '.join(FUNCTIONS)} can be called", target.offset
            )
        return Call(target.offset, target.name, self.items(")"))


def parse_expression(text: str) -> Node:
    """Parse ``text`` into a syntax tree; :class:`ExpressionError` with the offset on bad syntax."""
    if not text.strip():
        raise ExpressionError("empty expression", 0)
    return _Parser(text).parse()


def names_in(node: Node) -> list[Name]:
    """Every variable reference in ``node`` (function names excluded), in order."""
    found: list[Name] = []
    stack: list[Node] = [node]
    while stack:
        item = stack.pop()
        if isinstance(item, Name):
            found.append(item)
        elif isinstance(item, Unary):
            stack.append(item.operand)
        elif isinstance(item, Binary):
            stack.extend((item.right, item.left))
        elif isinstance(item, Call):
            stack.extend(reversed(item.args))
        elif isinstance(item, Attr):
            stack.append(item.target)
        elif isinstance(item, Index):
            stack.extend((item.index, item.target))
        elif isinstance(item, ListOf):
            stack.extend(reversed(item.items))
    return sorted(found, key=lambda n: n.offset)
