"""step_labels: the labels of each completed step (channel, output, sweep values) as typed columns.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-03

One row per label: ``number`` holds ints, floats and booleans (``type`` says which), ``text`` the
rest, so that a query can select steps by a sweep value (``amp = 40``) without parsing step paths.
Append-only like the other result tables.  Steps recorded before this revision have no rows.
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None

BIG_ID = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def upgrade() -> None:
    op.create_table(
        "step_labels",
        sa.Column("id", BIG_ID, primary_key=True),
        sa.Column("run_id", BIG_ID, sa.ForeignKey("runs.id"), nullable=False),
        sa.Column("step_id", BIG_ID, sa.ForeignKey("steps.id"), nullable=False),
        sa.Column("name", sa.String(100), nullable=False),
        sa.Column("type", sa.String(8), nullable=False),
        sa.Column("number", sa.Float(), nullable=True),
        sa.Column("text", sa.Text(), nullable=True),
    )
    op.create_index("ix_step_labels_step", "step_labels", ["step_id"])
    op.create_index("ix_step_labels_run_name", "step_labels", ["run_id", "name", "number"])
    if op.get_bind().dialect.name == "sqlite":
        for op_ in ("UPDATE", "DELETE"):
            op.execute(
                f"CREATE TRIGGER bw_step_labels_no_{op_.lower()} BEFORE {op_} ON step_labels "
                "BEGIN SELECT RAISE(ABORT, 'benchwright: step_labels is append-only'); END"
            )
    else:
        op.execute(
            "CREATE TRIGGER bw_step_labels_append_only BEFORE UPDATE OR DELETE ON step_labels "
            "FOR EACH ROW EXECUTE FUNCTION bw_refuse_change()"
        )


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for name in ("bw_step_labels_no_update", "bw_step_labels_no_delete"):
            op.execute(f"DROP TRIGGER {name}")
    else:
        op.execute("DROP TRIGGER bw_step_labels_append_only ON step_labels")
    op.drop_index("ix_step_labels_run_name", "step_labels")
    op.drop_index("ix_step_labels_step", "step_labels")
    op.drop_table("step_labels")
