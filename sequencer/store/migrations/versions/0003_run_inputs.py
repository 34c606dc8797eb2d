"""run_inputs: every text a run used (procedure, fragments, limit set, board type, bench, dialects).

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-03

Each row names one input of a run (``kind``, ``name``) and the document holding its text, keyed by
the SHA-256 of the text (``documents``, stored once however many runs use it).  Append-only like the
other result tables (the guards of 0002 extended to it).  Runs recorded before this revision keep
what they had: the procedure file and the bench file in ``runs``; they get no rows here.
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None

BIG_ID = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def upgrade() -> None:
    op.create_table(
        "run_inputs",
        sa.Column("id", BIG_ID, primary_key=True),
        sa.Column("run_id", BIG_ID, sa.ForeignKey("runs.id"), nullable=False),
        sa.Column("kind", sa.String(20), nullable=False),
        sa.Column("name", sa.Text(), nullable=False),
        sa.Column("document", sa.String(64), sa.ForeignKey("documents.sha256"), nullable=False),
        sa.UniqueConstraint("run_id", "kind", "name", name="uq_run_inputs_run_kind_name"),
    )
    if op.get_bind().dialect.name == "sqlite":
        for op_ in ("UPDATE", "DELETE"):
            op.execute(
                f"CREATE TRIGGER bw_run_inputs_no_{op_.lower()} BEFORE {op_} ON run_inputs "
                "BEGIN SELECT RAISE(ABORT, 'benchwright: run_inputs is append-only'); END"
            )
    else:
        op.execute(
            "CREATE TRIGGER bw_run_inputs_append_only BEFORE UPDATE OR DELETE ON run_inputs "
            "FOR EACH ROW EXECUTE FUNCTION bw_refuse_change()"
        )


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for name in ("bw_run_inputs_no_update", "bw_run_inputs_no_delete"):
            op.execute(f"DROP TRIGGER {name}")
    else:
        op.execute("DROP TRIGGER bw_run_inputs_append_only ON run_inputs")
    op.drop_table("run_inputs")
