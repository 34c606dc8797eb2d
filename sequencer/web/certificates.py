"""Certificates in the web view: the files ``benchwright certify`` wrote into the folders given to
``serve --certificates DIR``, found by their number (``BW-<run id, 6 digits>-...``, the scheme of
``sequencer.reports.certificate_data``) and checked against the database with
``sequencer.reports.verify_certificate`` — the same check as ``benchwright verify``.

A check is kept per file (path, size, modification time): a completed run never changes, so only a
changed file is checked again.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from pathlib import Path
from typing import Any

SUFFIXES = (".pdf", ".html")


@dataclass(frozen=True, kw_only=True)
class CertificateFile:
    name: str
    path: Path
    kind: str  # "PDF" or "HTML"


@dataclass(frozen=True, kw_only=True)
class CertificateCheck:
    name: str
    ok: bool
    number: str
    differences: tuple[str, ...]


def certificates_of_run(folders: tuple[Path, ...], run_id: int) -> list[CertificateFile]:
    """The certificate files of run ``run_id`` in ``folders``, by name."""
    found = []
    for folder in folders:
        for path in sorted(folder.glob(f"BW-{run_id:06d}-*")):
            if path.suffix.lower() in SUFFIXES and path.is_file():
                found.append(CertificateFile(name=path.name, path=path, kind=path.suffix[1:].upper()))
    return found


def find_certificate(folders: tuple[Path, ...], name: str) -> Path | None:
    """The file called ``name`` (a bare certificate file name, nothing else) in ``folders``."""
    if Path(name).name != name or not name.startswith("BW-") or Path(name).suffix.lower() not in SUFFIXES:
        return None
    for folder in folders:
        path = folder / name
        if path.is_file():
            return path
    return None


class CertificateChecks:
    """``verify_certificate`` results per file, checked again only when the file changes."""

    def __init__(self) -> None:
        self._known: dict[tuple[str, int, int], CertificateCheck] = {}
        self._lock = threading.Lock()

    def check(self, store: Any, cert: CertificateFile) -> CertificateCheck:
        from sequencer.reports import verify_certificate

        stat = cert.path.stat()
        key = (str(cert.path), stat.st_size, stat.st_mtime_ns)
        with self._lock:
            if key in self._known:
                return self._known[key]
        try:
            result = verify_certificate(store, cert.path)
            found = CertificateCheck(name=cert.name, ok=result.ok, number=result.number,
                                     differences=tuple(result.differences[:5]))  # fmt: skip
        except ValueError as exc:  # not a benchwright certificate at all
            found = CertificateCheck(name=cert.name, ok=False, number="", differences=(str(exc),))
        with self._lock:
            self._known[key] = found
        return found
