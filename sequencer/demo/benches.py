"""The demo's benches at work together: one process per bench (``bench_process``), one shared
database, their progress interleaved line by line with the bench's name in front.

The batches of the scenario are independent (different boards, procedures and simulated
instruments), so a lab would run them on separate benches at the same time; the bias ramps, which
take real time on every bench, then overlap each other and the other benches' analysis.  Nothing
of a run is shortened: every bench runs its procedures exactly as ``benchwright batch`` would.

Signals: each bench process runs in a session of its own (the terminal's Ctrl-C reaches only this
process); every SIGINT or SIGTERM the demo receives is passed on once to every bench still
running, whose run then stops as a single run would (bias ramped down and off, run ``aborted``).
The demo waits for every bench to end before it returns or raises.
"""

from __future__ import annotations

import json
import os
import queue
import signal
import subprocess
import sys
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import IO, Any

from sequencer.batchrun import BatchOutcome, BoardOutcome
from sequencer.demo.bench_process import PARENT_ENV
from sequencer.demo.forked import ForkedProcess
from sequencer.errors import BenchwrightError, RunAborted

START = """\
import json, os, signal, sys
def _before_start(signum, frame):  # a stop before the bench began: nothing is live yet
    print(json.dumps({"interrupted": "stopped by %s before it began" % signal.Signals(signum).name}),
          flush=True)
    os._exit(0)
for s in (signal.SIGINT, signal.SIGTERM):
    signal.signal(s, _before_start)
from sequencer.demo.bench_process import main
sys.exit(main(sys.argv[1:]))
"""
"""A bench process's first lines: until ``bench_process.main`` takes the signals over (its imports
take seconds), a stop ends the process quietly, with its message."""
POLL_S = 0.25
"""How often the demo looks up from the benches' messages (signals are handled between looks)."""
STALL_S = 900.0
"""When no bench has said anything for this long, they are taken for hung: every bench still running
is stopped (SIGTERM; after as long again, SIGKILL)."""
END_S = 120.0
"""How long a bench may take to end once stopped (its ramp down: at most 60 V at 1 V/s)."""


@dataclass
class Bench:
    """One bench of the demo: its name (recorded with its runs), its batch file and its label in
    the interleaved progress."""

    name: str
    batch_file: str
    label: str
    serials: tuple[str, ...] = ()  # the boards of the batch this bench qualifies (empty: all)
    process: subprocess.Popen[str] | ForkedProcess | None = None
    outcome: BatchOutcome | None = None
    ended: str = ""  # why it ended without an outcome (interrupted, error)
    exit_code: int = 0
    signalled: int = 0  # signals passed on to it (a second one cuts its ramp-down short)
    ready: bool = False  # its signal handlers are set: a signal reaches it now
    held: list[int] = field(default_factory=list)  # signals held back until it is ready
    boards: list[BoardOutcome] = field(default_factory=list)


def outcome_from(data: dict[str, Any]) -> BatchOutcome:
    """A ``BatchOutcome`` from its ``dataclasses.asdict`` form (the bench's ``outcome`` message)."""
    boards = tuple(BoardOutcome(**b) for b in data["boards"])
    return BatchOutcome(batch=data["batch"], boards=boards, stopped=bool(data["stopped"]))


def _read(bench: Bench, stream: IO[str], into: queue.Queue[tuple[Bench, str | None]]) -> None:
    for line in stream:
        into.put((bench, line))
    into.put((bench, None))


