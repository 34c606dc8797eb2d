"""Initial schema: documents, runs, instruments, steps, traces, measurements, safety_events.

Revision ID: 0001
Revises:
Create Date: 2025-01-01
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None

BIG_ID = sa.BigInteger().with_variant(sa.Integer(), "sqlite")
WHEN = sa.DateTime(timezone=True)


def _id() -> sa.Column:
    return sa.Column("id", BIG_ID, primary_key=True)


def _run_fk() -> sa.Column:
    return sa.Column("run_id", BIG_ID, sa.ForeignKey("runs.id"), nullable=False)


def upgrade() -> None:
    op.create_table(
        "documents",
        sa.Column("sha256", sa.String(64), primary_key=True),
        sa.Column("text", sa.Text(), nullable=False),
    )
    op.create_table(
        "runs",
        _id(),
        sa.Column("procedure", sa.String(200), nullable=False),
        sa.Column("procedure_version", sa.String(100), nullable=False),
        sa.Column("procedure_sha256", sa.String(64), nullable=False),
        sa.Column("procedure_path", sa.Text(), nullable=False),
        sa.Column(
            "procedure_doc", sa.String(64), sa.ForeignKey("documents.sha256"), nullable=False
        ),
        sa.Column("bench", sa.String(200), nullable=False),
        sa.Column("bench_doc", sa.String(64), sa.ForeignKey("documents.sha256"), nullable=True),
        sa.Column("board", sa.String(200), nullable=False),
        sa.Column("board_type", sa.String(200), nullable=False),
        sa.Column("batch", sa.String(200), nullable=False),
        sa.Column("operator", sa.String(200), nullable=False),
        sa.Column("software_version", sa.String(100), nullable=False),
        sa.Column("parameters", sa.JSON(), nullable=False),
        sa.Column("repeat_of", BIG_ID, sa.ForeignKey("runs.id"), nullable=True),
        sa.Column("status", sa.String(16), nullable=False),
        sa.Column("reason", sa.Text(), nullable=False),
        sa.Column("started_at", WHEN, nullable=False),
        sa.Column("ended_at", WHEN, nullable=True),
        sa.Column("host", sa.String(255), nullable=False),
        sa.Column("pid", sa.Integer(), nullable=False),
        sa.CheckConstraint(
            "status IN ('running', 'completed', 'aborted', 'interrupted')", name="ck_runs_status"
        ),
    )
    op.create_index("ix_runs_board_started", "runs", ["board", "started_at"])
    op.create_index("ix_runs_procedure_started", "runs", ["procedure", "started_at"])
    op.create_index("ix_runs_batch", "runs", ["batch"])
    op.create_index("ix_runs_status", "runs", ["status"])
    op.create_index("ix_runs_started", "runs", ["started_at"])
    op.create_table(
        "instruments",
        _id(),
        _run_fk(),
        sa.Column("role", sa.String(50), nullable=False),
        sa.Column("address", sa.Text(), nullable=False),
        sa.Column("maker", sa.String(200), nullable=False),
        sa.Column("model", sa.String(200), nullable=False),
        sa.Column("serial", sa.String(200), nullable=False),
        sa.Column("firmware", sa.String(200), nullable=False),
        sa.Column("calibration_due", sa.String(32), nullable=False),
    )
    op.create_index("ix_instruments_run", "instruments", ["run_id"])
    op.create_table(
        "steps",
        _id(),
        _run_fk(),
        sa.Column("path", sa.String(500), nullable=False),
        sa.Column("kind", sa.String(50), nullable=False),
        sa.Column("position", sa.Integer(), nullable=True),
        sa.Column("status", sa.String(16), nullable=False),
        sa.Column("started_at", WHEN, nullable=False),
        sa.Column("finished_at", WHEN, nullable=False),
        sa.Column("settings", sa.JSON(), nullable=False),
        sa.Column("results", sa.JSON(), nullable=False),
        sa.Column("error", sa.Text(), nullable=False),
        sa.CheckConstraint("status IN ('completed', 'failed', 'skipped')", name="ck_steps_status"),
    )
    op.create_index(
        "ux_steps_run_path_completed",
        "steps",
        ["run_id", "path"],
        unique=True,
        sqlite_where=sa.text("status = 'completed'"),
        postgresql_where=sa.text("status = 'completed'"),
    )
    op.create_index("ix_steps_run", "steps", ["run_id"])
    op.create_table(
        "traces",
        _id(),
        _run_fk(),
        sa.Column("step_id", BIG_ID, sa.ForeignKey("steps.id"), nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("encoding", sa.String(20), nullable=False),
        sa.Column("dtype", sa.String(20), nullable=False),
        sa.Column("n_samples", sa.Integer(), nullable=False),
        sa.Column("dt_s", sa.Float(), nullable=False),
        sa.Column("t0_s", sa.Float(), nullable=False),
        sa.Column("source", sa.String(100), nullable=False),
        sa.Column("averages", sa.Integer(), nullable=False),
        sa.Column("labels", sa.JSON(), nullable=False),
        sa.Column("data", sa.LargeBinary(), nullable=False),
    )
    op.create_index("ix_traces_run", "traces", ["run_id"])
    op.create_index("ix_traces_step", "traces", ["step_id"])
    op.create_table(
        "measurements",
        _id(),
        _run_fk(),
        sa.Column("step_id", BIG_ID, sa.ForeignKey("steps.id"), nullable=False),
        sa.Column("quantity", sa.String(100), nullable=False),
        sa.Column("value", sa.Float(), nullable=True),
        sa.Column("uncertainty", sa.Float(), nullable=True),
        sa.Column("unit", sa.String(20), nullable=False),
        sa.Column("channel", sa.Integer(), nullable=True),
        sa.Column("output", sa.String(50), nullable=True),
        sa.Column("aggressor", sa.Integer(), nullable=True),
        sa.Column("low", sa.Float(), nullable=True),
        sa.Column("high", sa.Float(), nullable=True),
        sa.Column("verdict", sa.String(8), nullable=False),
        sa.CheckConstraint("verdict IN ('pass', 'fail', 'info')", name="ck_measurements_verdict"),
    )
    op.create_index(
        "ix_measurements_run_quantity", "measurements", ["run_id", "quantity", "channel", "output"]
    )
    op.create_index("ix_measurements_step", "measurements", ["step_id"])
    op.create_table(
        "safety_events",
        _id(),
        _run_fk(),
        sa.Column("path", sa.String(500), nullable=False),
        sa.Column("kind", sa.String(50), nullable=False),
        sa.Column("at", WHEN, nullable=False),
        sa.Column("detail", sa.JSON(), nullable=False),
    )
    op.create_index("ix_safety_events_run", "safety_events", ["run_id"])


def downgrade() -> None:
    for table in (
        "safety_events",
        "measurements",
        "traces",
        "steps",
        "instruments",
        "runs",
        "documents",
    ):
        op.drop_table(table)
