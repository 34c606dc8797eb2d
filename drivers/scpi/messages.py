"""How configuring commands travel: fewer round trips without losing an error.

A LAN instrument costs a round trip per program message (a millisecond or more on a real bench,
where a loopback simulator costs microseconds), so a qualification of thousands of settings spends
seconds on the link alone.  Three savings, each declared per dialect (``messages:`` in a format-2
dialect file) because not every instrument allows them:

* ``skip_unchanged``: the session remembers the last command it sent under each settings key and does
  not send the same command again.  What it remembers is forgotten on ``*RST``, on any error (an
  instrument error, a timeout, a garbled reply, a resynchronisation) and on a reconnect, so a doubt
  always costs a command, never a wrong setting.  It assumes this session is the instrument's only
  controller (front-panel changes are not seen).  Never used for a bias supply: a safety decision
  reads the supply back, it never trusts what was sent (``RoleDriver.tracks_settings``).
* ``join``: several program message units in one program message, separated by ``;`` (IEEE 488.2
  §7.3 program message syntax, from memory).  Every unit after the first starts with ``:`` so that it
  is read from the root of the command tree, not relative to the previous header (SCPI-1999 vol. 1
  §6.2.4, from memory); common commands (``*RST``) need no colon.  With ``join`` the error query
  travels in the same message as the command it checks: one exchange instead of two.
* ``errors_per_group``: inside :meth:`ScpiSession.group`, the error queue is read once after the
  group instead of after every command (the entries name the group's commands together).

The pure parts live here; :class:`drivers.scpi.session.ScpiSession` applies them.
"""

from __future__ import annotations

import functools
from collections.abc import Sequence
from dataclasses import dataclass


@dataclass(frozen=True, kw_only=True)
class MessagePolicy:
    """What a dialect allows (all off: one command and one error query per message, as SCPI's
    plainest reading)."""

    skip_unchanged: bool = False
    join: bool = False
    errors_per_group: bool = False


#: All savings off: the baseline the ``scpi_exchanges`` benchmark compares against.
PLAIN = MessagePolicy()


@functools.lru_cache(maxsize=256)
def absolute(unit: str) -> str:
    """``unit`` read from the root of the command tree: a leading ``:`` unless it is a common
    command (``*...``) or already absolute.  Kept per text: every checked write asks it of the
    same error query."""
    text = unit.strip()
    if not text or text.startswith((":", "*")):
        return text
    return ":" + text


def join_units(units: Sequence[str]) -> str:
    """One program message of ``units``: the first as written, the rest absolute, ``;``-separated.

    ``["SENS:SWE:POIN 400", "SENS:SWE:SRAT 1e9"]`` -> ``"SENS:SWE:POIN 400;:SENS:SWE:SRAT 1e9"``.
    A unit may not hold a newline (it would end the message early); ``ValueError`` if one does.
    """
    return _joined(tuple(units))


@functools.lru_cache(maxsize=256)
def _joined(units: tuple[str, ...]) -> str:
    # Kept by its units (a pure function of text, so the kept text is always the one computed):
    # every capture joins the same acquisition, operation-complete and error queries (1.3 us
    # each time, 0.2 us kept).  A refusal raises and is not kept.
    parts = [u.strip() for u in units if u.strip()]
    if not parts:
        raise ValueError("no command to send")
    for part in parts:
        if "\n" in part or "\r" in part:
            raise ValueError(f"command {part!r} holds a line break")
    return ";".join([parts[0], *(absolute(p) for p in parts[1:])])
