"""SCPI program-message parsing for the simulated instruments: pure functions, no I/O.

What the simulator needs of IEEE 488.2 and SCPI-1999 (vol. 1 ch. 6-7, clause numbers from memory):

* **Header patterns** written in SCPI notation: the long form with its short form in upper case
  (``VOLTage`` matches ``VOLT`` and ``VOLTAGE``, nothing in between), optional nodes in brackets
  (``[SOURce:]VOLTage[:LEVel][:IMMediate][:AMPLitude]``), numeric suffixes marked ``#``
  (``SENSe:VOLTage#:RANGe`` matches ``SENS:VOLT2:RANG`` with suffix 2; an omitted suffix is 1).
  Matching is case-insensitive.
* **Program messages** split into units at ``;`` outside quotes and parentheses.
* **Parameters** split at top-level commas: decimal numbers (with ``MINimum``/``MAXimum``/``DEFault``),
  booleans (``ON``/``OFF``/numbers), character data in SCPI notation, channel lists ``(@101,103:105)``.

Every failure raises :class:`drivers.errors.InstrumentError` with a standard SCPI code, which the
instrument pushes into its error queue.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

from drivers.errors import InstrumentError

#: Standard SCPI-1999 / IEEE 488.2 error messages (SCPI-1999 vol. 2 ch. 21, from memory).
STANDARD_ERRORS: dict[int, str] = {
    0: "No error",
    -100: "Command error",
    -102: "Syntax error",
    -104: "Data type error",
    -108: "Parameter not allowed",
    -109: "Missing parameter",
    -113: "Undefined header",
    -114: "Header suffix out of range",
    -200: "Execution error",
    -221: "Settings conflict",
    -222: "Data out of range",
    -223: "Too much data",
    -224: "Illegal parameter value",
    -230: "Data corrupt or stale",
    -300: "Device-specific error",
    -310: "System error",
    -350: "Queue overflow",
    -400: "Query error",
}


def scpi_error(code: int, detail: str = "") -> InstrumentError:
    """An :class:`InstrumentError` with the standard message of ``code``.

    ``detail`` is kept on the exception's ``command`` field (for debugging), not in the queue text.
    """
    return InstrumentError(code, STANDARD_ERRORS.get(code, "Device-specific error"), command=detail)


@dataclass(frozen=True)
class Node:
    """One node of a header pattern."""

    long: str
    short: str
    optional: bool
    suffix: bool

    def accepts(self, word: str) -> bool:
        """True if the mnemonic ``word`` (suffix removed, any case) is this node's short or long form."""
        upper = word.upper()
        return upper in (self.short, self.long.upper())


_PATTERN_TOKEN = re.compile(r"\[|\]|:|[*A-Za-z]+#?")
_MNEMONIC = re.compile(r"([A-Za-z][A-Za-z_]*?)(\d*)$")


@dataclass(frozen=True)
class Pattern:
    """A compiled header pattern such as ``[SOURce#:]VOLTage[:LEVel]``."""

    text: str
    nodes: tuple[Node, ...]

    def match(self, words: Sequence[str]) -> tuple[int, ...] | None:
        """Numeric suffixes (one per ``#`` node, 1 when omitted) if ``words`` match, else ``None``.

        A suffix on a node that takes none means no match.
        """
        split = [split_mnemonic(w) for w in words]
        return self._match(0, split, 0, ())

    def _match(
        self, i: int, words: list[tuple[str, int | None]], j: int, got: tuple[int, ...]
    ) -> tuple[int, ...] | None:
        if j == len(words):
            rest = self.nodes[i:]
            if all(n.optional for n in rest):
                return got + tuple(1 for n in rest if n.suffix)
            return None
        if i == len(self.nodes):
            return None
        node = self.nodes[i]
        base, number = words[j]
        if node.accepts(base) and (number is None or node.suffix):
            here = (*got, 1 if number is None else number) if node.suffix else got
            found = self._match(i + 1, words, j + 1, here)
            if found is not None:
                return found
        if node.optional:
            return self._match(i + 1, words, j, got + ((1,) if node.suffix else ()))
        return None


def compile_pattern(text: str) -> Pattern:
    """Compile a header pattern in SCPI notation (see the module docstring)."""
    nodes: list[Node] = []
    optional = False
    consumed = 0
    for token in _PATTERN_TOKEN.finditer(text):
        consumed += len(token.group())
        word = token.group()
        if word == "[":
            optional = True
        elif word == "]":
            optional = False
        elif word != ":":
            suffix = word.endswith("#")
            long = word.rstrip("#")
            short = "".join(ch for ch in long if not ch.islower())
            nodes.append(Node(long=long, short=short, optional=optional, suffix=suffix))
    if consumed != len(text) or not nodes:
        raise ValueError(f"bad header pattern {text!r}")
    return Pattern(text=text, nodes=tuple(nodes))


def split_mnemonic(word: str) -> tuple[str, int | None]:
    """``"VOLT2"`` -> ``("VOLT", 2)``; ``"VOLT"`` -> ``("VOLT", None)``."""
    m = _MNEMONIC.match(word)
    if not m:
        return word, None
    return m.group(1), (int(m.group(2)) if m.group(2) else None)


