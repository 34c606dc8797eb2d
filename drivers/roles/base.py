"""What every role driver shares: building commands from the dialect and sending them."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from drivers.dialect import Dialect
from drivers.scpi.session import ScpiSession

if TYPE_CHECKING:
    from drivers.benchfile import InstrumentSpec


class RoleDriver:
    """Base of the role drivers: ``Role(session, dialect, spec)``."""

    role = ""

    def __init__(
        self, session: ScpiSession, dialect: Dialect, spec: InstrumentSpec | None = None
    ) -> None:
        self.session = session
        self.dialect = dialect
        self.spec = spec

    @property
    def address(self) -> str:
        return self.session.address

    def _command(self, op: str, **fields: Any) -> str:
        return self.dialect.command(self.role, op, **fields)

    def _write(
        self, op: str, *, reapply: bool = True, key: str | None = None, **fields: Any
    ) -> None:
        self.session.write(self._command(op, **fields), reapply=reapply, key=key)

    def _set_output(self, on: bool) -> None:
        """Output on/off.  OFF is cached (re-applied after a reconnect, fail-safe); ON never is."""
        key = f"{self.role}:output"
        if on:
            self.session.forget(key)
            self._write("set_output", reapply=False, state=True)
        else:
            self._write("set_output", key=key, state=False)

    def _query(self, op: str, *, timeout_ms: int | None = None, **fields: Any) -> Any:
        """Send a query and parse its reply by the kind the dialect declares."""
        command = self._command(op, **fields)
        kind = self.dialect.returns(self.role, op)
        s = self.session
        if kind == "float":
            return s.query_float(command, timeout_ms=timeout_ms)
        if kind == "int":
            return s.query_int(command, timeout_ms=timeout_ms)
        if kind == "bool":
            return s.query_bool(command, timeout_ms=timeout_ms)
        if kind == "csv":
            return s.query_csv(command, timeout_ms=timeout_ms)
        if kind == "block":
            b = self.dialect.binary
            return s.query_block(
                command, kind=b.kind, big_endian=b.big_endian, timeout_ms=timeout_ms
            )
        return s.query(command, timeout_ms=timeout_ms)


def check_finite(name: str, value: float) -> float:
    number = float(value)
    if not math.isfinite(number):
        raise ValueError(f"{name}={value!r} is not a finite number")
    return number


def check_range(name: str, value: float, low: float, high: float) -> float:
    """``value`` as float if ``low <= value <= high``, else ``ValueError`` naming it."""
    number = float(value)
    if not low <= number <= high:
        raise ValueError(f"{name}={value!r} is outside {low:g}..{high:g}")
    return number


def check_word(name: str, value: str) -> str:
    """An SCPI mnemonic argument such as ``EXTernal``: letters, digits and ``,``/``:`` only."""
    word = str(value).strip()
    if not word or not all(c.isalnum() or c in ",:._" for c in word):
        raise ValueError(f"{name}={value!r} is not an SCPI mnemonic")
    return word
