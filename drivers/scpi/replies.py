"""Reply parsing declared as data: which part of a reply is the value, and how to read it.

The steps run in this order, each optional (a :class:`ReplyRule` holds them):

1. ``header``: drop a leading program header, ``:VOLT 1.0E+00`` -> ``1.0E+00`` (instruments with
   headers on, SCPI-1999 vol. 1 §4.2, from memory);
2. ``pattern``: a regular expression with one capture group; the reply must match;
3. ``field``: one field of a list separated by ``separator`` (``,`` or ``;``), by 1-based position
   or by a name from ``fields``;
4. the value, by the kind the operation returns: ``bit`` (one bit of an integer status word,
   bit 0 = least significant), ``words`` (``TRIP`` -> true; a word not in the map is refused),
   a number (with ``unit``: an SI-prefixed unit suffix is accepted, ``200mV`` -> 0.2), ``csv``
   (every field a number), ``str``.

Every rule refuses what it cannot read with :class:`ValueError` (the SCPI layer turns it into a
``ProtocolError`` naming the command): no rule guesses.  Pure functions, no I/O.
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

#: Replies that are not a measurement: SCPI-1999 vol. 1 §7.2.1 (from memory): 9.91E+37 is NaN,
#: ±9.9E+37 is ±infinity -- an overrange is refused as a number.
OVERRANGE = 9.9e37

#: SI prefixes accepted before a declared unit, compared upper-cased (SCPI-1999 vol. 1 §7.7.3, from
#: memory: ``M`` is milli and ``MA``/``MEG`` mega, since SCPI suffixes are case-insensitive; µ
#: upper-cases to U+039C).
PREFIXES = {
    "T": 1e12, "G": 1e9, "MEG": 1e6, "MA": 1e6, "K": 1e3, "": 1.0, "M": 1e-3, "U": 1e-6,
    "\u039c": 1e-6, "N": 1e-9, "P": 1e-12, "F": 1e-15,
}  # fmt: skip

KINDS = ("float", "int", "bool", "str", "csv", "block")
DEFAULT_WORDS: Mapping[str, bool] = {"1": True, "+1": True, "ON": True, "0": False, "+0": False,
                                     "OFF": False}  # fmt: skip
#: Status registers are 16 bits wide in IEEE 488.2 and SCPI (from memory); vendors' own reach 32.
#: A larger "word" -- SCPI's 9.91E+37 not-a-number above all -- is no status, never a flag.
MAX_STATUS_WORD = 2**32
_NUMBER = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-zµ]*)\s*$")


@dataclass(frozen=True, kw_only=True)
class ReplyRule:
    """How one query's reply is read (every field optional; the default reads the whole reply)."""

    header: bool = False
    pattern: str = ""
    separator: str = ","
    field: int | str | None = None  # 1-based position, or a name from ``fields``
    fields: tuple[str, ...] = ()
    bit: int | None = None
    words: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    unit: str = ""

    def __post_init__(self) -> None:
        plain = not (self.header or self.pattern or self.fields or self.words or self.unit)
        plain = plain and self.separator == "," and self.field is None and self.bit is None
        object.__setattr__(self, "_plain", plain)  # frozen: computed once, read per reply

    @property
    def plain(self) -> bool:
        """True when the rule does nothing (the whole reply is the value)."""
        return self._plain  # type: ignore[attr-defined,no-any-return]

    def position(self) -> int | None:
        """The 0-based index of the selected field (``None``: the whole reply)."""
        if self.field is None:
            return None
        if isinstance(self.field, int):
            return self.field - 1
        return self.fields.index(self.field)


