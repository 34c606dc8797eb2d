"""Who holds a bench: the running runs recorded on it, and ``safe --take-over`` taking it from one.

``benchwright safe`` must not pull the bias from under a run that is still going (that run stops
with Ctrl-C and brings its own bias down).  A running run on the bench whose recorder looks live
(``lease.judge``: its process on this host and boot, or a fresh heartbeat from elsewhere) holds
the bench; ``safe`` refuses unless told ``--take-over``.  A take-over is recorded: the run becomes
``interrupted`` under a revoked lease, so its process -- if it is alive after all -- loses the lease
at its next heartbeat, stops, and writes nothing more into the run (``recording.Recorder``).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import Connection, select, update

from sequencer.errors import StoreError
from sequencer.store import lease
from sequencer.store.lifecycle import annotate
from sequencer.store.liveness import ProcessIdentity
from sequencer.store.models import Run

TAKE_OVER_KIND = "safe_take_over"


@dataclass(frozen=True)
class BenchHolder:
    """A run recorded as running on the bench, and what its lease says of its recorder."""

    run_id: int
    procedure: str
    board: str
    host: str
    pid: int
    seen: lease.Judgement

    @property
    def live(self) -> bool:
        return self.seen.state == "live"

    def describe(self) -> str:
        return f"run {self.run_id} ({self.procedure} on {self.board}): {self.seen.why}"


def holders(
    conn: Connection,
    bench: str,
    me: ProcessIdentity,
    at: datetime,
    stale_after_s: float = lease.DEFAULT_STALE_AFTER_S,
) -> list[BenchHolder]:
    """Every run recorded as running on ``bench``, oldest first, each judged by its lease."""
    rows = conn.execute(
        select(
            Run.id, Run.procedure, Run.board, Run.host, Run.pid, Run.process_tag,
            Run.started_at, Run.heartbeat_at,
        )
        .where(Run.status == "running", Run.bench == bench)
        .order_by(Run.started_at, Run.id)
    ).all()
    return [
        BenchHolder(r.id, r.procedure, r.board, r.host, r.pid, lease.judge(r, me, at, stale_after_s))
        for r in rows
    ]


def take_over(conn: Connection, holder: BenchHolder, me: ProcessIdentity, at: datetime) -> None:
    """Record that ``safe --take-over`` took the bench from the running run ``holder``: the run is
    ``interrupted`` (resumable) under a new lease nobody holds, with an audit entry saying who."""
    reason = (
        f"the bench was made safe with `benchwright safe --take-over` by {me.host} (pid {me.pid}) "
        f"while this run's recorder looked live ({holder.seen.why})"
    )
    result = conn.execute(
        update(Run)
        .where(Run.id == holder.run_id, Run.status == "running")
        .values(status="interrupted", ended_at=at, reason=reason, lease_token=lease.new_token())
    )
    if result.rowcount != 1:
        raise StoreError(f"run {holder.run_id} is no longer running: nothing to take over")
    detail = {
        "from": "running", "to": "interrupted", "previous_host": holder.host,
        "previous_pid": holder.pid, "host": me.host, "pid": me.pid, "seen": holder.seen.why,
    }
    annotate(conn, holder.run_id, kind=TAKE_OVER_KIND, text=reason, detail=detail, at=at)
