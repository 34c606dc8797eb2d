"""A query that carries the actions before it and the error check after it, in one message.

``INITiate;:FETCh:TOTalize?;:SYSTem:ERRor:NEXT?`` starts a counter gate, waits for its count and
reads the error queue in one exchange instead of three (IEEE 488.2 §7.3: the replies of one
message's queries come back as one response message, ``;``-separated; from memory).  Used by a role
only when its dialect allows joining (:mod:`drivers.scpi.messages`).  Never retried: the message
holds an action.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, TypeVar

from drivers.errors import InstrumentError, ProtocolError
from drivers.scpi.messages import join_units
from drivers.scpi.plain import parse_error_entry

if TYPE_CHECKING:
    from drivers.scpi.session import ScpiSession

T = TypeVar("T")


def split_last_unit(reply: str) -> tuple[str, str]:
    """A response message split at its last ``;`` outside double quotes: (the rest, the last).

    A ``;`` is outside quotes when an even number of ``"`` come before it (a doubled ``""`` inside
    a string counts twice, so it changes nothing); found with ``rfind`` and ``count`` rather than
    a Python loop over every character, since every joined acquisition's reply comes through here.
    """
    cut = reply.rfind(";")
    while cut >= 0 and reply.count('"', 0, cut) % 2:
        cut = reply.rfind(";", 0, cut)
    if cut < 0:
        raise ProtocolError(f"reply {reply!r} holds one response where two were asked for")
    return reply[:cut].strip(), reply[cut + 1 :].strip()


def query_joined(
    session: ScpiSession,
    actions: Sequence[str],
    query: str,
    parse: Callable[[str], T],
    *,
    timeout_ms: int | None = None,
) -> T:
    """Send ``actions``, ``query`` and the error query as one message; the query's reply parsed.

    A non-zero error entry drains the rest of the queue and raises :class:`InstrumentError` naming
    the whole message (what the instrument holds is forgotten, as after any error)."""
    text = join_units([*actions, query, session.error_query])
    # the query may wait for an acquisition or a gate: the wait looks at the run's stop flag
    reply = session.query(text, timeout_ms=timeout_ms, retry=False, sliced=True)
    try:
        head, tail = split_last_unit(reply)
        code, message = parse_error_entry(tail)
    except ProtocolError as exc:  # the whole line was read: the link is still in step
        raise ProtocolError(f"garbled reply: {exc}", address=session.address,
                            command=text) from None  # fmt: skip
    if code != 0:
        entries = [(code, message), *session.errors()]
        session.forget("")
        error = InstrumentError(code, message, address=session.address, command=text)
        error.queued = entries  # type: ignore[attr-defined]
        raise error
    try:
        return parse(head)
    except ValueError as exc:
        raise ProtocolError(f"garbled reply {head!r}: {exc}", address=session.address,
                            command=text) from None  # fmt: skip
