"""The lease a running run holds on its record: a unique token and a heartbeat.

Who may say a running run's recorder is gone:

* on the same host *and the same boot* (the boot id in ``process_tag``, see ``liveness``), the
  process table: a pid that is gone (or reused) is a dead recorder at once;
* anywhere else (another PC, even one with the same host name; a reboot), only the heartbeat: a
  run whose heartbeat is older than ``stale_after_s`` has lost its recorder (the PC died, or the
  process was frozen that long).  A fresh heartbeat from elsewhere is a live run, never touched.

The recorder refreshes ``heartbeat_at`` every ``DEFAULT_HEARTBEAT_S`` while it runs, and only
while the row still holds its token: a run taken over by ``resume --take-over`` has another token,
and the old recorder learns that it lost the lease at its next beat.  Until then (a frozen process
that comes back) every write it makes checks the token first (``holds``): its steps are refused and
its final status is not written over the new owner's run, only noted beside it.
"""

from __future__ import annotations

import secrets
from datetime import datetime, timedelta

from sqlalchemy import Connection, text, update

from sequencer.store.liveness import (
    DEFAULT_HEARTBEAT_S,
    DEFAULT_STALE_AFTER_S,
    Judgement,
    State,
    judge,
)
from sequencer.store.models import Run

__all__ = ["DEFAULT_HEARTBEAT_S", "DEFAULT_STALE_AFTER_S", "Judgement", "State", "beat",
           "holds", "judge", "new_token", "stale_before"]


def new_token() -> str:
    """A lease token: 128 random bits (``secrets``), unique across PCs, boots and processes."""
    return secrets.token_hex(16)


def beat(conn: Connection, run_id: int, token: str, at: datetime) -> bool:
    """Refresh the heartbeat of a run still running under ``token``; False: the lease is lost."""
    result = conn.execute(
        update(Run)
        .where(Run.id == run_id, Run.lease_token == token, Run.status == "running")
        .values(heartbeat_at=at)
    )
    return result.rowcount == 1


def holds(conn: Connection, run_id: int, token: str) -> bool:
    """True while the run ``run_id`` is held under ``token`` (whatever its status): what every
    write of a recorder checks, so a recorder that lost the run writes nothing over its new owner."""
    held = conn.execute(_HELD_BY, {"id": run_id}).scalar_one_or_none()
    return held == token


#: ``holds`` runs before every step a recorder writes: plain SQL costs ~0.2 ms against ~0.9-1.4 ms
#: for the same query built with ``select()`` each time (measured on this 2-CPU machine at load 18).
_HELD_BY = text("SELECT lease_token FROM runs WHERE id = :id")


def stale_before(now: datetime, stale_after_s: float) -> datetime:
    return now - timedelta(seconds=stale_after_s)