@contextmanager
def _passing_signals_on(benches: list[Bench], stopped: list[str]) -> Iterator[None]:
    """While the benches run, SIGINT and SIGTERM are passed on to every bench still running (in
    the main thread only; elsewhere the caller's handlers stay)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def pass_on(signum: int, _frame: Any) -> None:
        stopped.append(signal.Signals(signum).name)
        for b in benches:
            _signal(b, signum)

    kinds = (signal.SIGINT, signal.SIGTERM)
    previous = {s: signal.signal(s, pass_on) for s in kinds}
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)


class BenchRoom:
    """The benches at work: entering passes SIGINT/SIGTERM on to them (from now until the end)
    and starts them -- forked warm when this process runs no other thread
    (:mod:`sequencer.demo.forked`), else as fresh ``python`` processes; :meth:`follow` shows
    and acts on their messages until all have ended; leaving after a failure of the demo stops
    every bench and waits for it.  Leaving normally raises ``RunAborted`` (cause ``signal``)
    after a stop, or the error of a bench that failed."""

    def __init__(self, benches: list[Bench], db_url: str, *, fork: bool = False) -> None:
        self.benches = benches
        self.db_url = db_url
        self.fork = fork
        self.stopped: list[str] = []
        self._messages: queue.Queue[tuple[Bench, str | None]] = queue.Queue()
        self._readers: list[threading.Thread] = []
        self._signals = _passing_signals_on(benches, self.stopped)

    def __enter__(self) -> BenchRoom:
        self._signals.__enter__()
        try:
            from . import forked

            fork = self.fork and forked.can_fork()
            streams: list[IO[str]] = []
            for bench in self.benches:
                args = [bench.batch_file, self.db_url, bench.name, ",".join(bench.serials)]
                if fork:  # every fork before the first reader thread starts
                    bench.process, stream = forked.fork_bench(args, [s.fileno() for s in streams])
                else:
                    bench.process = popen = subprocess.Popen(
                        [sys.executable, "-c", START, *args],
                        stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, text=True,
                        encoding="utf-8", start_new_session=True,
                        env={**os.environ, PARENT_ENV: str(os.getpid())},
                    )
                    assert popen.stdout is not None
                    stream = popen.stdout
                streams.append(stream)
            for bench, stream in zip(self.benches, streams, strict=True):
                reader = threading.Thread(
                    target=_read, args=(bench, stream, self._messages), daemon=True
                )
                reader.start()
                self._readers.append(reader)
        except BaseException:
            self.__exit__(*sys.exc_info())
            raise
        return self

    def follow(
        self,
        *,
        echo: Callable[[str], None],
        on_board: Callable[[Bench, BoardOutcome], None],
        on_done: Callable[[Bench], None],
    ) -> None:
        """``on_board`` after each board of a bench, ``on_done`` when a bench's batch ran to its
        end; returns once every bench has ended."""
        _follow(self.benches, self._messages, echo, on_board, on_done)

    def __exit__(self, exc_type: Any, exc: Any, tb: Any) -> None:
        try:
            if exc_type is not None:  # the demo's own failure: no bench goes on without it
                _stop_all(self.benches, "stopped: the demo failed", kill=False)
                for b in self.benches:
                    if b.process is not None:
                        try:
                            b.process.wait(timeout=END_S)
                        except subprocess.TimeoutExpired:
                            b.process.kill()
                return
            for reader in self._readers:
                reader.join()
        finally:
            self._signals.__exit__(None, None, None)
        self.check()

    def check(self) -> None:
        """Once every bench has ended: ``RunAborted`` after a stop, else the error of a bench
        that failed, else nothing."""
        if self.stopped:
            raise RunAborted(
                f"the demo was stopped by {self.stopped[0]}; every bench stopped its run ("
                + "; ".join(_ending(b) for b in self.benches) + ")",
                cause="signal",
            )
        failed = [b for b in self.benches if b.outcome is None]
        if failed:
            raise BenchwrightError("; ".join(f"bench {b.name}: {_ending(b)}" for b in failed))


def run_benches(
    benches: list[Bench],
    db_url: str,
    *,
    echo: Callable[[str], None],
    on_board: Callable[[Bench, BoardOutcome], None],
    on_done: Callable[[Bench], None],
    fork: bool = False,
) -> None:
    """Run every bench's batch at once into ``db_url`` (which must exist) (:class:`BenchRoom`)."""
    with BenchRoom(benches, db_url, fork=fork) as room:
        room.follow(echo=echo, on_board=on_board, on_done=on_done)


