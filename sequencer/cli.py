"""Command line and composition root of benchwright.

Every command reads its files and the environment once, hands plain values down, and maps the one
exception hierarchy (``drivers.errors``) to the exit codes of DESIGN.md:

0 all measured values within limits · 1 at least one value outside its limits · 2 bad input (file,
option, procedure) · 3 run aborted (instrument fault, interlock, operator, signal).
"""

from __future__ import annotations

import click

from sequencer import __version__
from sequencer.cli_lazy import LazyGroup


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="benchwright")
@click.option("--debug", is_flag=True, help="Show tracebacks for errors.")
def cli(debug: bool) -> None:
    """Qualify front-end electronics boards with versioned test procedures."""


LAZY_COMMANDS: dict[str, str] = {
    "validate": "sequencer.cli_procedures:validate",
    "plan": "sequencer.cli_procedures:plan",
    "schema": "sequencer.cli_procedures:schema",
    "run": "sequencer.cli_running:run",
    "resume": "sequencer.cli_running:resume",
    "instruments": "sequencer.cli_running:instruments",
    "sim": "sequencer.cli_running:sim",
    "certify": "sequencer.cli_results:certify",
    "verify": "sequencer.cli_results:verify",
    "trend": "sequencer.cli_results:trend",
    "report": "sequencer.cli_results:report",
    "batch": "sequencer.cli_batch:batch",
    "demo": "sequencer.cli_batch:demo",
    "export": "sequencer.cli_export:export",
    "serve": "sequencer.cli_serve:serve",
    "runs": "sequencer.cli_lists:runs",
    "batches": "sequencer.cli_lists:batches",
    "safe": "sequencer.cli_safe:safe",
    "upgrade": "sequencer.cli_upgrade:upgrade",
}


def attach_commands() -> None:
    """Attach the commands, which live in their own modules, lazily: a module is imported when its
    command is looked up, so ``runs`` does not pay for ``batch``'s imports nor for defining
    ``run``'s options.  Done on import too (registering names costs nothing); kept for callers."""
    group: LazyGroup = cli  # type: ignore[assignment]  # click.group(cls=LazyGroup) made it one
    group.attach_lazily(LAZY_COMMANDS)


def main() -> None:
    """Entry point of the ``benchwright`` command."""
    attach_commands()
    cli()


attach_commands()
