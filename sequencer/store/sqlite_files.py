"""The default database URL, and what both ways of opening an SQLite file need (SQLAlchemy's
``connect`` and the stdlib ``light``): the busy timeout and whether the file lies on a network
filesystem (WAL needs shared memory between processes, which network filesystems do not give:
https://www.sqlite.org/wal.html).  Standard library only.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

DEFAULT_URL = "sqlite:///benchwright.db"
DEFAULT_BUSY_TIMEOUT_S = 30.0
NETWORK_FILESYSTEMS = frozenset({"nfs", "nfs4", "cifs", "smb3", "smbfs", "9p", "fuse.sshfs", "afs"})


def network_filesystem(path: Path, mounts_text: str) -> str | None:
    """The network filesystem type ``path`` lies on, from ``/proc/mounts`` text, or None."""
    best, best_type = "", None
    target = str(path.resolve())
    for line in mounts_text.splitlines():
        fields = line.split()
        if len(fields) < 3:
            continue
        mount_point = fields[1].replace("\\040", " ")
        inside = target == mount_point or target.startswith(mount_point.rstrip("/") + "/")
        if inside and len(mount_point) >= len(best):
            best, best_type = mount_point, fields[2]
    return best_type if best_type in NETWORK_FILESYSTEMS else None


def default_url(env: Mapping[str, str]) -> str:
    """The database URL: ``BENCHWRIGHT_DB`` from ``env`` if set and not empty, else the default."""
    return env.get("BENCHWRIGHT_DB") or DEFAULT_URL
