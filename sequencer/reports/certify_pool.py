"""``CertificatePool``: one process pool that renders the certificates of several runs.

Why a pool that outlives one run: starting workers costs each of them the import of matplotlib,
fpdf and the certificate modules and the building of its figures (a second or more on a loaded
2-core machine).  ``certify_run`` paid that once per run; the demo certifies eight runs.  Here the
workers start once, their initializer does the shared plot set-up (matplotlib on Agg, one
:class:`~sequencer.reports.plots.Plotter` per process, kept for every later certificate), and runs
are submitted as they finish -- the caller goes on (the demo qualifies the next board) while the
workers draw.  ``wait`` collects, with progress and the time left at the pace so far.

The data of each certificate is read from the store in the caller's process (one snapshot per run);
only plain data crosses to the workers.  Workers start with ``forkserver`` (``spawn`` where it is
missing), never ``fork``, which is unsafe in a process that runs threads (the simulated bench does).
"""

from __future__ import annotations

import multiprocessing
import os
import time
from collections.abc import Callable
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from pathlib import Path
from types import TracebackType
from typing import Any, Self

from .certificate_data import CertificateData, gather_certificates
from .reading import StoreReader

PER_TASK = 2
"""Certificates per task: small enough that progress moves and the two workers stay balanced,
large enough that the pickling of a task is not the cost."""
STALL_S = 600.0
"""``wait`` gives up (``RuntimeError``) when no task has finished for this long: a worker that hangs
must not hang the command.  Generous: a task is two certificates, seconds even on a loaded machine."""

_PLOTTER: Any = None  # the worker's Plotter, built once by ``_set_up_worker``


def _set_up_worker() -> None:
    """Shared plot set-up, once per worker process: Agg, the modules, one Plotter."""
    global _PLOTTER
    import matplotlib

    matplotlib.use("Agg")
    from . import certificate_html, certificate_pdf  # noqa: F401  (imported once, here)
    from .plots import Plotter

    _PLOTTER = Plotter()


def _render_in_worker(datas: list[CertificateData], out_dir: str, paper: str) -> list[str]:
    from .certify import render_certificates

    return render_certificates(datas, out_dir, paper, plotter=_PLOTTER)


def pool_context() -> Any:
    methods = multiprocessing.get_all_start_methods()
    return multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")


class CertificatePool:
    """Render certificates in ``workers`` processes (default: the CPU count).

    ``on_progress(done, total, seconds_left)`` is told, in the caller's thread, after each
    submission and as ``wait`` collects (``seconds_left`` None before the first is done).
    """

    def __init__(
        self,
        workers: int | None = None,
        *,
        paper: str = "A4",
        on_progress: Callable[[int, int, float | None], None] | None = None,
    ) -> None:
        self.workers = max(1, workers or os.cpu_count() or 1)
        self.paper = paper
        self._report = on_progress or (lambda done, total, left: None)
        self._pool = ProcessPoolExecutor(
            max_workers=self.workers, mp_context=pool_context(), initializer=_set_up_worker
        )
        self._pending: dict[Future[list[str]], int] = {}
        self._expected: list[Path] = []
        self._written: set[str] = set()
        self._started = time.perf_counter()
        self._done = 0

    def submit(self, datas: list[CertificateData], out_dir: Path | str) -> list[Path]:
        """Queue ``datas``; returns the paths they will have (PDF then HTML per certificate)."""
        out = Path(out_dir)
        out.mkdir(parents=True, exist_ok=True)
        from .certify import certificate_stem

        paths = [out / f"{certificate_stem(d)}{s}" for d in datas for s in (".pdf", ".html")]
        for i in range(0, len(datas), PER_TASK):
            chunk = datas[i:i + PER_TASK]
            self._pending[self._pool.submit(_render_in_worker, chunk, str(out), self.paper)] = len(chunk)
        self._expected += paths
        self._collect(block=False)
        return paths

    def submit_run(self, store: StoreReader, run_id: int, out_dir: Path | str) -> list[Path]:
        """Read run ``run_id``'s certificates from ``store`` here and queue them."""
        return self.submit(gather_certificates(store, run_id), out_dir)

    @property
    def total(self) -> int:
        return len(self._expected) // 2

    def _collect(self, *, block: bool) -> None:
        while self._pending:
            done, _ = wait(list(self._pending), timeout=STALL_S if block else 0,
                           return_when=FIRST_COMPLETED)
            if not done:
                if block:  # a worker that died breaks the pool (its futures raise); this one hangs
                    raise RuntimeError(f"certificate workers finished nothing for {STALL_S:.0f} s")
                break
            for future in done:
                count = self._pending.pop(future)
                self._written.update(future.result())  # a worker's error is raised here
                self._done += count
            if not block:
                break
        elapsed = time.perf_counter() - self._started
        from sequencer.pace import time_left

        self._report(self._done, self.total, time_left(self._done, self.total, elapsed))

    def wait(self) -> list[Path]:
        """Every certificate submitted so far, once written (``RuntimeError`` if one is missing)."""
        while self._pending:
            self._collect(block=True)
        missing = [p for p in self._expected if str(p) not in self._written]
        if missing:
            raise RuntimeError(f"certificate workers did not write {missing[0]}")
        return list(self._expected)

    def close(self) -> None:
        self._pool.shutdown(wait=True, cancel_futures=True)

    def __enter__(self) -> Self:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.close()
