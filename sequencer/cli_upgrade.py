"""``benchwright upgrade``: carry an existing results database forward to this version's schema
(attached to the command group by ``cli.py``).

Read-only commands refuse a database with an older schema instead of changing it behind the
operator's back; this is the one explicit step that writes the schema change (alembic revisions
shipped in the package, one transaction).  Commands that record runs upgrade on their own.
"""

from __future__ import annotations

import click

from sequencer.cli_common import db_option, env, handles_errors


@click.command()
@db_option
@handles_errors
def upgrade(db: str | None) -> None:
    """Upgrade the schema of an existing results database (back it up first)."""
    from sequencer.store import default_url
    from sequencer.store.migrate import upgrade_database

    url = db or default_url(env())
    before, now = upgrade_database(url)
    if before == (now,):
        click.echo(f"schema already at revision {now}: nothing to do")
        return
    click.echo(f"schema upgraded from revision {', '.join(before)} to {now}")
