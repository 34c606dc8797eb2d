"""One way for read-only commands to list runs and batches and export measurements, whichever path
reads: the light one (``light.LightReader``, stdlib sqlite3) where it can, else the ``Store``
(SQLAlchemy: PostgreSQL, a schema to upgrade, a damaged file).  Neither writes: a running run
whose recorder is gone is reported by ``gone_recorders`` and shown as interrupted
(``lines.as_seen``); storing that is left to the writers (``run``, ``resume``, ``safe``).

``open_listing`` imports SQLAlchemy only when it takes the second path.
"""

from __future__ import annotations

from types import TracebackType
from typing import Any, Self

from sequencer.store.light import LightReader
from sequencer.store.lines import BatchLine, RunCounts, RunLine


class StoreListing:
    """The same questions answered through SQLAlchemy (``overview``, ``export``)."""

    def __init__(self, store: Any) -> None:
        self.store = store

    def run_lines(self, *, newest_first: bool = True, **filters: Any) -> list[RunLine]:
        from sequencer.store.overview import run_lines

        with self.store.engine.connect() as conn:
            return run_lines(conn, newest_first=newest_first, **filters)

    def run_counts(self, run_ids: list[int]) -> dict[int, RunCounts]:
        from sequencer.store.overview import run_counts

        with self.store.engine.connect() as conn:
            return run_counts(conn, run_ids, steps=False)

    def gone_recorders(self, stale_after_s: float | None = None) -> dict[int, Any]:
        """As ``LightReader.gone_recorders`` (``lifecycle.gone_recorders``, read only)."""
        from datetime import UTC, datetime

        from sequencer.store import lease
        from sequencer.store.lifecycle import gone_recorders
        from sequencer.store.liveness import this_process

        limit = lease.DEFAULT_STALE_AFTER_S if stale_after_s is None else stale_after_s
        with self.store.engine.connect() as conn:
            return gone_recorders(conn, this_process(), datetime.now(UTC), limit)

    def batch_lines(self) -> list[BatchLine]:
        from sequencer.store.overview import batch_lines

        with self.store.engine.connect() as conn:
            return batch_lines(conn)

    def export_rows(self, **filters: Any) -> list[dict[str, Any]]:
        from sequencer.store.export import export_rows

        return export_rows(self.store, **filters)

    def close(self) -> None:
        self.store.close()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.close()


Listing = LightReader | StoreListing  # the same methods (a typing.Protocol costs start-up time)


def open_listing(url: str) -> Listing:
    """A listing of the existing database at ``url`` (``StoreError`` if there is none; nothing is
    created, nothing written)."""
    light = LightReader.open(url)
    if light is not None:
        return light
    from sequencer.store.store import Store

    return StoreListing(Store.open(url, create=False))
