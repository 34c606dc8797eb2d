"""The results database: every run's complete, queryable record (SQLAlchemy 2.x, alembic migrations).

::

    from sequencer.store import Store, default_url, export_rows, EXPORT_COLUMNS, format_rows

    with Store.open(default_url(os.environ)) as store:
        run_id = store.create_run(info, started_at=datetime.now(UTC))
        runner.subscribe(store.subscriber)          # one transaction per completed step
        rows = export_rows(store, run_id=run_id)
        print(format_rows(rows, "csv", EXPORT_COLUMNS))
"""

from sequencer.store.connect import DEFAULT_URL, default_url
from sequencer.store.export import EXPORT_COLUMNS, RUN_COLUMNS, export_rows, format_rows, run_rows
from sequencer.store.records import (
    Annotation,
    CompletedStep,
    RunRecord,
    SafetyRecord,
    SeriesPoint,
    StepRecord,
    StoredMeasurement,
    StoredTrace,
)
from sequencer.store.store import Store

__all__ = [
    "DEFAULT_URL",
    "EXPORT_COLUMNS",
    "RUN_COLUMNS",
    "Annotation",
    "CompletedStep",
    "RunRecord",
    "SafetyRecord",
    "SeriesPoint",
    "StepRecord",
    "Store",
    "StoredMeasurement",
    "StoredTrace",
    "default_url",
    "export_rows",
    "format_rows",
    "run_rows",
]
