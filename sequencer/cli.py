"""Command line and composition root of benchwright."""

from __future__ import annotations

import click

from sequencer import __version__


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="benchwright")
def cli() -> None:
    """Qualify front-end electronics boards with versioned test procedures."""


def main() -> None:
    """Entry point of the ``benchwright`` command."""
    cli()
