"""A command group whose commands living in other modules are imported only when one is invoked.

Why: importing every command module at start-up costs a few hundred milliseconds (the batch command
pulls in the procedure loader, ``serve`` the web settings), which a command that only reads the store
should not pay. ``--help`` still lists every command: listing imports them all, which is fine there.
click has no lazy group of its own; this follows the pattern its documentation describes
("Lazily Loading Subcommands") in a few lines rather than adding a dependency.
"""

from __future__ import annotations

import importlib
from collections.abc import Mapping
from typing import Any

import click


class LazyGroup(click.Group):
    """A ``click.Group`` that also knows commands by ``name -> "module:attribute"``."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.lazy_commands: dict[str, str] = {}

    def attach_lazily(self, commands: Mapping[str, str]) -> None:
        """Register commands by name without importing their modules."""
        self.lazy_commands.update(commands)

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted({*super().list_commands(ctx), *self.lazy_commands})

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        found = super().get_command(ctx, cmd_name)
        if found is not None or cmd_name not in self.lazy_commands:
            return found
        module_name, attribute = self.lazy_commands[cmd_name].split(":")
        command = getattr(importlib.import_module(module_name), attribute)
        if not isinstance(command, click.Command):
            raise TypeError(f"{self.lazy_commands[cmd_name]} is not a click command")
        self.add_command(command, cmd_name)
        return command
