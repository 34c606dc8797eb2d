"""Commands that read the store only (certificates, verification, trends, batch report) and the
batch and demo commands that drive whole qualifications."""

from __future__ import annotations

import click

COMMANDS: list[click.Command] = []
