"""The operator at the terminal: the safety caution's acknowledgement and operator prompts.

Shared by ``run``, ``resume`` and ``batch``; each returns None when there is no terminal, which the
engine treats as "nobody to ask".
"""

from __future__ import annotations

import contextlib
import select
import signal
import sys
import threading
from collections.abc import Callable, Iterator
from typing import Any

import click

from sequencer.errors import RunAborted


def acknowledge_on_terminal() -> Callable[[Any], bool] | None:
    """A terminal prompt for the safety caution, or None when there is no terminal."""
    if not (sys.stdin.isatty() and sys.stderr.isatty()):
        return None

    def ask(caution: Any) -> bool:
        click.echo(caution.text(), err=True)
        with _signals_cancel_the_prompt():
            try:
                return _confirm("Acknowledge and make the voltage live?")
            except KeyboardInterrupt:  # Ctrl-C or SIGTERM at the prompt: declined
                click.echo("", err=True)
                return False

    return ask


def _confirm(question: str, *, slice_s: float = 0.2) -> bool:
    """``question [y/N]`` on the terminal; anything but y/yes declines, end of input too.

    The answer is awaited in slices, never in one blocking read: a signal the kernel hands to
    another thread would not interrupt that read, and its Python handler would wait for the answer.
    """
    click.echo(f"{question} [y/N]: ", nl=False, err=True)
    while True:
        answer = _read_line(slice_s=slice_s)
        if answer.strip().lower() in ("y", "yes"):
            return True
        if not answer or answer.strip().lower() in ("", "n", "no"):
            return False
        click.echo("Please answer y or n [y/N]: ", nl=False, err=True)


@contextlib.contextmanager
def _signals_cancel_the_prompt() -> Iterator[None]:
    """While a prompt waits for an answer, SIGINT and SIGTERM cancel it (the run's own handlers
    only set a stop flag, which the prompt would never look at)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def cancel(signum: int, _frame: Any) -> None:
        raise KeyboardInterrupt(signal.Signals(signum).name)

    previous = {sig: signal.signal(sig, cancel) for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def prompt_on_terminal() -> Callable[[str, bool], str] | None:
    """A terminal prompt for operator-prompt steps, or None when there is no terminal.

    The prompt waits like the caution does: in slices, with Ctrl-C and SIGTERM cancelling it.  A
    cancelled prompt (or the end of input) stops the run as an abort -- cleanup and the bias safe
    state follow -- instead of waiting for an answer nobody will type.
    """
    if not sys.stdin.isatty():
        return None

    def ask(message: str, wants_value: bool) -> str:
        with _signals_cancel_the_prompt():
            try:
                if wants_value:
                    return _enter(message)
                click.echo(f"{message} — press Enter to continue ", nl=False, err=True)
                if not _read_line():
                    raise _end_of_input()
                return ""
            except KeyboardInterrupt as exc:
                click.echo("", err=True)
                name = exc.args[0] if exc.args else "SIGINT"
                raise RunAborted(f"stopped by {name} at an operator prompt", cause="signal") from None

    return ask


def _enter(message: str) -> str:
    """A typed value (asked again while empty); the end of input stops the run."""
    while True:
        click.echo(f"{message}: ", nl=False, err=True)
        line = _read_line()
        if not line:
            raise _end_of_input()
        if line.strip():
            return line.strip()


def _read_line(*, slice_s: float = 0.2) -> str:
    """One line of the terminal ('' at the end of input), awaited in slices (see :func:`_confirm`)."""
    while not select.select([sys.stdin], [], [], slice_s)[0]:
        pass
    return sys.stdin.readline()


def _end_of_input() -> RunAborted:
    return RunAborted("the terminal closed while an operator prompt waited", cause="operator")