def _follow(
    benches: list[Bench],
    messages: queue.Queue[tuple[Bench, str | None]],
    echo: Callable[[str], None],
    on_board: Callable[[Bench, BoardOutcome], None],
    on_done: Callable[[Bench], None],
) -> None:
    """Show and act on the benches' messages until every bench has ended."""
    width = max(len(b.label) for b in benches)
    running = len(benches)
    quiet, stalls = 0.0, 0
    while running:
        try:
            bench, line = messages.get(timeout=POLL_S)
        except queue.Empty:
            quiet += POLL_S
            if quiet > STALL_S:  # first SIGTERM (a stop), then, still silent, the end
                _stop_all(benches, f"said nothing for {STALL_S:.0f} s", kill=stalls > 0)
                stalls += 1
                quiet = 0.0
            continue
        quiet = 0.0
        if line is None:
            running -= 1
            assert bench.process is not None
            bench.exit_code = bench.process.wait(timeout=END_S)  # its output closed: ending
            if bench.outcome is not None and not bench.outcome.stopped:
                on_done(bench)
            continue
        _handle(bench, line, f"{bench.label:<{width}} | ", echo, on_board)


def _handle(
    bench: Bench, line: str, prefix: str, echo: Callable[[str], None],
    on_board: Callable[[Bench, BoardOutcome], None],
) -> None:
    try:
        message = json.loads(line)
    except json.JSONDecodeError:
        message = None
    if not isinstance(message, dict):  # not a message: shown as the bench wrote it
        echo(prefix + line.rstrip("\n"))
        return
    if "ready" in message:
        _ready(bench)
    elif "line" in message:
        for part in str(message["line"]).splitlines() or [""]:
            echo(prefix + part)
    elif "board" in message:
        board = BoardOutcome(**message["board"])
        bench.boards.append(board)
        on_board(bench, board)
    elif "outcome" in message:
        bench.outcome = outcome_from(message["outcome"])
    elif "interrupted" in message:
        bench.ended = str(message["interrupted"])
    elif "error" in message:
        bench.ended = str(message["error"])
        echo(prefix + f"error: {bench.ended}")


def _ending(bench: Bench) -> str:
    if bench.outcome is not None:
        done = sum(1 for b in bench.outcome.boards if b.status not in ("not run",))
        state = "stopped" if bench.outcome.stopped else "done"
        return f"{bench.label}: {state} after {done} of {len(bench.outcome.boards)} boards"
    why = bench.ended or f"exited {bench.exit_code} without a word"
    return f"{bench.label}: {why}"


def _stop_all(benches: list[Bench], why: str, *, kill: bool) -> None:
    """Stop the benches still running: SIGTERM (their runs stop as on Ctrl-C) to each not yet
    told to stop -- a bench stopping already is left to ramp down, since a second signal would
    cut its ramp-down short -- or, when they ignored that for ``STALL_S``, SIGKILL (the demo's
    benches are simulated: no supply is left live by it)."""
    for b in benches:
        if b.process is not None and b.process.poll() is None:
            b.ended = b.ended or why
            if kill:
                b.process.kill()
            elif not b.signalled:
                _signal(b, signal.SIGTERM)


def _signal(bench: Bench, signum: int) -> None:
    """Pass ``signum`` on to ``bench`` if it still runs; held back until it is ready."""
    if bench.process is None or bench.process.poll() is not None:
        return
    bench.signalled += 1
    if bench.ready:
        bench.process.send_signal(signum)
    else:
        bench.held.append(signum)


def _ready(bench: Bench) -> None:
    """``bench`` set its handlers: the signals held back for it are passed on now, once each."""
    bench.ready = True
    held, bench.held = bench.held, []
    if bench.process is not None and bench.process.poll() is None:
        for signum in held:
            bench.process.send_signal(signum)
