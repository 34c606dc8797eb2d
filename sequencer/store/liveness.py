"""Is the process that recorded a run still alive?  Host name, pid and a tag against pid reuse.

The tag is ``boot_id:start_ticks`` read from ``/proc`` on Linux ("" elsewhere): a pid reused after
a reboot or by a later process has another tag, so a stale run is recognised as such.

``judge`` decides from these (and the heartbeat) whether a running run's recorder is live; it lives
here, free of SQLAlchemy, so that the light read path (``store.light``) can ask it too.
"""

from __future__ import annotations

import os
import socket
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any, Literal

PROC = Path("/proc")
#: Seconds between two heartbeats of a running run.
DEFAULT_HEARTBEAT_S = 5.0
#: A heartbeat older than this (12 missed beats) means the recorder is gone.
DEFAULT_STALE_AFTER_S = 60.0


@dataclass(frozen=True, kw_only=True)
class ProcessIdentity:
    host: str
    pid: int
    tag: str


def _stat_fields(pid: int, proc: Path) -> list[str]:
    """Fields 3.. of ``/proc/PID/stat`` (state first), or [] if unreadable."""
    try:
        stat = (proc / str(pid) / "stat").read_text()
    except OSError:
        return []
    # the command name (field 2) is in parentheses and may hold spaces: split after the last ")"
    return stat[stat.rindex(")") + 2 :].split()


def process_tag(pid: int, proc: Path = PROC) -> str:
    """``boot_id:start_ticks`` of ``pid`` or "" if unknown (no /proc, or no such process)."""
    fields = _stat_fields(pid, proc)
    try:
        boot_id = (proc / "sys/kernel/random/boot_id").read_text().strip()
    except OSError:
        return ""
    return f"{boot_id}:{fields[19]}" if len(fields) > 19 else ""


def this_process() -> ProcessIdentity:
    """The identity recorded with a run started or resumed by this process."""
    pid = os.getpid()
    return ProcessIdentity(host=socket.gethostname(), pid=pid, tag=process_tag(pid))


def process_alive(pid: int, tag: str) -> bool:
    """Whether ``pid`` on this host is alive and (if ``tag`` is known) still the same process."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass  # exists, owned by another user
    fields = _stat_fields(pid, PROC)
    if fields and fields[0] == "Z":
        return False  # killed, not yet reaped by its parent
    return not tag or process_tag(pid) in ("", tag)


State = Literal["live", "dead", "stale"]


def _boot(tag: str) -> str:
    return tag.split(":", 1)[0] if ":" in tag else ""


@dataclass(frozen=True)
class Judgement:
    state: State
    why: str  # one line: what was seen


def judge(row: Any, me: ProcessIdentity, now: datetime, stale_after_s: float) -> Judgement:
    """Whether the recorder of the running run ``row`` is live, dead (its process is gone) or
    stale (no heartbeat for ``stale_after_s``).  ``row`` has host, pid, process_tag,
    heartbeat_at and started_at (and may have last_step_at)."""
    same_boot = row.host == me.host and _boot(row.process_tag) and (
        _boot(row.process_tag) == _boot(me.tag)
    )
    if same_boot:
        if process_alive(row.pid, row.process_tag):
            return Judgement("live", f"its process {row.pid} on {row.host} is running")
        return Judgement("dead", f"its process {row.pid} on {row.host} has ended")
    last = max(
        t for t in (row.heartbeat_at, getattr(row, "last_step_at", None), row.started_at) if t
    )
    age = (now - last).total_seconds()
    if age > stale_after_s:
        return Judgement("stale", f"no heartbeat from {row.host} for {age:.0f} s")
    return Judgement("live", f"{row.host} (pid {row.pid}) gave a heartbeat {max(age, 0):.0f} s ago")


@dataclass(frozen=True)
class Gone:
    """A run stored as ``running`` whose recorder is gone: what ``lifecycle.mark_stale`` writes for
    it (``reason``, ``ended_at`` the last moment known), or what a read-only listing shows."""

    run_id: int
    state: State  # dead or stale
    reason: str
    ended_at: datetime


def recorder_gone(row: Any, me: ProcessIdentity, now: datetime, stale_after_s: float) -> Gone | None:
    """``judge`` the running run ``row`` (with its ``id``); None while its recorder is live."""
    seen = judge(row, me, now, stale_after_s)
    if seen.state == "live":
        return None
    reason = (
        "the recording process ended without finishing the run"
        if seen.state == "dead"
        else f"the recorder stopped giving a heartbeat ({seen.why})"
    )
    last = max(t for t in (getattr(row, "last_step_at", None), row.heartbeat_at, row.started_at) if t)
    return Gone(row.id, seen.state, reason, last)
