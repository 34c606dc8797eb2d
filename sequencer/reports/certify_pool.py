"""``CertificatePool``: one process pool that renders the certificates of several runs.

Why a pool that outlives one run: starting a worker costs the import of matplotlib, fpdf and the
certificate modules and the building of its figures (seconds on a loaded 2-core machine).
``certify_run`` paid that per run; the demo certifies a dozen runs.  Here each worker does the
plot set-up once as it starts (``certify_worker``: matplotlib on Agg, the renderers, one
:class:`~sequencer.reports.plots.Plotter` with its figures built) and keeps it for every task.
Runs are submitted as they finish -- the caller goes on (the demo qualifies the next board) while
the workers draw.  ``wait`` collects, with progress and the time left at the pace so far.

The data of each certificate is read from the store in the caller's process (one snapshot per run);
only plain data crosses to the workers.  Workers start with ``forkserver`` (``spawn`` where it is
missing), never ``fork``, which is unsafe in a process that runs threads (the simulated bench does).
Both start a worker by importing the caller's ``__main__`` module: a script that uses the pool (or
``certify_run`` with more than one worker) must call it under ``if __name__ == "__main__":``, else
each worker runs the script's top level again (Python's multiprocessing documentation, "The spawn
and forkserver start methods": "Safe importing of main module").  No fallback can undo that second
run, so a pool broken that way is reported naming the guard (``BROKEN_POOL``), never retried here.
"""

from __future__ import annotations

import multiprocessing
import os
import time
from collections.abc import Callable
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path
from types import TracebackType
from typing import Any, Self

from .certificate_data import CertificateData, gather_certificates
from .reading import StoreReader

TASKS_PER_WORKER = 1
"""A run's certificates are split into this many tasks per worker (twice that with
``fine_progress``, so that a single run's progress moves).  Measured on this 2-core machine, 32 certificates: tasks of 16 took
8.4-10.3 s, tasks of 2 took 10.9-12.8 s (a per-task cost), rendering in one process 10.3-11.7 s."""
STALL_S = 600.0
"""``wait`` gives up (``RuntimeError``) when no task has finished for this long: a worker that hangs
must not hang the command.  Generous: a task is two certificates, seconds even on a loaded machine."""

WORKER_MODULE = "sequencer.reports.certify_worker"

BROKEN_POOL = (
    "a certificate worker process ended abruptly ({cause}). From a script: call certify_run / "
    "CertificatePool under 'if __name__ == \"__main__\":' -- each worker starts by importing the "
    "script (multiprocessing's forkserver and spawn start methods), and without that guard runs "
    "its top level again; or pass workers=1 to render in this process"
)


def _render_in_worker(datas: list[CertificateData], out_dir: str, paper: str) -> list[str]:
    import importlib

    return importlib.import_module(WORKER_MODULE).render(datas, out_dir, paper)


def _set_up_worker() -> None:
    """The shared plot set-up, once per worker as it starts (``certify_worker`` at import).

    A worker ignores SIGINT: a Ctrl-C in the terminal reaches the whole process group, and the
    command that owns the pool decides what stops (it cancels what is queued and waits for what is
    being drawn); a worker interrupted mid-drawing only broke the pool with a traceback."""
    import importlib
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    importlib.import_module(WORKER_MODULE)


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
        fine_progress: bool = False,
    ) -> None:
        self.workers = max(1, workers or os.cpu_count() or 1)
        self.paper = paper
        self._report = on_progress or (lambda done, total, left: None)
        self._parts = self.workers * TASKS_PER_WORKER * (2 if fine_progress else 1)
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
        size = max(1, -(-len(datas) // self._parts))  # ceiling division
        for i in range(0, len(datas), size):
            chunk = datas[i:i + size]
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
                try:
                    self._written.update(future.result())  # a worker's error is raised here
                except BrokenProcessPool as exc:
                    raise RuntimeError(BROKEN_POOL.format(cause=exc)) from exc
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