def parse_reply(text: str, kind: str, rule: ReplyRule = ReplyRule()) -> Any:
    """The value of ``text`` by ``rule``, as ``kind`` (``float``/``int``/``bool``/``str``/``csv``)."""
    if kind == "float" and rule.plain:  # the common case: one plain number, no rule to apply
        part = text.strip()
        if "_" not in part:  # float() would take "1_0"; parse_number refuses it below
            try:
                return float(part)
            except ValueError:
                pass
        return parse_number(part)
    part = select(text, rule)
    if rule.bit is not None:
        word = parse_number(part, rule.unit)
        if not float(word).is_integer() or not 0 <= word < MAX_STATUS_WORD:
            raise ValueError(f"{part!r} is not a status word (a non-negative integer below 2**32)")
        flag = bool((int(word) >> rule.bit) & 1)
        return flag if kind == "bool" else int(flag)
    if rule.words or kind == "bool":
        return read_word(part, rule.words or DEFAULT_WORDS)
    if kind == "float":
        return parse_number(part, rule.unit)
    if kind == "int":
        value = parse_number(part, rule.unit)
        if not float(value).is_integer():
            raise ValueError(f"{part!r} is not an integer")
        return int(value)
    if kind == "csv":
        return [parse_number(p, rule.unit) for p in split_fields(part, rule.separator) if p]
    return part


def select(text: str, rule: ReplyRule) -> str:
    """Steps 1-3: header, pattern, field (whitespace around the result stripped)."""
    part = text.strip()
    if rule.header:
        part = strip_header(part)
    if rule.pattern:
        match = re.search(rule.pattern, part)
        if match is None:
            raise ValueError(f"{part!r} does not match the pattern {rule.pattern!r}")
        part = (match.group(1) if match.groups() else match.group(0)).strip()
    index = rule.position()
    if index is not None:
        parts = split_fields(part, rule.separator)
        if index >= len(parts):
            raise ValueError(f"{part!r} has {len(parts)} fields, field {rule.field!r} is missing")
        part = parts[index]
    return part


def strip_header(text: str) -> str:
    """``:VOLT 1.0E+00`` -> ``1.0E+00``; a reply without a header is refused (the rule says one is
    there, so its absence means the instrument is not set as the dialect says)."""
    head, sep, rest = text.strip().partition(" ")
    if not sep or not head or not (head[0] in ":*" or head[0].isalpha()):
        raise ValueError(f"{text!r} has no program header to strip")
    return rest.strip()


def split_fields(text: str, separator: str) -> list[str]:
    return [p.strip() for p in text.split(separator)]


def read_word(text: str, words: Mapping[str, Any]) -> Any:
    """The value a word maps to; case-insensitive; a word not in the map is refused."""
    word = text.strip().strip('"').upper()
    table = {str(k).upper(): v for k, v in words.items()}
    if word not in table:
        raise ValueError(f"{text!r} is none of {', '.join(table)}")
    return table[word]


def parse_number(text: str, unit: str = "") -> float:
    """A number, optionally with an SI-prefixed ``unit`` (``200mV``, ``1.5E+00 V``).

    ``NAN``/``INF`` words and SCPI's 9.91E+37 pass through as the numbers they are: whether such a
    reading may be used is the caller's decision (the bias role refuses it as implausible; the
    waveform rules refuse it with :func:`refuse_codes`).
    """
    word = text.strip().upper().lstrip("+")
    if word in _SPECIAL:
        return _SPECIAL[word]
    match = _NUMBER.match(text)
    if match is None:
        raise ValueError(f"{text!r} is not a number")
    digits, suffix = match.groups()
    value = float(digits)
    if suffix:
        value *= _unit_factor(suffix, unit, text)
    return value


def refuse_codes(value: float, what: str) -> float:
    """``value`` unless it is NaN, infinite or SCPI's not-a-number/overrange code (``ValueError``)."""
    if not math.isfinite(value) or abs(value) >= OVERRANGE:
        raise ValueError(f"{what} {value!r} is not a measurement (NaN, overrange or infinite)")
    return value


_SPECIAL = {"NAN": math.nan, "INF": math.inf, "-INF": -math.inf, "INFINITY": math.inf}


def _unit_factor(suffix: str, unit: str, text: str) -> float:
    if not unit:
        raise ValueError(f"{text!r} carries a unit {suffix!r} the dialect does not declare")
    upper, want = suffix.upper(), unit.upper()
    if not upper.endswith(want):
        raise ValueError(f"{text!r}: unit {suffix!r} is not {unit!r}")
    prefix = upper[: len(upper) - len(want)]
    if prefix not in PREFIXES:
        raise ValueError(f"{text!r}: unknown prefix {prefix!r}")
    return PREFIXES[prefix]
