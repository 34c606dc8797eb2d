"""Errors of a link mapped to ours: the part of the mapping that needs no pyvisa.

:mod:`drivers.transport` maps pyvisa's own errors (``VisaIOError``, ``InvalidSession``) and hands
everything else here: OS errors, the plain ``RuntimeError``/``EOFError`` pyvisa-py's HiSLIP and
VXI-11 sessions raise on a dropped peer, and whatever else a backend may raise.  At this one boundary
all of them become our :class:`~drivers.errors.TransportError` family, so the runner's safe state
always runs.
"""

from __future__ import annotations

import errno
import os
import socket
from collections.abc import Callable
from types import TracebackType

from drivers.errors import ConnectionClosed, ConnectionRefused, InstrumentTimeout, TransportError

#: What a transport maps: pyvisa's errors, OS errors (TimeoutError and ConnectionRefusedError
#: among them) and -- since a backend may raise anything (pyvisa-py's HiSLIP raises a plain
#: ``RuntimeError`` on a dropped link) -- every other ``Exception``.
MAPPED_ERRORS = (Exception,)


def translate_link_error(exc: BaseException, address: str, command: str) -> TransportError:
    """Our error for an OS or backend error (not one of pyvisa's own), address and command
    attached; one of ours passes through with the command named."""
    if isinstance(exc, TransportError):
        return exc.with_command(command)
    if isinstance(exc, ConnectionRefusedError):
        return ConnectionRefused(f"connection refused ({exc})", address=address, command=command)
    if isinstance(exc, TimeoutError):
        return InstrumentTimeout(str(exc) or "no reply", address=address, command=command)
    if isinstance(exc, OSError | RuntimeError | EOFError | BrokenPipeError):
        # pyvisa-py's HiSLIP and VXI-11 sessions raise plain RuntimeError (and EOFError from
        # the RPC layer) when the peer drops: a lost link, so the session reconnects
        return ConnectionClosed(
            f"link failed ({type(exc).__name__}: {exc})", address=address, command=command
        )
    # anything else the backend raises is still a link failure here, never an "internal
    # error" that would skip the safe state: named, and mapped to our family
    return TransportError(
        f"VISA backend failed ({type(exc).__name__}: {exc})", address=address, command=command
    )


class ErrorMap:
    """``with transport._mapped(command):`` -- a class, not a generator: it wraps every I/O call."""

    __slots__ = ("command", "translate")

    def __init__(
        self, translate: Callable[[BaseException, str], TransportError], command: str
    ) -> None:
        self.translate = translate
        self.command = command

    def __enter__(self) -> None:
        return None

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> bool:
        if not isinstance(exc, MAPPED_ERRORS):
            return False
        raise self.translate(exc, self.command) from exc


def check_connected(sock: socket.socket, address: str) -> None:
    """A refused connection surfaces at open (pyvisa-py connects without blocking)."""
    error = sock.getsockopt(socket.SOL_SOCKET, socket.SO_ERROR)
    if error:
        raise ConnectionRefused(f"connection refused ({errno_name(error)})", address=address)
    try:
        sock.getpeername()
    except OSError as exc:
        raise ConnectionRefused(f"not connected ({exc})", address=address) from exc


def errno_name(code: int) -> str:
    return f"{errno.errorcode.get(code, code)}: {os.strerror(code)}"
