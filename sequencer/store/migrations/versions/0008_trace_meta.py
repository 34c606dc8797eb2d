"""trace meta: what a capture knew besides its samples, above all its input's rails (issue 16).

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-03

``traces.meta`` is the trace's ``meta`` as captured (JSON of text values), chiefly ``rails_mV``:
the digitizer input's range limits when it was captured, which the analyses need to refuse a clipped
capture.  Without it a trace replayed on ``resume`` could not be checked for clipping.  Rows stored
before this revision keep it NULL (the rails were never stored, so they are not invented here): read
back, such a trace says so (``drivers.trace.META_NOT_STORED``) and an analysis that needs the rails
refuses it with that reason.
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0008"
down_revision = "0007"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # plain ADD COLUMN (no table copy), like 0006/0007; NULL for the rows already there
    op.add_column("traces", sa.Column("meta", sa.JSON(), nullable=True))


def downgrade() -> None:
    # plain DROP COLUMN (SQLite >= 3.35), like 0006/0007
    op.execute("ALTER TABLE traces DROP COLUMN meta")
