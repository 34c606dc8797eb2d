"""What every role driver shares: building commands from the dialect and sending them."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from drivers.dialect import Dialect
from drivers.roles.perform import perform
from drivers.scpi.session import ScpiSession

if TYPE_CHECKING:
    from drivers.benchfile import InstrumentSpec


class RoleDriver:
    """Base of the role drivers: ``Role(session, dialect, spec)``.

    Opening a role sends the dialect's ``at_open`` commands for it.  ``settings`` holds the last
    value of each ``set_*`` operation sent (``set_points`` -> ``settings["points"]``), so a template
    may compute with the role's current settings (``{points / sample_rate / 10:.6g}``).
    """

    role = ""
    #: Whether unchanged settings may be skipped (the dialect's ``messages.skip_unchanged``).  A
    #: role whose state a safety decision rests on (the bias supply) sets False: always sent.
    tracks_settings = True

    def __init__(
        self, session: ScpiSession, dialect: Dialect, spec: InstrumentSpec | None = None
    ) -> None:
        self.session = session
        self.dialect = dialect
        self.spec = spec
        self.settings: dict[str, Any] = {}
        for template in dialect.open_commands.get(self.role, ()):
            session.write(template.render({}))

    @property
    def address(self) -> str:
        return self.session.address

    def _command(self, op: str, **fields: Any) -> str:
        return self.dialect.command(self.role, op, **fields)

    def _write(
        self,
        op: str,
        *,
        reapply: bool = True,
        key: str | None = None,
        timeout_ms: int | None = None,
        **fields: Any,
    ) -> None:
        operation = self.dialect.operation(self.role, op)
        values = {**self.settings, **fields}
        track = self.tracks_settings and not (key or "").endswith(":output")
        perform(self.session, self.dialect, operation, values, reapply=reapply, key=key,
                timeout_ms=timeout_ms, track=track)  # fmt: skip
        if op.startswith("set_") and fields:
            self.settings[op[4:]] = list(fields.values())[-1]

    def _set_output(self, on: bool) -> None:
        """Output on/off.  OFF is cached (re-applied after a reconnect, fail-safe); ON never is."""
        key = f"{self.role}:output"
        if on:
            self.session.forget(key)
            self._write("set_output", reapply=False, state=True)
        else:
            self._write("set_output", key=key, state=False)

    def _query(self, op: str, *, timeout_ms: int | None = None, **fields: Any) -> Any:
        """Send a query and parse its reply by the kind and rule the dialect declares."""
        operation = self.dialect.operation(self.role, op)
        if operation.returns == "block":
            b = self.dialect.binary
            return self.session.query_block(
                self._command(op, **fields), kind=b.kind, big_endian=b.big_endian,
                timeout_ms=timeout_ms,
            )  # fmt: skip
        values = {**self.settings, **fields}
        return perform(self.session, self.dialect, operation, values, timeout_ms=timeout_ms)


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
