"""instrument calibration date: when each instrument of a run was last calibrated (issue 16).

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-03

``instruments.calibrated`` is the bench file's ``calibrated`` date (ISO, as ``calibration_due``)
for the run's instruments, printed on its certificates beside the due date.  Rows recorded before
this revision keep it empty: the bench file had no such key then.
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0007"
down_revision = "0006"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # plain ADD COLUMN (no table copy), like 0006
    op.add_column(
        "instruments",
        sa.Column("calibrated", sa.String(32), nullable=False, server_default=sa.text("''")),
    )


def downgrade() -> None:
    # plain DROP COLUMN (SQLite >= 3.35), like 0006
    op.execute("ALTER TABLE instruments DROP COLUMN calibrated")
