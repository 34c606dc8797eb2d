"""Is the process that recorded a run still alive?  Host name, pid and a tag against pid reuse.

The tag is ``boot_id:start_ticks`` read from ``/proc`` on Linux ("" elsewhere): a pid reused after
a reboot or by a later process has another tag, so a stale run is recognised as such.
"""

from __future__ import annotations

import os
import socket
from dataclasses import dataclass
from pathlib import Path

PROC = Path("/proc")


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
