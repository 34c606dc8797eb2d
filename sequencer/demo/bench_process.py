"""One bench of the demo in its own process: qualify one batch file of the scenario into the shared
database, telling the demo (the parent process) what happens, one JSON message a line on stdout.

Why a process per bench rather than a thread: each bench then keeps the engine's own signal
handling (``sequencer.engine.signals``: a stop request, the bias ramped down, the run aborted,
in the main thread of the process that drives the supply) and its own interpreter for the
analysis, so the three batches use both cores.  The benches share one SQLite database as benches
of one lab do: WAL, ``BEGIN IMMEDIATE`` and the busy timeout queue their writers
(``sequencer.store.connect``), each run under its own lease.

Signals: the demo starts this process in a session of its own, so that a Ctrl-C in the terminal
reaches the demo only, which passes each signal on exactly once (a second Ctrl-C still cuts a
ramp-down short, as in a single run).  Within a run the runner's handler turns the signal into a
stop request; between runs, when nothing is live, it ends the batch (``KeyboardInterrupt``).
Should the demo itself die (SIGKILL), a watcher here sees the parent gone and sends this process
SIGTERM: the run in progress stops and ramps down.

Messages (``MESSAGE_KINDS``): ``{"ready": pid}`` once its signal handlers are set (the demo holds
back a stop until then: a signal during the interpreter's start-up would end it with a traceback),
``{"line": text}`` to show, ``{"board": outcome}`` after each board,
then one of ``{"outcome": batch outcome}``, ``{"interrupted": reason}``, ``{"error": text,
"exit": code}``.  Run as ``python -m sequencer.demo.bench_process BATCH_FILE DB_URL BENCH_NAME
[SERIAL,...]``.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import os
import signal
import sys
import threading
from typing import Any, TextIO

from sequencer.errors import BenchwrightError, OptionError, RunAborted

MESSAGE_KINDS = ("ready", "line", "board", "outcome", "interrupted", "error")
PARENT_ENV = "BENCHWRIGHT_DEMO_PID"
"""The demo's pid, given to each bench process (had the demo died while the bench was starting,
its parent would already be another)."""
PARENT_POLL_S = 0.5
"""How often the watcher looks for the demo process (a stop then reaches the ramp within this)."""


class Channel:
    """The message stream to the demo: one JSON object a line, flushed at once.  A write to a
    demo that has gone is dropped (the watcher stops the bench); nothing here may raise into a
    run."""

    def __init__(self, out: TextIO) -> None:
        self._out = out
        self._lock = threading.Lock()  # the heartbeat thread may warn while the batch echoes

    def send(self, kind: str, value: Any, **extra: Any) -> None:
        if kind not in MESSAGE_KINDS:
            raise ValueError(f"unknown message kind {kind!r}")
        text = json.dumps({kind: value, **extra}, default=str)
        with self._lock:
            try:
                self._out.write(text + "\n")
                self._out.flush()
            except (OSError, ValueError):  # the pipe closed: the demo is gone
                pass


def watch_parent(parent: int, poll_s: float = PARENT_POLL_S) -> threading.Thread:
    """A daemon thread that sends this process SIGTERM once its parent ``parent`` is gone."""

    def watch() -> None:
        stop = threading.Event()
        while not stop.wait(poll_s):
            if os.getppid() != parent:
                os.kill(os.getpid(), signal.SIGTERM)
                return

    thread = threading.Thread(target=watch, name="demo-parent-watch", daemon=True)
    thread.start()
    return thread


def _interrupt(signum: int, _frame: Any) -> None:
    raise KeyboardInterrupt(f"stopped by {signal.Signals(signum).name}")


def qualify(
    batch_file: str, db_url: str, bench_name: str, serials: str, channel: Channel
) -> int:
    """Qualify ``batch_file`` (in the scenario's folder, or an absolute path) on simulated boards
    (the files beside it) on a bench named ``bench_name``, into ``db_url``; the exit status of
    this process (0 the batch ran to its end or was stopped, else that of its error).
    ``serials`` (comma-separated): only these boards of the batch, in its order -- two benches
    may share a batch, as two identical benches of a lab share the boards of one delivery."""
    def echo(text: str) -> None:
        channel.send("line", text)

    def on_board(outcome: Any) -> None:
        channel.send("board", dataclasses.asdict(outcome))

    try:
        from sequencer.batchrun import BatchOptions, qualify_batch
        from sequencer.demo.scenario import demo_dir
        from sequencer.procedure import load_batch
        from sequencer.store import Store

        path = demo_dir() / batch_file  # an absolute path stays itself
        batch = load_batch(path)
        chosen = [s for s in serials.split(",") if s]
        if chosen:
            unknown = sorted(set(chosen) - {b.serial for b in batch.boards})
            if unknown:
                raise OptionError(f"no board {', '.join(unknown)} in batch {batch.name}")
            batch = dataclasses.replace(
                batch, boards=tuple(b for b in batch.boards if b.serial in chosen)
            )
        options = BatchOptions(
            sim_dir=str(path.parent), unattended=True, requalify=True, echo=echo,
            on_board=on_board, sim_bench_name=bench_name,
        )
        with Store.open(db_url, wait_for_disk=False, create=False, upgrade=True) as store:
            outcome = qualify_batch(batch, store, options)
    except KeyboardInterrupt as exc:  # between runs: nothing live
        channel.send("interrupted", str(exc) or "stopped by a signal")
        return 0
    except RunAborted as exc:
        channel.send("error", str(exc), exit=3)
        return 3
    except BenchwrightError as exc:
        channel.send("error", f"{type(exc).__name__}: {exc}", exit=2)
        return 2
    channel.send("outcome", dataclasses.asdict(outcome))
    return 0


def serve(args: list[str], channel: Channel, demo_pid: int) -> int:
    """Watch the demo, say ready, qualify (``args``: BATCH_FILE DB_URL BENCH_NAME [SERIALS])."""
    try:
        watch_parent(demo_pid)
        channel.send("ready", os.getpid())  # from here on a signal stops the bench as it should
        batch_file, db_url, bench_name, *serials = args
        return qualify(batch_file, db_url, bench_name, ",".join(serials), channel)
    except KeyboardInterrupt as exc:  # before qualify took the signals over: nothing live yet
        channel.send("interrupted", str(exc) or "stopped by a signal")
        return 0


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    if len(args) not in (3, 4):
        print("usage: python -m sequencer.demo.bench_process BATCH_FILE DB_URL BENCH_NAME "
              "[SERIAL,...]", file=sys.stderr)
        return 2
    for s in (signal.SIGINT, signal.SIGTERM):
        signal.signal(s, _interrupt)
    return serve(args, Channel(sys.stdout), int(os.environ.get(PARENT_ENV, "0")) or os.getppid())


def run_forked(args: list[str], out_fd: int, close_fds: list[int], demo_pid: int) -> None:
    """The bench in a child forked from the demo (``forked.fork_bench``): never returns.  Its own
    handlers first (the demo's were copied with the fork), a session of its own, only its own end
    of the pipes kept, then ``serve``; ``os._exit`` at the end, so nothing of the demo's stack
    (click, atexit) runs twice."""
    code = 70  # EX_SOFTWARE: a bug, told on stderr
    try:
        for s in (signal.SIGINT, signal.SIGTERM):
            signal.signal(s, _interrupt)
        os.setsid()
        for fd in close_fds:
            os.close(fd)
        with os.fdopen(out_fd, "w", encoding="utf-8") as stream:
            code = serve(args, Channel(stream), demo_pid)
    except KeyboardInterrupt:  # before it said ready: nothing live
        code = 0
    except BaseException:
        import traceback

        traceback.print_exc()
    finally:
        for out in (sys.stdout, sys.stderr):
            with contextlib.suppress(Exception):
                out.flush()
        os._exit(code)


if __name__ == "__main__":
    sys.exit(main())
