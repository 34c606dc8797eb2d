"""measurement qualifier and reason: the decision rule's mark and why a value is missing (issue 15).

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-03

``measurements.qualifier`` is ``within uncertainty`` when the value's interval value ± U straddles a
limit (``sequencer.procedure.decision``; the verdict column stays pass/fail/info), else empty.
``measurements.reason`` says why a value could not be measured (``no pulse above 5 σ of the baseline
noise``, ``clipped: 3 % of samples at the rail``, ``pulse of the wrong polarity``): the value is
NULL (NaN) and the reason is the analysis's own words, kept with the value it explains rather than
only in the step's ``error``.  Rows recorded before this revision keep both empty: their qualifier
was kept in the step's ``results["qualifiers"]``, their reason in the step's ``error``.
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # plain ADD COLUMN (no table copy): the append-only triggers of 0002 on measurements stay
    op.add_column(
        "measurements",
        sa.Column("qualifier", sa.String(40), nullable=False, server_default=sa.text("''")),
    )
    op.add_column(
        "measurements", sa.Column("reason", sa.Text(), nullable=False, server_default=sa.text("''"))
    )


def downgrade() -> None:
    # plain DROP COLUMN (SQLite >= 3.35): a table copy would trip over the triggers of 0002
    for column in ("reason", "qualifier"):
        op.execute(f"ALTER TABLE measurements DROP COLUMN {column}")
