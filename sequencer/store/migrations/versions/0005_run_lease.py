"""run lease: a unique token and a heartbeat per running run (issue 19 item 5).

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-03

``runs.lease_token`` names the process that holds a running run (a random token, unique even when
two PCs share a host name); ``runs.heartbeat_at`` is refreshed while it runs.  A running run whose
heartbeat is old has lost its recorder (a PC that died, a kill) and is marked interrupted by the
next command that looks; a recorder finding another token in its row has been taken over.  Both
columns change only while the run is not completed (the guards of 0002 keep provenance and completed
runs fixed; these columns are neither).  Runs recorded before this revision keep an empty token and
no heartbeat: their start (or last step) stands for the heartbeat.
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # plain ADD COLUMN (no table copy): the runs triggers of 0002 stay in place
    op.add_column(
        "runs", sa.Column("lease_token", sa.String(64), nullable=False, server_default=sa.text("''"))
    )
    op.add_column("runs", sa.Column("heartbeat_at", sa.DateTime(timezone=True), nullable=True))


def downgrade() -> None:
    # plain DROP COLUMN (SQLite >= 3.35): a table copy would trip over the triggers of 0002
    for column in ("heartbeat_at", "lease_token"):
        op.execute(f"ALTER TABLE runs DROP COLUMN {column}")
