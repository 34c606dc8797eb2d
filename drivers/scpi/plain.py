"""Plain-text replies every SCPI instrument gives: the identity, error-queue entries, numbers.

Pure functions on text, used by :class:`drivers.scpi.session.ScpiSession` (which re-exports them).
"""

from __future__ import annotations

import contextlib
import functools
from dataclasses import dataclass

from drivers.errors import ProtocolError


@dataclass(frozen=True)
class Identity:
    """The four fields of an IEEE 488.2 ``*IDN?`` reply (§4.1.3.6, from memory), and the raw text."""

    maker: str
    model: str
    serial: str
    firmware: str
    raw: str

    def __str__(self) -> str:
        return f"{self.maker} {self.model} (serial {self.serial}, firmware {self.firmware})"


def parse_identity(reply: str) -> Identity:
    """Split ``maker,model,serial,firmware``; missing fields are empty, extra commas stay in firmware.

    A reply holding control characters is not an identity but a garbled reply (identities are
    plain text fields; common practice): ``ProtocolError``.
    """
    text = reply.strip()
    if not text:
        raise ProtocolError("empty *IDN? reply")
    if any((c < " " and c != "\t") or c == "\x7f" for c in text):
        raise ProtocolError(f"*IDN? reply {text[:40]!r} holds control characters (garbled?)")
    fields = [f.strip() for f in text.split(",", 3)]
    fields += [""] * (4 - len(fields))
    return Identity(
        maker=fields[0], model=fields[1], serial=fields[2], firmware=fields[3], raw=text
    )


@functools.lru_cache(maxsize=64)
def parse_error_entry(reply: str) -> tuple[int, str]:
    """``-113,"Undefined header"`` -> ``(-113, "Undefined header")`` (SCPI-1999 SYSTem:ERRor format).

    Kept per reply text (a pure function; nearly every reply is the same ``0,"No error"``, read
    after every setting): a refusal raises and is not kept."""
    code_text, sep, message = reply.strip().partition(",")
    try:
        code = int(code_text.strip())
    except ValueError:
        raise ProtocolError(f"error queue reply {reply!r} does not start with a number") from None
    message = message.strip()
    if len(message) >= 2 and message[0] == message[-1] == '"':
        message = message[1:-1].replace('""', '"')
    return code, message if sep else ""


def header_of(command: str) -> str:
    """The program header of a command (up to the first space), upper-cased: the settings-cache key."""
    return command.strip().split(" ", 1)[0].upper()


def to_float(text: str) -> float:
    return float(text.strip())


def to_int(text: str) -> int:
    with contextlib.suppress(ValueError):
        return int(text.strip())
    value = float(text.strip())
    if not value.is_integer():
        raise ValueError("not an integer")
    return int(value)


def to_bool(text: str) -> bool:
    word = text.strip().upper()
    if word in ("1", "+1", "ON"):
        return True
    if word in ("0", "+0", "OFF"):
        return False
    raise ValueError("expected 1/0 or ON/OFF")


def to_csv(text: str) -> list[float]:
    return [float(part) for part in text.strip().split(",") if part.strip()]
