"""How a link to one instrument is opened: the defaults and the per-instrument settings.

Kept apart from :mod:`drivers.transport` (the one module that imports pyvisa) so the bench-file
loader and the tests can name the defaults without the VISA machinery.
"""

from __future__ import annotations

from dataclasses import dataclass

DEFAULT_VISA_LIBRARY = "@py"
DEFAULT_TIMEOUT_MS = 5000
DEFAULT_CHUNK_SIZE = 1 << 20
DEFAULT_RECONNECT_ATTEMPTS = 3
DEFAULT_RECONNECT_BACKOFF_S = 0.2
#: Fast path: poll for a reply this long before sleeping (see drivers/sockio.py); 0 turns it off.
DEFAULT_BUSY_POLL_US = 200
#: A text reply longer than this without its terminator is refused (binary data uses read_bytes).
MAX_MESSAGE_BYTES = 16 * 1024 * 1024


@dataclass(frozen=True, kw_only=True)
class TransportSettings:
    """How one instrument's link is opened (all per instrument, from the bench file)."""

    visa_library: str = DEFAULT_VISA_LIBRARY
    timeout_ms: int = DEFAULT_TIMEOUT_MS
    read_termination: str = "\n"
    write_termination: str = "\n"
    chunk_size: int = DEFAULT_CHUNK_SIZE
    reconnect_attempts: int = DEFAULT_RECONNECT_ATTEMPTS
    reconnect_backoff_s: float = DEFAULT_RECONNECT_BACKOFF_S
    #: On pyvisa-py SOCKET sessions, send and receive on the session's socket directly (see above).
    socket_fast_path: bool = True
    #: Fast path only: how long a wait for a reply polls before it sleeps (microseconds).
    busy_poll_us: int = DEFAULT_BUSY_POLL_US
