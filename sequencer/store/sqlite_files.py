"""The default database URL, and what both ways of opening an SQLite file need (SQLAlchemy's
``connect`` and the stdlib ``light``): the busy timeout and whether the file lies on a network
filesystem (WAL needs shared memory between processes, which network filesystems do not give:
https://www.sqlite.org/wal.html).  Standard library only.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path
from urllib.parse import quote

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


def read_only_location(path: Path) -> bool:
    """True when the database file or its folder cannot be written: a read-only mount (which
    ``access(2)`` reports even to root, EROFS) or permissions.  Such a database can only be read."""
    return not os.access(path.parent, os.W_OK) or (path.exists() and not os.access(path, os.W_OK))


def read_only_uri(path: Path) -> str:
    """An SQLite ``file:`` URI that reads ``path`` and never writes (https://www.sqlite.org/uri.html).

    ``mode=ro``; and ``immutable=1`` when the folder cannot be written and holds no write-ahead log
    with content: a WAL database read needs its ``-shm`` index beside it, which SQLite cannot create
    there (https://www.sqlite.org/wal.html, "Read-Only Databases"), while nothing can change a file
    nobody may write.  A non-empty ``-wal`` left beside it is read through ``mode=ro`` alone, so
    its committed transactions are not skipped.
    """
    resolved = path.resolve()
    uri = f"file:{quote(str(resolved))}?mode=ro"
    wal = resolved.with_name(resolved.name + "-wal")
    log_with_content = wal.exists() and wal.stat().st_size > 0
    if not os.access(resolved.parent, os.W_OK) and not log_with_content:
        uri += "&immutable=1"
    return uri
