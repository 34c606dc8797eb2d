"""Progress of the long commands that are not runs (certificates, the demo's certificates): a rich
bar with the time left on a terminal, else a plain line at every tenth of the way."""

from __future__ import annotations

import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import IO, Any

from sequencer.pace import describe_left, time_left


@contextmanager
def counting(label: str, *, stream: IO[str] | None = None, force_terminal: bool | None = None,
             ) -> Iterator[Callable[[int, int], None]]:  # fmt: skip
    """A ``(done, total)`` callback showing ``label`` with a bar (terminal) or plain lines."""
    from rich.console import Console
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeRemainingColumn,
    )

    out = stream if stream is not None else sys.stderr
    console = Console(file=out, force_terminal=force_terminal)
    start = time.monotonic()
    if console.is_terminal:
        bar = Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(),
                       console=console, transient=False)  # fmt: skip
        task: Any = None

        def update(done: int, total: int) -> None:
            nonlocal task
            if task is None:
                task = bar.add_task(label, total=total)
            bar.update(task, completed=done, total=total)

        with bar:
            yield update
        return
    shown = {"step": -1}

    def line(done: int, total: int) -> None:
        step = (10 * done) // max(total, 1)
        if step == shown["step"] and done < total:
            return
        shown["step"] = step
        left = describe_left(time_left(done, total, time.monotonic() - start)) if done < total else ""
        tail = f", {left} at the pace so far" if left else ""
        print(f"{label}: {done}/{total}{tail}", file=out, flush=True)

    yield line
