"""pyvisa-py's LAN INSTR sessions (HiSLIP, VXI-11) as the transport needs them: what lies under
each, and waiting for a reply in short slices without losing a byte.

A block read waits for its reply in short slices and looks at the run's stop flag between them
(:mod:`drivers.scpi.blockread`), which needs a link that can say "input is waiting" without
consuming it.  A raw SOCKET session is asked with ``select``; here the two INSTR protocols of
pyvisa-py 0.8 (its sessions read as found in its source; the transport is the only caller):

* **HiSLIP** (IVI-6.1): replies arrive as ``Data``/``DataEnd`` messages on the synchronous channel, a
  plain TCP socket (``interface._sync``): ``select`` on it, as for a SOCKET session.  pyvisa-py reads
  exactly what each message header announces, so nothing is buffered above that socket.
* **VXI-11**: a reply only moves when the client asks for it (``device_read``, an RPC), so there is
  nothing to ``select`` on.  The probe asks for ONE byte with a short ``io_timeout``: the device
  returns it as soon as the reply has begun, or answers I/O timeout (error 15) having sent nothing
  -- a one-byte request cannot be cut in the middle, so a timed-out probe loses no data.  The byte
  read is handed back to the caller, who keeps it in front of the stream (``VisaTransport``).

Anything else (another backend, a pyvisa-py that changed) answers None: "cannot tell", and the
read waits in one piece, bounded by the link timeout, as before.  Every function takes the
pyvisa-py session object (or None) the transport looked up; this module imports no pyvisa.
"""

from __future__ import annotations

import select
import socket
from dataclasses import dataclass
from typing import Any

#: VXI-11 device_read reason bits and error codes (VXI-11 rev 1.0 B.6.12 / B.5, as pyvisa-py's
#: ``protocols/vxi11.py`` defines them).
VXI11_REASON_END = 4
VXI11_IO_TIMEOUT = 15


@dataclass(frozen=True)
class Probe:
    """What a VXI-11 probe found: ``data`` (b"" or the reply's first byte); ``end``: that byte
    ended the reply (a one-byte message); ``error``: the VXI-11 error code (0, 15, other)."""

    data: bytes
    end: bool
    error: int


def hislip_socket(session: Any) -> socket.socket | None:
    """The synchronous-channel socket of a pyvisa-py HiSLIP session, else None."""
    sock = getattr(getattr(session, "interface", None), "_sync", None)
    return sock if isinstance(sock, socket.socket) else None


def hislip_ready(sock: socket.socket, timeout_s: float) -> bool:
    """True when bytes (or end-of-file) wait on the HiSLIP channel, or arrive within ``timeout_s``."""
    try:
        return bool(select.select([sock], [], [], max(0.0, timeout_s))[0])
    except (OSError, ValueError):
        return True  # the read that follows reports what is wrong


def is_vxi11(session: Any) -> bool:
    """A pyvisa-py VXI-11 session with an open link."""
    interface = getattr(session, "interface", None)
    return callable(getattr(interface, "device_read", None)) and isinstance(
        getattr(session, "link", None), int
    )


def probe_vxi11(session: Any, timeout_s: float) -> Probe:
    """Ask a VXI-11 device for one byte of its reply, waiting at most ``timeout_s``."""
    io_timeout_ms = max(1, int(timeout_s * 1000))
    lock_timeout_ms = int(getattr(session, "lock_timeout", 0) or 0)
    error, reason, data = session.interface.device_read(
        session.link, 1, io_timeout_ms, lock_timeout_ms, 0, 0
    )
    chunk = bytes(data or b"") if not error else b""
    return Probe(chunk, bool(int(reason or 0) & VXI11_REASON_END) and bool(chunk), int(error))


def message_based(address: str) -> bool:
    """A LAN INSTR resource (VXI-11 or HiSLIP), whose messages end at END, not a newline."""
    upper = address.upper()
    return upper.startswith("TCPIP") and upper.endswith("::INSTR")


def partial_message_pending(session: Any) -> bool:
    """True when pyvisa-py's HiSLIP client has begun a reply and not read it to its DataEnd
    (its ``_payload_remaining``, a private attribute of pyvisa-py 0.8; absent elsewhere)."""
    remaining = getattr(getattr(session, "interface", None), "_payload_remaining", 0)
    return isinstance(remaining, int) and remaining > 0


def rpc_socket(session: Any) -> socket.socket | None:
    """The TCP socket under a pyvisa-py VXI-11 session (its RPC client's), else ``None``; only
    looked at for a closed peer, never read: its bytes are RPC records."""
    sock = getattr(getattr(session, "interface", None), "sock", None)
    return sock if isinstance(sock, socket.socket) else None


class HeldBytes:
    """Bytes a VXI-11 wait took off the link, handed out before anything read after them.

    ``data`` is read by the transport before every read and wait to ask whether anything is held
    (an attribute and a bytearray's truth: no Python-level ``__bool__`` call on every exchange)."""

    __slots__ = ("_end", "data")

    def __init__(self) -> None:
        self.data = bytearray()
        self._end = False  # they ended the reply

    def keep(self, probe: Probe) -> None:
        self.data += probe.data
        self._end = probe.end

    def take(self, n: int) -> tuple[bytes, bool]:
        """Up to ``n`` bytes; True when they were the last of a reply that ended."""
        taken = bytes(self.data[:n])
        del self.data[:n]
        ended = self._end and not self.data
        if not self.data:
            self._end = False
        return taken, ended

    def clear(self) -> None:
        self.data.clear()
        self._end = False
