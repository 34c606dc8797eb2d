"""Annotations (notes and audit trail), runs.process_tag, and append-only guards (triggers).

Revision ID: 0002
Revises: 0001
Create Date: 2025-01-02

The guards make the database itself refuse what the store never does: UPDATE or DELETE of any stored
result, any change of a completed run, a change of a run's provenance, and a new step or safety event
on a completed run.  Only a run's status columns change, and only while it is not completed.
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None

BIG_ID = sa.BigInteger().with_variant(sa.Integer(), "sqlite")
APPEND_ONLY = (
    "documents",
    "instruments",
    "steps",
    "traces",
    "measurements",
    "safety_events",
    "annotations",
)
NO_INSERT_AFTER_COMPLETION = ("steps", "safety_events")
# the columns of a run that may change while it is not completed; all others are provenance
RUN_STATE = ("status", "reason", "ended_at", "host", "pid", "process_tag")
RUN_PROVENANCE = (
    "id",
    "procedure",
    "procedure_version",
    "procedure_sha256",
    "procedure_path",
    "procedure_doc",
    "bench",
    "bench_doc",
    "board",
    "board_type",
    "batch",
    "operator",
    "software_version",
    "parameters",
    "repeat_of",
    "started_at",
)


def _sqlite_guards() -> list[str]:
    raise_ = "SELECT RAISE(ABORT, 'benchwright: {what}')"
    sql = []
    for t in APPEND_ONLY:
        for op_ in ("UPDATE", "DELETE"):
            sql.append(
                f"CREATE TRIGGER bw_{t}_no_{op_.lower()} BEFORE {op_} ON {t} "
                f"BEGIN {raise_.format(what=t + ' is append-only')}; END"
            )
    changed = " OR ".join(f"NEW.{c} IS NOT OLD.{c}" for c in RUN_PROVENANCE)
    sql.append(
        "CREATE TRIGGER bw_runs_no_update BEFORE UPDATE ON runs "
        f"WHEN OLD.status = 'completed' OR {changed} "
        f"BEGIN {raise_.format(what='a completed run or its provenance cannot change')}; END"
    )
    sql.append(
        "CREATE TRIGGER bw_runs_no_delete BEFORE DELETE ON runs "
        f"BEGIN {raise_.format(what='runs are append-only')}; END"
    )
    for t in NO_INSERT_AFTER_COMPLETION:
        sql.append(
            f"CREATE TRIGGER bw_{t}_open_run BEFORE INSERT ON {t} "
            "WHEN (SELECT status FROM runs WHERE id = NEW.run_id) = 'completed' "
            f"BEGIN {raise_.format(what='the run is completed')}; END"
        )
    return sql


def _postgres_guards() -> list[str]:
    # json has no equality operator: compare its text
    cols = [f"{{}}.{c}::text" if c == "parameters" else f"{{}}.{c}" for c in RUN_PROVENANCE]
    new = ", ".join(c.format("NEW") for c in cols)
    old = ", ".join(c.format("OLD") for c in cols)
    sql = [
        """CREATE FUNCTION bw_refuse_change() RETURNS trigger LANGUAGE plpgsql AS $$
        BEGIN RAISE EXCEPTION 'benchwright: % is append-only', TG_TABLE_NAME; END $$""",
        f"""CREATE FUNCTION bw_guard_run() RETURNS trigger LANGUAGE plpgsql AS $$
        BEGIN
          IF TG_OP = 'DELETE' THEN RAISE EXCEPTION 'benchwright: runs are append-only'; END IF;
          IF OLD.status = 'completed' OR ROW({new}) IS DISTINCT FROM ROW({old}) THEN
            RAISE EXCEPTION 'benchwright: a completed run or its provenance cannot change';
          END IF;
          RETURN NEW;
        END $$""",
        """CREATE FUNCTION bw_guard_open_run() RETURNS trigger LANGUAGE plpgsql AS $$
        BEGIN
          IF (SELECT status FROM runs WHERE id = NEW.run_id) = 'completed' THEN
            RAISE EXCEPTION 'benchwright: the run is completed';
          END IF;
          RETURN NEW;
        END $$""",
        "CREATE TRIGGER bw_runs_guard BEFORE UPDATE OR DELETE ON runs "
        "FOR EACH ROW EXECUTE FUNCTION bw_guard_run()",
    ]
    for t in APPEND_ONLY:
        sql.append(
            f"CREATE TRIGGER bw_{t}_append_only BEFORE UPDATE OR DELETE ON {t} "
            "FOR EACH ROW EXECUTE FUNCTION bw_refuse_change()"
        )
    for t in NO_INSERT_AFTER_COMPLETION:
        sql.append(
            f"CREATE TRIGGER bw_{t}_open_run BEFORE INSERT ON {t} "
            "FOR EACH ROW EXECUTE FUNCTION bw_guard_open_run()"
        )
    return sql


def upgrade() -> None:
    op.create_table(
        "annotations",
        sa.Column("id", BIG_ID, primary_key=True),
        sa.Column("run_id", BIG_ID, sa.ForeignKey("runs.id"), nullable=False),
        sa.Column("at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("kind", sa.String(20), nullable=False),
        sa.Column("author", sa.String(200), nullable=False),
        sa.Column("text", sa.Text(), nullable=False),
        sa.Column("detail", sa.JSON(), nullable=False),
    )
    op.create_index("ix_annotations_run", "annotations", ["run_id"])
    with op.batch_alter_table("runs") as batch:
        batch.add_column(
            sa.Column("process_tag", sa.String(100), nullable=False, server_default=sa.text("''"))
        )
    dialect = op.get_bind().dialect.name
    for statement in _sqlite_guards() if dialect == "sqlite" else _postgres_guards():
        op.execute(statement)


def downgrade() -> None:
    dialect = op.get_bind().dialect.name
    if dialect == "sqlite":
        names = [f"bw_{t}_no_{o}" for t in APPEND_ONLY for o in ("update", "delete")]
        names += ["bw_runs_no_update", "bw_runs_no_delete"]
        names += [f"bw_{t}_open_run" for t in NO_INSERT_AFTER_COMPLETION]
        for name in names:
            op.execute(f"DROP TRIGGER {name}")
    else:
        for t in APPEND_ONLY:
            op.execute(f"DROP TRIGGER bw_{t}_append_only ON {t}")
        for t in NO_INSERT_AFTER_COMPLETION:
            op.execute(f"DROP TRIGGER bw_{t}_open_run ON {t}")
        op.execute("DROP TRIGGER bw_runs_guard ON runs")
        for fn in ("bw_refuse_change", "bw_guard_run", "bw_guard_open_run"):
            op.execute(f"DROP FUNCTION {fn}()")
    with op.batch_alter_table("runs") as batch:
        batch.drop_column("process_tag")
    op.drop_table("annotations")
