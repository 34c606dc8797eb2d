"""One clear line for an instrument fault: instrument (role and address), command, what happened.

Every instrument-layer fault shares one base (:class:`drivers.errors.InstrumentFault`: address,
command, the bare ``detail``), so the line is built once here from a table of kinds.
The step path is added by ``RunAborted`` itself (``... [step gain/ch3/x5/amp=40mV/capture]``).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from drivers.errors import (
    BenchwrightError,
    ConnectionClosed,
    ConnectionRefused,
    ImplausibleReading,
    InstrumentError,
    InstrumentFault,
    InstrumentTimeout,
    ProtocolError,
    SafetyLimitError,
    TransportError,
)

FAULTS = (TransportError, ProtocolError, InstrumentError)
"""Errors that mean an instrument failed (cause ``instrument``)."""


def role_of(address: str, instruments: Mapping[str, Any]) -> str:
    """The bench role whose instrument sits at ``address`` ('instrument' when unknown)."""
    for role, spec in instruments.items():
        if getattr(spec, "address", None) == address:
            return role
    return "instrument"


def _timeout_ms(address: str, instruments: Mapping[str, Any]) -> int | None:
    for spec in instruments.values():
        if getattr(spec, "address", None) == address:
            return getattr(spec, "timeout_ms", None)
    return None


@dataclass(frozen=True)
class _Said:
    """The parts of a fault line every kind shares: who, which command, how long was waited."""

    who: str
    cmd: str
    sending: str
    within: str


#: One line per kind of fault, looked up along the exception's class hierarchy (most specific first),
#: so the address and command are said once, here, from the one fault base
#: (:class:`drivers.errors.InstrumentFault`) -- never re-derived case by case.
_LINES: dict[type[InstrumentFault], Callable[[Any, _Said], str]] = {
    InstrumentTimeout: lambda e, s: f"{s.who}: no reply to {s.cmd}{s.within}",
    ConnectionClosed: lambda e, s: f"{s.who}: connection closed by the instrument ({s.sending})",
    ConnectionRefused: lambda e, s: f"{s.who}: connection refused",
    TransportError: lambda e, s: f"{s.who}: link failed ({s.sending}): {e.detail}",
    ImplausibleReading: lambda e, s: f"{s.who}: implausible reply to {s.cmd}: {e.detail}",
    ProtocolError: lambda e, s: f"{s.who}: unreadable reply to {s.cmd}: {_first(e.detail)}",
    InstrumentError: lambda e, s: f'{s.who}: error {e.code},"{e.instrument_message}" after {s.cmd}',
    SafetyLimitError: lambda e, s: f"bias limit: {_first(e.detail)}",
}


def describe_fault(exc: BaseException, instruments: Mapping[str, Any]) -> str:
    """The abort line for an instrument error, without the step path.

    e.g. ``scope at TCPIP0::127.0.0.1::5026::SOCKET: no reply to 'TRACe:DATA? CHANnel1' within
    5000 ms``.
    """
    if isinstance(exc, InstrumentFault):
        for cls in type(exc).__mro__:
            line = _LINES.get(cls)
            if line is not None:
                return line(exc, _said(exc, instruments))
    if isinstance(exc, BenchwrightError):
        return _first_line(exc)
    return f"internal error: {type(exc).__name__}: {_first_line(exc)}"


def _said(exc: InstrumentFault, instruments: Mapping[str, Any]) -> _Said:
    address, command = exc.address or "", exc.command or ""
    who = f"{role_of(address, instruments)} at {address}" if address else "instrument"
    cmd = f"{command!r}" if command else "the last command"
    after = getattr(exc, "after", "") or ""  # TransportError only: the write before the check
    if after:  # the link failed on the error-queue check that follows a configuring command
        cmd = f"the error-queue check after {after!r}"
    sending = f"checking the error queue after {after!r}" if after else f"sending {cmd}"
    ms = _timeout_ms(address, instruments)
    return _Said(who=who, cmd=cmd, sending=sending, within=f" within {ms} ms" if ms else "")


def _first(text: str) -> str:
    text = text.strip()
    return text.splitlines()[0] if text else ""


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
