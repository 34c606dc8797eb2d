"""Bench processes forked from the demo, warm: the demo imports what a bench needs once, before any
thread of its own exists, and each bench starts from that copy instead of importing it again.

Why: a bench process importing the engine, the simulator, the store and the analysis (numpy, scipy)
took ~3.7 s of CPU (``python -c`` with those imports: 3.2 s user, 0.5 s system, load average 7);
four benches paid it four times on two CPUs, and each started its first board that much later.
``fork`` is only safe in a process that runs no other thread (a thread holding a lock at the fork
leaves it held forever in the child), so :func:`can_fork` checks that and the demo falls back to
starting ``python`` afresh (``benches.START``) otherwise, and on platforms without ``fork``.
"""

from __future__ import annotations

import importlib
import os
import signal
import subprocess
import sys
import threading
import time
from typing import IO

WARM_MODULES = (
    "sequencer.batchrun",
    "sequencer.compose",
    "sequencer.engine.steps",
    "sequencer.store.store",
    "drivers.sim",
    "drivers.bench",
)
"""What a bench's first run imports (the engine's steps import the analysis: numpy, scipy)."""


def can_fork() -> bool:
    """``fork`` exists and this process runs no thread but the main one."""
    return hasattr(os, "fork") and threading.active_count() == 1


def warm_up() -> None:
    """Import :data:`WARM_MODULES` here, once, for the benches to be forked from."""
    for name in WARM_MODULES:
        importlib.import_module(name)


class ForkedProcess:
    """A forked bench, with the part of ``subprocess.Popen``'s interface the demo uses."""

    def __init__(self, pid: int) -> None:
        self.pid = pid
        self.returncode: int | None = None

    def poll(self) -> int | None:
        if self.returncode is None:
            pid, status = os.waitpid(self.pid, os.WNOHANG)
            if pid:
                self.returncode = os.waitstatus_to_exitcode(status)
        return self.returncode

    def wait(self, timeout: float | None = None) -> int:
        deadline = None if timeout is None else time.monotonic() + timeout
        while self.poll() is None:
            if deadline is not None and time.monotonic() > deadline:
                raise subprocess.TimeoutExpired(f"bench {self.pid}", timeout or 0.0)
            time.sleep(0.05)
        assert self.returncode is not None
        return self.returncode

    def send_signal(self, signum: int) -> None:
        if self.poll() is None:  # never a pid that is reaped (and may be another's by now)
            os.kill(self.pid, signum)

    def kill(self) -> None:
        self.send_signal(signal.SIGKILL)


def fork_bench(args: list[str], keep_closed: list[int]) -> tuple[ForkedProcess, IO[str]]:
    """Fork a bench running ``bench_process.run_forked(args)``; the process and the stream of its
    messages.  ``keep_closed``: descriptors of the demo the child must not hold (the read ends of
    earlier benches' pipes: a child holding one would keep that bench's stream from ending)."""
    from .bench_process import run_forked

    read_fd, write_fd = os.pipe()
    for stream in (sys.stdout, sys.stderr):
        stream.flush()  # else the child would write the demo's buffered text again
    demo = os.getpid()
    pid = os.fork()
    if pid == 0:  # the child: never returns
        run_forked(args, write_fd, [read_fd, *keep_closed], demo)
    os.close(write_fd)
    return ForkedProcess(pid), os.fdopen(read_fd, "r", encoding="utf-8")
