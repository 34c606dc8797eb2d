"""One clear line for an instrument fault: instrument (role and address), command, what happened.

The step path is added by ``RunAborted`` itself (``... [step gain/ch3/x5/amp=40mV/capture]``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from drivers.errors import (
    BenchwrightError,
    ConnectionClosed,
    ConnectionRefused,
    ImplausibleReading,
    InstrumentError,
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


def describe_fault(exc: BaseException, instruments: Mapping[str, Any]) -> str:
    """The abort line for an instrument error, without the step path.

    e.g. ``scope at TCPIP0::127.0.0.1::5026::SOCKET: no reply to 'TRACe:DATA? CHANnel1' within
    5000 ms``.
    """
    address = getattr(exc, "address", "") or ""
    command = getattr(exc, "command", "") or ""
    who = f"{role_of(address, instruments)} at {address}" if address else "instrument"
    cmd = f"{command!r}" if command else "the last command"
    after = getattr(exc, "after", "") or ""
    if after:  # the link failed on the error-queue check that follows a configuring command
        cmd = f"the error-queue check after {after!r}"
    sending = f"checking the error queue after {after!r}" if after else f"sending {cmd}"
    if isinstance(exc, InstrumentTimeout):
        ms = _timeout_ms(address, instruments)
        within = f" within {ms} ms" if ms else ""
        return f"{who}: no reply to {cmd}{within}"
    if isinstance(exc, ConnectionClosed):
        return f"{who}: connection closed by the instrument ({sending})"
    if isinstance(exc, ConnectionRefused):
        return f"{who}: connection refused"
    if isinstance(exc, TransportError):
        return f"{who}: link failed ({sending}): {exc}"
    if isinstance(exc, ImplausibleReading):
        return f"{who}: implausible reply to {cmd}: {exc.detail}"
    if isinstance(exc, ProtocolError):
        return f"{who}: unreadable reply to {cmd}: {_first_line(exc)}"
    if isinstance(exc, InstrumentError):
        return f'{who}: error {exc.code},"{exc.instrument_message}" after {cmd}'
    if isinstance(exc, SafetyLimitError):
        return f"bias limit: {_first_line(exc)}"
    if isinstance(exc, BenchwrightError):
        return _first_line(exc)
    return f"internal error: {type(exc).__name__}: {_first_line(exc)}"


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
