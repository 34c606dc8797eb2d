"""Reading an instrument's error queue to its end, bounded (SCPI-1999 ``SYSTem:ERRor[:NEXT]?``).

Entries come one per query, ``<code>,"<message>"``, until ``0,"No error"``; an instrument that never
gets there is not answering the query sanely, so the reading stops after ``MAX_ERROR_ENTRIES``.
Used by :class:`drivers.scpi.session.ScpiSession` after configuring commands; ``ask`` sends one
query and returns its reply as text (the session's own exchange, with its timeouts and errors).
"""

from __future__ import annotations

from collections.abc import Callable

from drivers.errors import ProtocolError
from drivers.scpi.plain import parse_error_entry

#: More entries than this in the error queue means the instrument is not answering the query sanely.
MAX_ERROR_ENTRIES = 64

Ask = Callable[[str], str]


def drain(ask: Ask, error_query: str, *, address: str) -> list[tuple[int, str]]:
    """Every entry up to the queue's end, in order; ``[]`` when it holds only ``0,"No error"``."""
    entries: list[tuple[int, str]] = []
    for _ in range(MAX_ERROR_ENTRIES):
        code, message = parse_error_entry(ask(error_query))
        if code == 0:
            return entries
        entries.append((code, message))
    raise ProtocolError(
        f"error queue still not empty after {MAX_ERROR_ENTRIES} reads", address=address
    )


def entries_after(
    first_reply: str, ask: Ask, error_query: str, *, address: str
) -> list[tuple[int, str]]:
    """The error queue from its first entry (``first_reply``, already read) on."""
    code, message = parse_error_entry(first_reply)
    if code == 0:
        return []
    return [(code, message), *drain(ask, error_query, address=address)]
