"""The results database: every run's complete, queryable record (SQLAlchemy 2.x, alembic migrations).

::

    from sequencer.store import Store, default_url, export_rows, EXPORT_COLUMNS, format_rows

    with Store.open(default_url(os.environ)) as store:
        run_id = store.create_run(info, started_at=datetime.now(UTC))
        runner.subscribe(store.subscriber)          # one transaction per completed step
        rows = export_rows(store, run_id=run_id)
        print(format_rows(rows, "csv", EXPORT_COLUMNS))

The names below are imported when first used (PEP 562 module ``__getattr__``): importing a light
submodule (``sequencer.store.light``, ``rows``, ``lines``) must not pull in SQLAlchemy, alembic and
numpy, which cost a read-only command most of its start-up.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

_WHERE = {
    "DEFAULT_URL": "sequencer.store.sqlite_files",
    "default_url": "sequencer.store.sqlite_files",
    "EXPORT_COLUMNS": "sequencer.store.rows",
    "RUN_COLUMNS": "sequencer.store.rows",
    "format_rows": "sequencer.store.rows",
    "run_rows": "sequencer.store.rows",
    "export_rows": "sequencer.store.export",
    "Annotation": "sequencer.store.records",
    "RunRecord": "sequencer.store.records",
    "SafetyRecord": "sequencer.store.records",
    "SeriesPoint": "sequencer.store.records",
    "StepRecord": "sequencer.store.records",
    "Store": "sequencer.store.store",
}

__all__ = [
    "DEFAULT_URL",
    "EXPORT_COLUMNS",
    "RUN_COLUMNS",
    "Annotation",
    "RunRecord",
    "SafetyRecord",
    "SeriesPoint",
    "StepRecord",
    "Store",
    "default_url",
    "export_rows",
    "format_rows",
    "run_rows",
]  # the keys of _WHERE (a test checks)

if TYPE_CHECKING:
    from sequencer.store.export import export_rows
    from sequencer.store.records import (
        Annotation,
        RunRecord,
        SafetyRecord,
        SeriesPoint,
        StepRecord,
    )
    from sequencer.store.rows import EXPORT_COLUMNS, RUN_COLUMNS, format_rows, run_rows
    from sequencer.store.sqlite_files import DEFAULT_URL, default_url
    from sequencer.store.store import Store


def __getattr__(name: str) -> Any:
    module = _WHERE.get(name)
    if module is None:
        raise AttributeError(f"module 'sequencer.store' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # once imported, an ordinary attribute
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_WHERE})
