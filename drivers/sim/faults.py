"""Injected link faults of the simulated instruments (board file ``faults:`` list).

Each entry ``{kind, role, after_s | after_commands, code, message}`` hits the instrument playing
``role`` (default: ``bias`` for ``interlock_open``, ``scope`` for the others).  ``after_commands: N``
counts the program messages (lines) that instrument received from any client: the fault acts on
message N + 1.  ``after_s`` counts seconds from the instrument's first message (for
``interlock_open``: from the moment the bias output first turns on; handled by
:mod:`drivers.sim.bias`).  With ``after_message: TEXT`` both count from the first message starting
with TEXT (case-insensitive) instead, so a fault lands at a stage of a procedure (the ramp's set
point, its ramp-down) whatever the timing before it.

==================  ===========================================================================
kind                effect
==================  ===========================================================================
``no_reply``        from then on the instrument reads messages but neither runs nor answers them
``disconnect``      the server closes the client's socket, once (a new connection works)
``link_down``       from then on every message closes its connection: the link does not come
                    back (a connection opens, its first message drops it) until
                    :meth:`FaultRunner.lift` -- a cable pulled, a supply switched off remotely
``garbled_reply``   the next reply is sent malformed, once
``scpi_error``      ``code`` (with ``message``, else the standard text) is pushed into the error
                    queue, once, before the message runs
``interlock_open``  see :mod:`drivers.sim.bias`
==================  ===========================================================================
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

from drivers.sim.board import FaultSpec
from drivers.sim.scpi_parser import STANDARD_ERRORS


@dataclass(frozen=True)
class Effect:
    """What the faults do to one received message."""

    silent: bool = False
    disconnect: bool = False
    errors: tuple[tuple[int, str], ...] = ()


NO_EFFECT = Effect()


class FaultRunner:
    """Decides, message by message, which of one instrument's faults act (call under the bench lock)."""

    def __init__(self, faults: Sequence[FaultSpec], clock: Callable[[], float]) -> None:
        self.pending = [f for f in faults if f.kind != "interlock_open"]
        self.clock = clock
        self.messages = 0
        self.first_message: float | None = None
        self.silent = False
        self.down = False
        self.garble_armed = False
        #: per fault with ``after_message``: (time, message count) of its first matching message
        self._started: dict[int, tuple[float, int]] = {}

    def _due(self, fault: FaultSpec, now: float, message: str) -> bool:
        start, count = self.first_message, 0
        if fault.after_message is not None:
            key = id(fault)
            if key not in self._started:
                if not message.upper().startswith(fault.after_message.upper()):
                    return False
                self._started[key] = (now, self.messages - 1)
            start, count = self._started[key]
        if fault.after_commands is not None:
            return self.messages - count > fault.after_commands
        assert start is not None
        return now - start >= (fault.after_s or 0.0)

    def lift(self) -> None:
        """The link comes back: a ``link_down`` fault (and a silent instrument) end."""
        self.down = False
        self.silent = False

    def on_message(self, message: str | bytes = "") -> Effect:
        """Count one message (its text: for ``after_message``) and return what the faults due now
        do to it."""
        if self.down:
            return Effect(disconnect=True)
        if not self.pending and not self.silent:
            return NO_EFFECT
        if isinstance(message, bytes):
            message = message.decode("latin-1")
        now = self.clock()
        self.messages += 1
        if self.first_message is None:
            self.first_message = now
        disconnect = False
        errors: list[tuple[int, str]] = []
        for fault in [f for f in self.pending if self._due(f, now, message.lstrip())]:
            self.pending.remove(fault)
            if fault.kind == "no_reply":
                self.silent = True
            elif fault.kind == "disconnect":
                disconnect = True
            elif fault.kind == "link_down":
                self.down = disconnect = True
            elif fault.kind == "garbled_reply":
                self.garble_armed = True
            elif fault.kind == "scpi_error":
                errors.append(
                    (
                        fault.code,
                        fault.message or STANDARD_ERRORS.get(fault.code, "Device-specific error"),
                    )
                )
        if not (self.silent or disconnect or errors):
            return NO_EFFECT
        return Effect(silent=self.silent, disconnect=disconnect, errors=tuple(errors))

    def filter_reply(self, reply: bytes) -> bytes:
        """The reply as sent: malformed once if a garbled_reply fault is armed."""
        if not self.garble_armed:
            return reply
        self.garble_armed = False
        return garble(reply)


def garble(reply: bytes) -> bytes:
    """A malformed version of ``reply`` (still one line): no valid number, string or block header."""
    body = reply.rstrip(b"\n")[:24]
    mangled = (
        bytes((b ^ 0x5A) & 0x7F or 0x3F for b in body).replace(b"\n", b"?").replace(b"#", b"?")
    )
    return b"\x15?!" + mangled + b"\n"
