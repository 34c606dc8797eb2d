"""Run the demo scenario: three invented batches (preamp boards, scintillator modules, the
trigger chain), qualified on simulated boards by three benches of one lab at once
(``benches``: a process per bench, one shared database, progress prefixed with the bench).

Everything the demo writes goes into one folder (default ``./benchwright-demo``)::

    results.db                 SQLite results store (every step, trace, value, limit, verdict);
                               a throwaway, so its commits do not wait for the disk
    certificates/              one PDF and one HTML certificate per channel of every board
    batch-summary.txt          the batch summary as printed
    batch-report/              the batch report (PDF and HTML)

Running it again qualifies the boards again into the same database (the summary takes each board's
latest completed run).  The demo always ends normally: some of its boards fail on purpose.
Stopped (Ctrl-C, SIGTERM), every bench stops its run as a single run stops -- bias ramped down
and off -- and the demo exits 3 once all have ended.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sequencer.batchrun import BatchOutcome
from sequencer.pace import describe_left
from sequencer.procedure import Batch, load_batch
from sequencer.store import Store

if TYPE_CHECKING:
    from .benches import Bench

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


BATCH_FILES = (DEMO_BATCH, DEMO_MODULE_BATCH, DEMO_TRIGGER_BATCH)
PREAMP_BENCHES = 2
"""The preamp batch's boards are shared by this many identical benches (alternately, in batch
order): its five boards, each with two real-time ramps, would alone take longer than the other
two batches together."""


def demo_benches(batches: Mapping[str, Batch]) -> list[Bench]:
    """The benches of the demo's lab: two preamp benches sharing the preamp batch, a module bench
    and a trigger-chain bench; each name is recorded with its runs."""
    from .benches import Bench

    preamp = batches[DEMO_BATCH]
    serials = [b.serial for b in preamp.boards]
    benches = [
        Bench(name=f"demo-bench-preamp-{i + 1}", batch_file=DEMO_BATCH, label=f"preamp-{i + 1}",
              serials=tuple(serials[i::PREAMP_BENCHES]))
        for i in range(PREAMP_BENCHES)
    ]
    benches.append(Bench(name="demo-bench-modules", batch_file=DEMO_MODULE_BATCH, label="modules"))
    benches.append(Bench(name="demo-bench-trigger", batch_file=DEMO_TRIGGER_BATCH, label="trigger"))
    return benches


def run_demo(
    out_dir: Path | str = DEFAULT_OUT,
    *,
    echo: Callable[[str], None] = print,
    workers: int | None = None,
) -> DemoResult:
    """Qualify the scenario's three batches at once on simulated benches of one lab, into one
    database (``benches``); certify every run as it ends; summarise each batch once its benches
    are done."""
    from sequencer.reports import batch_report, batch_summary
    from sequencer.reports.certify_pool import CertificatePool

    from .benches import BenchRoom

    start = time.perf_counter()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    batches = {file: load_batch(demo_dir() / file) for file in BATCH_FILES}
    db_url = f"sqlite:///{(out / 'results.db').resolve()}"
    benches = demo_benches(batches)
    _introduce(batches, benches, echo)
    progress = _CertificateProgress(echo)
    texts: dict[str, str] = {}
    reports: dict[str, list[Path]] = {}
    Store.open(db_url, wait_for_disk=False).close()  # the schema, before any bench opens it
    from . import forked

    if forked.can_fork():
        forked.warm_up()  # once here, for every bench forked from this process
    with (
        BenchRoom(benches, db_url, fork=True) as room,
        Store.open(db_url, wait_for_disk=False) as store,
        CertificatePool(workers, on_progress=progress) as pool,
    ):
        def certify(bench: Bench, board: Any) -> None:
            # the workers draw each board's certificates while the benches go on (not once the
            # demo is being stopped)
            if board.run_id is not None and not bench.signalled:
                pool.submit_run(store, board.run_id, out / "certificates")

        def summarise(bench: Bench) -> None:
            # a batch's summary and report once all its benches are done, while the others work
            if any(b.outcome is None for b in benches if b.batch_file == bench.batch_file):
                return
            name = batches[bench.batch_file].name
            texts[bench.batch_file] = batch_summary(store, name).to_text()
            reports[bench.batch_file] = batch_report(store, name, out / "batch-report")

        room.follow(echo=echo, on_board=certify, on_done=summarise)
        room.check()  # a stop or a failed bench: no summary of half a batch
        text = "\n\n".join(texts[file] for file in BATCH_FILES)
        summary_path = out / "batch-summary.txt"
        summary_path.write_text(text + "\n", encoding="utf-8")
        progress.waiting = True
        certificates = pool.wait()
    echo("")
    echo(text)
    preamp, modules, trigger = (_batch_outcome(batches[f], benches) for f in BATCH_FILES)
    return DemoResult(
        out_dir=out,
        db_url=db_url,
        certificates=tuple(certificates),
        summary_path=summary_path,
        report=tuple(p for file in BATCH_FILES for p in reports[file]),
        outcome=preamp,
        seconds=time.perf_counter() - start,
        module_outcome=modules,
        trigger_outcome=trigger,
    )


def _introduce(batches: Mapping[str, Batch], benches: list[Bench], echo: Callable[[str], None]) -> None:
    preamp, modules, trigger = (batches[f] for f in BATCH_FILES)
    shares = [b for b in benches if b.batch_file == DEMO_BATCH]
    echo(f"demo: {len(benches)} simulated benches of one lab at once, one database:")
    echo(f"demo:   {', '.join(b.label for b in shares)} - batch {preamp.name}, "
         f"{len(preamp.boards)} invented preamp boards shared by {len(shares)} identical benches")
    echo(f"demo:   modules - batch {modules.name}, {len(modules.boards)} invented scintillator "
         "modules (cosmic rays on the simulator's fast clock)")
    echo(f"demo:   trigger - batch {trigger.name}, {len(trigger.boards)} invented trigger-chain "
         "modules (a coincidence unit, a fast digitizer)")
    echo("demo: its database is a throwaway, so commits do not wait for the disk (a power cut may "
         "lose the last steps); the store of a real run waits for the disk after every step")


def _batch_outcome(batch: Batch, benches: list[Bench]) -> BatchOutcome:
    """The outcome of ``batch`` over the benches that shared it, its boards in batch order."""
    shares = [b.outcome for b in benches if b.outcome is not None and b.outcome.batch == batch.name]
    by_serial = {o.serial: o for share in shares for o in share.boards}
    return BatchOutcome(
        batch=batch.name,
        boards=tuple(by_serial[b.serial] for b in batch.boards if b.serial in by_serial),
        stopped=any(share.stopped for share in shares),
    )


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