@dataclass(frozen=True)
class Unit:
    """One parsed program message unit."""

    words: tuple[str, ...]
    query: bool
    common: bool
    absolute: bool
    params: tuple[str, ...]


_COMMON_HEADER = re.compile(r"\*[A-Za-z]+\??$")
_PATH_HEADER = re.compile(r":?[A-Za-z][A-Za-z0-9_]*(:[A-Za-z][A-Za-z0-9_]*)*\??$")


def split_top(text: str, sep: str) -> list[str]:
    """Split ``text`` at ``sep`` outside double/single quotes and parentheses (-102 if unbalanced)."""
    parts: list[str] = []
    depth = 0
    quote = ""
    start = 0
    for i, ch in enumerate(text):
        if quote:
            if ch == quote:
                quote = ""
        elif ch in "\"'":
            quote = ch
        elif ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth < 0:
                raise scpi_error(-102, text)
        elif ch == sep and depth == 0:
            parts.append(text[start:i])
            start = i + 1
    if quote or depth:
        raise scpi_error(-102, text)
    parts.append(text[start:])
    return parts


def split_units(message: str) -> list[str]:
    """The non-empty program message units of one message (split at top-level ``;``)."""
    return [u.strip() for u in split_top(message, ";") if u.strip()]


def parse_unit(text: str) -> Unit:
    """Split a unit into header words, query flag and parameters (-102 on a malformed header)."""
    header, _, rest = text.strip().partition(" ")
    header = header.strip()
    rest = rest.strip()
    if "\t" in header:
        header, _, more = header.partition("\t")
        rest = (more + " " + rest).strip()
    common = header.startswith("*")
    if not (_COMMON_HEADER.match(header) if common else _PATH_HEADER.match(header)):
        raise scpi_error(-102, text)
    query = header.endswith("?")
    body = header.rstrip("?")
    absolute = body.startswith(":")
    words = (body,) if common else tuple(body.lstrip(":").split(":"))
    params = tuple(p.strip() for p in split_top(rest, ",")) if rest else ()
    if any(not p for p in params):
        raise scpi_error(-102, text)
    return Unit(words=words, query=query, common=common, absolute=absolute, params=params)


# --- parameters ---------------------------------------------------------------------------------

_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")


def matches_word(text: str, long: str) -> bool:
    """True if ``text`` is the short or long form of the SCPI word ``long`` (any case)."""
    short = "".join(ch for ch in long if not ch.islower())
    return text.upper() in (short, long.upper())


def parse_number(text: str, *, lo: float, hi: float, default: float | None = None) -> float:
    """A decimal numeric parameter in [lo, hi]; MINimum, MAXimum and DEFault are accepted.

    Values are in SI base units; unit suffixes (``100MV``) are not accepted (-104 Data type error).
    """
    if matches_word(text, "MINimum"):
        return lo
    if matches_word(text, "MAXimum"):
        return hi
    if default is not None and matches_word(text, "DEFault"):
        return default
    if not _NUMBER.match(text):
        raise scpi_error(-104, text)
    value = float(text)
    if not lo <= value <= hi:
        raise scpi_error(-222, text)
    return value


def parse_int(text: str, *, lo: int, hi: int, default: int | None = None) -> int:
    """An integer parameter in [lo, hi] (decimal values are rounded, as IEEE 488.2 allows)."""
    return round(parse_number(text, lo=lo, hi=hi, default=default))


def parse_bool(text: str) -> bool:
    """``ON``/``OFF`` or a number (non-zero after rounding is true)."""
    upper = text.upper()
    if upper == "ON":
        return True
    if upper == "OFF":
        return False
    if _NUMBER.match(text):
        return round(float(text)) != 0
    raise scpi_error(-104, text)


def parse_choice(text: str, choices: Sequence[str]) -> str:
    """The SCPI word of ``choices`` (written like ``EXTernal``) that ``text`` names (-224 otherwise)."""
    for choice in choices:
        if matches_word(text, choice):
            return choice
    raise scpi_error(-224, text)


_LIST = re.compile(r"\(\s*@(.*)\)$", re.S)


def parse_channel_list(text: str, *, max_items: int = 1000) -> list[int]:
    """``(@101,103:105)`` -> ``[101, 103, 104, 105]`` (SCPI-1999 channel list, ranges with ``:``)."""
    m = _LIST.match(text.strip())
    if not m:
        raise scpi_error(-104, text)
    out: list[int] = []
    for item in m.group(1).split(","):
        first, sep, last = item.strip().partition(":")
        if not first.strip().isdigit() or (sep and not last.strip().isdigit()):
            raise scpi_error(-102, text)
        a = int(first)
        b = int(last) if sep else a
        step = 1 if b >= a else -1
        out.extend(range(a, b + step, step))
        if len(out) > max_items:
            raise scpi_error(-223, text)
    return out


def format_float(value: float) -> str:
    """A float reply (NR3-compatible text that Python's ``float`` reads back exactly enough)."""
    return f"{value:.10g}"
