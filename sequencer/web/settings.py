"""How ``benchwright serve`` is set up: database, address, access token, polling period.

Off the loopback interface anyone on the network could read the results, so any other address
requires an access token: ``serve`` makes one (``new_token``), prints it once, and the application
checks it on every request (``?token=`` once, then a cookie; or ``Authorization: Bearer``).
"""

from __future__ import annotations

import ipaddress
import secrets
from dataclasses import dataclass
from pathlib import Path

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8470
DEFAULT_POLL_S = 0.25  # the live view looks at the store this often
DEFAULT_PAGE_SIZE = 200
MAX_PAGE_SIZE = 5000
DEFAULT_STREAM_S = 600.0  # one server-sent event stream at most this long; the browser reconnects


def is_loopback(host: str) -> bool:
    """True for 127.0.0.0/8, ::1 and ``localhost``."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def new_token() -> str:
    """A fresh access token (URL-safe, 32 random bytes)."""
    return secrets.token_urlsafe(32)


@dataclass(frozen=True, kw_only=True)
class ServeSettings:
    """What the web application needs; ``token`` None means no check (loopback only)."""

    db_url: str
    host: str = DEFAULT_HOST
    port: int = DEFAULT_PORT
    token: str | None = None
    poll_s: float = DEFAULT_POLL_S
    page_size: int = DEFAULT_PAGE_SIZE
    stream_s: float = DEFAULT_STREAM_S
    certificates: tuple[Path, ...] = ()  # folders where `benchwright certify` wrote certificates

    def __post_init__(self) -> None:
        if self.token is None and not is_loopback(self.host):
            raise ValueError(f"serving on {self.host} (not loopback) needs an access token")
        if not self.poll_s > 0:
            raise ValueError(f"poll_s must be > 0, got {self.poll_s}")
