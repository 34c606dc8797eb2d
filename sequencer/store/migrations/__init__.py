"""Alembic migrations of the results database (run programmatically by ``sequencer.store.migrate``)."""
