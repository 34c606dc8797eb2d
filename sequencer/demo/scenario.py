"""Run the demo scenario: the invented batch NR-2026-W14, qualified on simulated boards.

Everything the demo writes goes into one folder (default ``./benchwright-demo``)::

    results.db                 SQLite results store (every step, trace, value, limit, verdict);
                               a throwaway, so its commits do not wait for the disk
    certificates/              one PDF and one HTML certificate per channel of every board
    batch-summary.txt          the batch summary as printed
    batch-report/              the batch report (PDF and HTML)

Running it again qualifies the boards again into the same database (the summary takes each board's
latest completed run).  The demo always ends normally: some of its boards fail on purpose.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sequencer.batchrun import BatchOptions, BatchOutcome, qualify_batch
from sequencer.pace import describe_left
from sequencer.procedure import load_batch
from sequencer.store import Store

DEMO_BATCH = "batch.yaml"
DEMO_MODULE_BATCH = "modules.yaml"
"""The scintillator modules of the scenario, tested with cosmic rays after the preamp boards."""
DEMO_TRIGGER_BATCH = "trigger.yaml"
"""The trigger and digitizer chain: a coincidence unit and a fast digitizer, each with a fault."""
DEFAULT_OUT = Path("benchwright-demo")


def demo_dir() -> Path:
    """The folder of the scenario's data files (package data)."""
    return Path(__file__).resolve().parent


@dataclass(frozen=True, kw_only=True)
class DemoResult:
    """Where the demo put everything, and how the batch went."""

    out_dir: Path
    db_url: str
    certificates: tuple[Path, ...]
    summary_path: Path
    report: tuple[Path, ...]
    outcome: BatchOutcome
    seconds: float
    module_outcome: BatchOutcome | None = None
    trigger_outcome: BatchOutcome | None = None


def run_demo(
    out_dir: Path | str = DEFAULT_OUT,
    *,
    echo: Callable[[str], None] = print,
    workers: int | None = None,
) -> DemoResult:
    """Qualify the demo batch on the simulator, certify every run, summarise the batch."""
    from sequencer.reports import batch_report, batch_summary

    start = time.perf_counter()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    batch = load_batch(demo_dir() / DEMO_BATCH)
    db_url = f"sqlite:///{(out / 'results.db').resolve()}"
    echo(f"demo: batch {batch.name} ({len(batch.boards)} invented boards) on the simulator")
    from sequencer.reports.certify_pool import CertificatePool

    progress = _CertificateProgress(echo)
    echo("demo: its database is a throwaway, so commits do not wait for the disk (a power cut may "
         "lose the last steps); the store of a real run waits for the disk after every step")
    with (
        Store.open(db_url, wait_for_disk=False) as store,
        CertificatePool(workers, on_progress=progress) as pool,
    ):
        # the workers draw each board's certificates while the next board is qualified
        outcome = _qualify(store, batch, out, echo, pool)
        modules = load_batch(demo_dir() / DEMO_MODULE_BATCH)
        echo(
            f"demo: batch {modules.name} ({len(modules.boards)} invented scintillator modules, "
            "cosmic rays on the simulator's fast clock)"
        )
        module_outcome = _qualify(store, modules, out, echo, pool)
        trigger = load_batch(demo_dir() / DEMO_TRIGGER_BATCH)
        echo(
            f"demo: batch {trigger.name} ({len(trigger.boards)} invented trigger-chain modules: "
            "a coincidence unit, a fast digitizer)"
        )
        trigger_outcome = _qualify(store, trigger, out, echo, pool)
        batches = (batch, modules, trigger)
        text = "\n\n".join(batch_summary(store, b.name).to_text() for b in batches)
        summary_path = out / "batch-summary.txt"
        summary_path.write_text(text + "\n", encoding="utf-8")
        report = [p for b in batches for p in batch_report(store, b.name, out / "batch-report")]
        progress.waiting = True
        certificates = pool.wait()
    echo("")
    echo(text)
    return DemoResult(
        out_dir=out,
        db_url=db_url,
        certificates=tuple(certificates),
        summary_path=summary_path,
        report=tuple(report),
        outcome=outcome,
        seconds=time.perf_counter() - start,
        module_outcome=module_outcome,
        trigger_outcome=trigger_outcome,
    )


def _qualify(
    store: Store, batch: Any, out: Path, echo: Callable[[str], None], pool: Any
) -> BatchOutcome:
    """Qualify one batch of the scenario on the simulator; each board's run goes to the
    certificate pool as soon as it ends."""

    def certify(board: Any) -> None:
        if board.run_id is not None:
            pool.submit_run(store, board.run_id, out / "certificates")

    options = BatchOptions(
        sim_dir=str(demo_dir()), unattended=True, requalify=True, echo=echo, on_board=certify
    )
    return qualify_batch(batch, store, options)


class _CertificateProgress:
    """Progress lines of the certificate pool: once the batches are done (``waiting``), about every
    eighth of the certificates, with the time left at the pace so far."""

    def __init__(self, echo: Callable[[str], None]) -> None:
        self.echo = echo
        self.waiting = False
        self._told = -1

    def __call__(self, done: int, total: int, seconds_left: float | None) -> None:
        if not self.waiting or done == self._told:
            return
        if done < total and self._told >= 0 and done - self._told < max(1, total // 8):
            return
        self._told = done
        left = describe_left(seconds_left) if done < total else ""
        self.echo(f"demo: certificates {done}/{total} written" + (f", {left}" if left else ""))


def describe(result: DemoResult) -> list[str]:
    """Lines telling where everything is."""
    cert_dir = result.out_dir / "certificates"
    return [
        f"results database : {result.db_url}",
        f"certificates     : {cert_dir}/ ({len(result.certificates)} files)",
        f"batch summary    : {result.summary_path}",
        f"batch report     : {', '.join(str(p) for p in result.report)}",
        f"scenario files   : {demo_dir()}/",
        f"try next         : benchwright runs --db {result.db_url}",
        f"finished in {result.seconds:.0f} s",
    ]
