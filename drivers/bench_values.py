"""Typed, located reading of one bench-file entry: the value checks :mod:`drivers.benchfile` applies to
every instrument entry (texts, integers, limits, dates, terminations) and the located-problem helpers.

Split out of ``benchfile.py`` to keep each module under the 500-line rule (STYLE.md); pure move."""

from __future__ import annotations

import datetime as dt
import difflib
from collections.abc import Mapping
from typing import Any

from drivers.errors import Location, Problem
from drivers.yamlsafe import YamlMap

_TERMINATIONS = {"LF": "\n", "CR": "\r", "CRLF": "\r\n", "\\n": "\n", "\\r": "\r", "\\r\\n": "\r\n"}


class EntryReader:
    """Reads typed values out of one instrument entry, recording located problems."""

    def __init__(self, role: str, entry: Mapping, problems: list[Problem], source: str) -> None:
        self.role, self.entry, self.problems, self.source = role, entry, problems, source

    def bad(self, key: str, message: str) -> None:
        """A problem with ``key`` at its line and column."""
        self._bad(key, message)

    def _bad(self, key: str, message: str) -> None:
        self.problems.append(
            Problem(key_location(self.entry, key, self.source), f"{self.role}: {key} {message}")
        )

    def text(
        self, key: str, *, required: bool = False, default: str = "", allow_empty: bool = False
    ) -> str:
        if key not in self.entry:
            if required:
                self.problems.append(
                    Problem(key_location(self.entry, None, self.source), f"{self.role}: missing '{key}:'")
                )
            return default
        value = self.entry[key]
        if value is None and allow_empty:
            return ""
        if not isinstance(value, str) or (not allow_empty and not value.strip()):
            self._bad(key, "must be a non-empty string" if not allow_empty else "must be a string")
            return default
        control = first_control(value.strip())
        if control is not None:
            self._bad(key, f"holds the control character {control!r} (one line of printable text is expected)")
            return default
        return value.strip()

    def integer(self, key: str, default: int, low: int, high: int) -> int:
        value = self.entry.get(key, default)
        if not isinstance(value, int) or isinstance(value, bool) or not low <= value <= high:
            self._bad(key, f"must be an integer from {low} to {high}, got {value!r}")
            return default
        return value

    def positive(self, key: str, *, required: bool) -> float | None:
        if key not in self.entry:
            if required:
                self.problems.append(
                    Problem(
                        key_location(self.entry, None, self.source),
                        f"{self.role}: missing '{key}:' (a safety limit the bias supply needs)",
                    )
                )
            return None
        value = self.entry[key]
        if not isinstance(value, int | float) or isinstance(value, bool) or not value > 0:
            self._bad(key, f"must be a positive number, got {value!r}")
            return None
        return float(value)

    def date(self, key: str) -> dt.date | None:
        value = self.entry.get(key)
        if value is None or value == "":
            return None
        if isinstance(value, dt.datetime):
            return value.date()
        if isinstance(value, dt.date):
            return value
        if isinstance(value, str):
            try:
                return dt.date.fromisoformat(value.strip())
            except ValueError:
                pass
        self._bad(key, f"must be a date YYYY-MM-DD, got {value!r}")
        return None

    def termination(self, key: str) -> str:
        value = self.entry.get(key, "\n")
        if isinstance(value, str):
            value = _TERMINATIONS.get(value.strip() if value.strip() else value, value)
        if not isinstance(value, str) or not value or len(value) > 2:
            self._bad(
                key,
                f'must be one or two characters such as "\\n", LF, CR or CRLF, got {value!r} (without a read termination every query times out)',
            )
            return "\n"
        return value


def first_control(text: str) -> str | None:
    """The first control character (C0, DEL, C1) or lone surrogate in ``text``, else ``None``."""
    for char in text:
        code = ord(char)
        if code < 0x20 or 0x7F <= code < 0xA0 or 0xD800 <= code < 0xE000:
            return char
    return None


def key_location(data: Any, key: Any, source: str, *, of_key: bool = False) -> Location:
    if isinstance(data, YamlMap):
        return data.where(key, of_key=of_key)
    return Location(source, 1, 1)


def report_unknown(
    data: Mapping, allowed: tuple[str, ...], what: str, problems: list[Problem], source: str
) -> None:
    for key in data:
        if key not in allowed:
            close = difflib.get_close_matches(str(key), allowed, n=1)
            hint = (
                f" (did you mean {close[0]!r}?)"
                if close
                else f" (expected one of: {', '.join(allowed)})"
            )
            problems.append(
                Problem(key_location(data, key, source, of_key=True), f"unknown {what} {key!r}{hint}")
            )
