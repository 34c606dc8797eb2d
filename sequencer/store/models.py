"""The tables of the results database, as typed SQLAlchemy 2.x ORM classes (schema at migration head).

The migrations in ``sequencer/store/migrations/versions`` create exactly these tables; a test compares
the two.  Layout::

    documents     procedure / bench YAML texts, stored once, keyed by the SHA-256 of their UTF-8 text
    runs          one row per run: provenance and its current status (the only row that changes, and
                  only while the run is not completed; every change also writes an annotation)
    instruments   the bench's instruments of a run (identity, serial, calibration due date and, from
                  revision 0007, the date of the last calibration)
    steps         one row per finished step (completed, failed or skipped), with settings and results
    traces        captured waveforms of a completed step (npy + zlib, dtype as captured) and, from
                  revision 0008, their meta (the input's rails, to check for clipping)
    measurements  judged values of a completed step (DESIGN.md quantity names)
    safety_events bias / HV events, written the moment they happen
    annotations   notes and the audit trail (status changes, resumes); added in revision 0002
    run_inputs    every text a run used (procedure, fragments, limits, board type, bench, dialects),
                  each a document; added in revision 0003
    step_labels   the labels of each completed step (channel, output, sweep values), typed; 0004

Revision 0006 gives each measurement its decision-rule qualifier and, for a value it could not
measure, the reason.

Everything but ``runs`` is append-only; revision 0002 adds triggers that refuse UPDATE and DELETE.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any, ClassVar

from sqlalchemy import (
    JSON,
    BigInteger,
    CheckConstraint,
    DateTime,
    Dialect,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
    text,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column
from sqlalchemy.types import TypeDecorator

# SQLite only aliases the rowid for a column declared exactly INTEGER; PostgreSQL gets BIGINT.
BigId = BigInteger().with_variant(Integer(), "sqlite")

RUN_STATUSES = ("running", "completed", "aborted", "interrupted")
STEP_STATUSES = ("completed", "failed", "skipped")
VERDICTS = ("pass", "fail", "info")


def _in(column: str, values: tuple[str, ...]) -> str:
    return f"{column} IN ({', '.join(repr(v) for v in values)})"


class UTCDateTime(TypeDecorator[datetime]):
    """An aware UTC datetime: ``timestamptz`` on PostgreSQL, naive UTC text on SQLite.

    Naive datetimes are refused: the store cannot know which zone they meant.
    """

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None or value.utcoffset() is None:
            raise ValueError(f"naive datetime {value.isoformat()}: pass an aware datetime (UTC)")
        value = value.astimezone(UTC)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


class Base(DeclarativeBase):
    type_annotation_map: ClassVar[dict[Any, Any]] = {dict[str, Any]: JSON, datetime: UTCDateTime}


class Document(Base):
    __tablename__ = "documents"

    sha256: Mapped[str] = mapped_column(String(64), primary_key=True)
    text: Mapped[str] = mapped_column(Text)


class Run(Base):
    __tablename__ = "runs"
    __table_args__ = (
        CheckConstraint(_in("status", RUN_STATUSES), name="ck_runs_status"),
        Index("ix_runs_board_started", "board", "started_at"),
        Index("ix_runs_procedure_started", "procedure", "started_at"),
        Index("ix_runs_batch", "batch"),
        Index("ix_runs_status", "status"),
        Index("ix_runs_started", "started_at"),
    )

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    procedure: Mapped[str] = mapped_column(String(200))
    procedure_version: Mapped[str] = mapped_column(String(100))
    procedure_sha256: Mapped[str] = mapped_column(String(64))
    procedure_path: Mapped[str] = mapped_column(Text)
    procedure_doc: Mapped[str] = mapped_column(ForeignKey("documents.sha256"))
    bench: Mapped[str] = mapped_column(String(200))
    bench_doc: Mapped[str | None] = mapped_column(ForeignKey("documents.sha256"))
    board: Mapped[str] = mapped_column(String(200))
    board_type: Mapped[str] = mapped_column(String(200))
    batch: Mapped[str] = mapped_column(String(200))
    operator: Mapped[str] = mapped_column(String(200))
    software_version: Mapped[str] = mapped_column(String(100))
    parameters: Mapped[dict[str, Any]]
    repeat_of: Mapped[int | None] = mapped_column(ForeignKey("runs.id"))
    status: Mapped[str] = mapped_column(String(16))
    reason: Mapped[str] = mapped_column(Text)
    started_at: Mapped[datetime]
    ended_at: Mapped[datetime | None]
    host: Mapped[str] = mapped_column(String(255))
    pid: Mapped[int] = mapped_column(Integer)
    process_tag: Mapped[str] = mapped_column(String(100), server_default=text("''"))
    lease_token: Mapped[str] = mapped_column(String(64), server_default=text("''"))
    heartbeat_at: Mapped[datetime | None]


class Instrument(Base):
    __tablename__ = "instruments"
    __table_args__ = (Index("ix_instruments_run", "run_id"),)

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    role: Mapped[str] = mapped_column(String(50))
    address: Mapped[str] = mapped_column(Text)
    maker: Mapped[str] = mapped_column(String(200))
    model: Mapped[str] = mapped_column(String(200))
    serial: Mapped[str] = mapped_column(String(200))
    firmware: Mapped[str] = mapped_column(String(200))
    calibration_due: Mapped[str] = mapped_column(String(32))
    calibrated: Mapped[str] = mapped_column(String(32), server_default=text("''"))


class Step(Base):
    __tablename__ = "steps"
    __table_args__ = (
        CheckConstraint(_in("status", STEP_STATUSES), name="ck_steps_status"),
        # a step completes at most once per run (a failed attempt may be retried on resume)
        Index(
            "ux_steps_run_path_completed",
            "run_id",
            "path",
            unique=True,
            sqlite_where=text("status = 'completed'"),
            postgresql_where=text("status = 'completed'"),
        ),
        Index("ix_steps_run", "run_id"),
    )

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    path: Mapped[str] = mapped_column(String(500))
    kind: Mapped[str] = mapped_column(String(50))
    position: Mapped[int | None] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(16))
    started_at: Mapped[datetime]
    finished_at: Mapped[datetime]
    settings: Mapped[dict[str, Any]]
    results: Mapped[dict[str, Any]]
    error: Mapped[str] = mapped_column(Text)


class Trace(Base):
    __tablename__ = "traces"
    __table_args__ = (Index("ix_traces_run", "run_id"), Index("ix_traces_step", "step_id"))

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    step_id: Mapped[int] = mapped_column(ForeignKey("steps.id"))
    name: Mapped[str] = mapped_column(String(200))
    encoding: Mapped[str] = mapped_column(String(20))  # "npy+zlib"
    dtype: Mapped[str] = mapped_column(String(20))  # numpy dtype as captured, e.g. "<f8"
    n_samples: Mapped[int] = mapped_column(Integer)
    dt_s: Mapped[float] = mapped_column(Float)
    t0_s: Mapped[float] = mapped_column(Float)
    source: Mapped[str] = mapped_column(String(100))
    averages: Mapped[int] = mapped_column(Integer)
    labels: Mapped[dict[str, Any]]
    # the capture's meta (the input's rails, to check for clipping); NULL: stored before 0008
    meta: Mapped[dict[str, Any] | None]
    data: Mapped[bytes] = mapped_column(LargeBinary)


class Measurement(Base):
    __tablename__ = "measurements"
    __table_args__ = (
        CheckConstraint(_in("verdict", VERDICTS), name="ck_measurements_verdict"),
        # trend queries: runs of a board (ix_runs_board_started) -> this index; also export by run
        Index("ix_measurements_run_quantity", "run_id", "quantity", "channel", "output"),
        Index("ix_measurements_step", "step_id"),
    )

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    step_id: Mapped[int] = mapped_column(ForeignKey("steps.id"))
    quantity: Mapped[str] = mapped_column(String(100))
    value: Mapped[float | None] = mapped_column(Float)  # None only for NaN
    uncertainty: Mapped[float | None] = mapped_column(Float)
    unit: Mapped[str] = mapped_column(String(20))
    channel: Mapped[int | None] = mapped_column(Integer)
    output: Mapped[str | None] = mapped_column(String(50))
    aggressor: Mapped[int | None] = mapped_column(Integer)
    low: Mapped[float | None] = mapped_column(Float)
    high: Mapped[float | None] = mapped_column(Float)
    verdict: Mapped[str] = mapped_column(String(8))
    # 0006: "within uncertainty" when value ± U straddles a limit; why a NULL (NaN) value is missing
    qualifier: Mapped[str] = mapped_column(String(40), server_default=text("''"))
    reason: Mapped[str] = mapped_column(Text, server_default=text("''"))


class SafetyRecord(Base):
    __tablename__ = "safety_events"
    __table_args__ = (Index("ix_safety_events_run", "run_id"),)

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    path: Mapped[str] = mapped_column(String(500))
    kind: Mapped[str] = mapped_column(String(50))
    at: Mapped[datetime]
    detail: Mapped[dict[str, Any]]


class Annotation(Base):
    """A note or an audit entry: ``kind`` is ``note``, ``finished``, ``resumed`` or ``interrupted``."""

    __tablename__ = "annotations"
    __table_args__ = (Index("ix_annotations_run", "run_id"),)

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    at: Mapped[datetime]
    kind: Mapped[str] = mapped_column(String(20))
    author: Mapped[str] = mapped_column(String(200))
    text: Mapped[str] = mapped_column(Text)
    detail: Mapped[dict[str, Any]]


class RunInput(Base):
    """One text a run used (``sequencer.inputs``): its kind, name and document."""

    __tablename__ = "run_inputs"
    __table_args__ = (
        UniqueConstraint("run_id", "kind", "name", name="uq_run_inputs_run_kind_name"),
    )

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    kind: Mapped[str] = mapped_column(String(20))
    name: Mapped[str] = mapped_column(Text)
    document: Mapped[str] = mapped_column(ForeignKey("documents.sha256"))


LABEL_TYPES = ("int", "float", "bool", "text")


class StepLabel(Base):
    """One label of a completed step: ``number`` for int/float/bool (``type`` says which), else ``text``."""

    __tablename__ = "step_labels"
    __table_args__ = (
        Index("ix_step_labels_step", "step_id"),
        Index("ix_step_labels_run_name", "run_id", "name", "number"),
    )

    id: Mapped[int] = mapped_column(BigId, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    step_id: Mapped[int] = mapped_column(ForeignKey("steps.id"))
    name: Mapped[str] = mapped_column(String(100))
    type: Mapped[str] = mapped_column(String(8))
    number: Mapped[float | None] = mapped_column(Float)
    text: Mapped[str | None] = mapped_column(Text)
