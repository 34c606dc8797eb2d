"""Alembic environment: always online, on the connection ``sequencer.store.migrate`` hands over.

The caller holds the transaction (and, on SQLite, the write lock), so several benches opening one
new database at once migrate it exactly once.  SQLite table changes use batch mode.
"""

from __future__ import annotations

from alembic import context

from sequencer.store.models import Base

connection = context.config.attributes.get("connection")
if connection is None:
    raise RuntimeError(
        "benchwright migrations run through sequencer.store.migrate, not the alembic CLI"
    )
context.configure(
    connection=connection,
    target_metadata=Base.metadata,
    render_as_batch=connection.dialect.name == "sqlite",
)
with context.begin_transaction():
    context.run_migrations()
