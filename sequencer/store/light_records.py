"""The records a certificate is gathered from, read from an SQLite file with the standard library.

Why: ``benchwright verify`` gathers a certificate's data from the database again; through the
``Store`` that meant importing SQLAlchemy and alembic (most of its start-up) for a handful of
SELECTs.  ``LightRecords`` answers the queries of ``reports.reading.StoreReader`` with the same
SQL ``queries`` builds, written out, and hands back the same records through ``stored`` (a test
gathers every certificate of a run both ways and compares their SHA-256).  It opens only what
``light.LightReader.open`` opens (a plain SQLite file at the head revision, read only); anything
else is left to the ``Store``: ``open_records``.
"""

from __future__ import annotations

import json
import sqlite3
from collections import defaultdict
from collections.abc import Mapping
from datetime import datetime
from typing import Any

from sequencer.errors import StoreError
from sequencer.inputs import RunInput
from sequencer.records import Measurement, StepResult
from sequencer.store.light import LightReader, _moment, _run_where
from sequencer.store.records import RunRecord, SafetyRecord, SeriesPoint
from sequencer.store.stored import (
    label_value,
    record,
    run_record,
    stored_measurement,
    stored_trace,
)

_JSON = frozenset({"parameters", "settings", "results", "labels", "meta", "detail"})
_MOMENTS = frozenset({"started_at", "ended_at", "finished_at", "at", "heartbeat_at"})


class LightRecords(LightReader):
    """``StoreReader`` over an SQLite store at ``light.HEAD_REVISION`` (stdlib sqlite3)."""

    def _mapped(self, sql: str, params: Any = ()) -> list[dict[str, Any]]:
        """Rows as dicts with the values the Store's column types give: JSON decoded, moments as
        aware UTC datetimes."""
        try:
            cursor = self._conn.execute(sql, params)
            names = [d[0] for d in cursor.description]
            rows = cursor.fetchall()
        except sqlite3.Error as exc:
            raise StoreError(f"cannot read the results database: {exc}") from exc
        out = []
        for row in rows:
            mapped = dict(zip(names, row, strict=True))
            for name in _JSON.intersection(mapped):
                if isinstance(mapped[name], str):
                    mapped[name] = json.loads(mapped[name])
            for name in _MOMENTS.intersection(mapped):
                mapped[name] = _moment(mapped[name])
            out.append(mapped)
        return out

    def _run_records(self, where: str, params: Mapping[str, Any]) -> list[RunRecord]:
        rows = self._mapped(f"SELECT * FROM runs{where} ORDER BY started_at, id", params)
        if not rows:
            return []
        ids = [r["id"] for r in rows]
        marks = ", ".join("?" * len(ids))
        docs = {d for r in rows for d in (r["procedure_doc"], r["bench_doc"]) if d}
        texts = {
            d["sha256"]: d["text"]
            for d in self._mapped(
                f"SELECT sha256, text FROM documents WHERE sha256 IN ({', '.join('?' * len(docs))})",
                sorted(docs),
            )
        }
        instruments: dict[int, list[dict[str, Any]]] = defaultdict(list)
        for i in self._mapped(f"SELECT * FROM instruments WHERE run_id IN ({marks}) ORDER BY id", ids):
            instruments[i["run_id"]].append(i)
        return [run_record(r, texts, instruments[r["id"]]) for r in rows]

    def get_run(self, run_id: int) -> RunRecord:
        found = self._run_records(*_run_where(run_id=run_id))
        if not found:
            raise StoreError(f"no run {run_id} in the database")
        return found[0]

    def runs_of_batch(self, batch: str) -> list[RunRecord]:
        return self._run_records(*_run_where(batch=batch))

    def measurements(
        self,
        run_id: int | None = None,
        board: str | None = None,
        procedure: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
    ) -> list[Measurement]:
        where, params = _run_where(run_id=run_id, board=board, procedure=procedure, since=since,
                                   until=until)  # fmt: skip
        rows = self._mapped(
            "SELECT steps.path, m.* FROM measurements m JOIN runs ON runs.id = m.run_id "
            f"JOIN steps ON steps.id = m.step_id{where} ORDER BY m.run_id, m.id", params
        )
        return [stored_measurement(m) for m in rows]

    def completed_steps(self, run_id: int, *, traces: bool = True) -> dict[str, StepResult]:
        """As ``queries.completed_steps``: path -> completed step with its settings, results,
        traces and measurements (``traces=False``: none read, each step's ``traces`` empty)."""
        by_step_traces: dict[str, list[Any]] = defaultdict(list)
        for t in self._mapped(
            "SELECT steps.path, t.* FROM traces t JOIN steps ON steps.id = t.step_id "
            "WHERE t.run_id = ? ORDER BY t.id", (run_id,)
        ) if traces else ():
            by_step_traces[t["path"]].append(stored_trace(t))
        by_step_ms: dict[str, list[Measurement]] = defaultdict(list)
        for m in self.measurements(run_id=run_id):
            by_step_ms[m.path].append(m)
        labels: dict[int, dict[str, Any]] = defaultdict(dict)
        for row in self._mapped(
            "SELECT step_id, name, type, number, text FROM step_labels WHERE run_id = ? ORDER BY id",
            (run_id,),
        ):
            labels[row["step_id"]][row["name"]] = label_value(row["type"], row["number"], row["text"])
        steps = self._mapped(
            "SELECT * FROM steps WHERE run_id = ? AND status = 'completed' ORDER BY id", (run_id,)
        )
        return {
            s["path"]: record(
                StepResult, s, labels=labels.get(s["id"], {}),
                traces=tuple(by_step_traces[s["path"]]), measurements=tuple(by_step_ms[s["path"]]),
            )
            for s in steps
        }

    def safety_events(self, run_id: int) -> list[SafetyRecord]:
        rows = self._mapped("SELECT * FROM safety_events WHERE run_id = ? ORDER BY id", (run_id,))
        return [record(SafetyRecord, s) for s in rows]

    def caveats(self, run_id: int) -> list[str]:
        """What a certificate of the run must say about how it was run (``Store.caveats``)."""
        rows = self._mapped(
            "SELECT text FROM annotations WHERE run_id = ? AND kind = 'caveat' ORDER BY id", (run_id,)
        )
        return [r["text"] for r in rows]

    def run_inputs(self, run_id: int) -> tuple[RunInput, ...]:
        """Every text the run used, in the order stored (``StoreError`` for a run not stored)."""
        self.get_run(run_id)
        rows = self._mapped(
            "SELECT i.kind, i.name, d.text FROM run_inputs i JOIN documents d ON d.sha256 = "
            "i.document WHERE i.run_id = ? ORDER BY i.id", (run_id,)
        )
        return tuple(RunInput(r["kind"], r["name"], r["text"]) for r in rows)

    def quantity_series(
        self,
        board: str,
        quantity: str,
        channel: int | None = None,
        output: str | None = None,
        procedure: str | None = None,
    ) -> list[SeriesPoint]:
        """``quantity`` over the board's completed runs, oldest first (``queries.quantity_series``)."""
        where, params = _run_where(board=board, procedure=procedure, status="completed")
        sql = ("SELECT runs.started_at, m.* FROM measurements m JOIN runs ON runs.id = m.run_id"
               f"{where} AND m.quantity = :quantity")  # fmt: skip
        params["quantity"] = quantity
        if channel is not None:
            sql += " AND m.channel = :channel"
            params["channel"] = channel
        if output is not None:
            sql += " AND m.output = :output"
            params["output"] = output
        return [record(SeriesPoint, m) for m in self._mapped(sql + " ORDER BY runs.started_at, m.id", params)]


def open_records(url: str) -> Any:
    """A ``StoreReader`` of the existing database at ``url``: ``LightRecords`` where it can read
    it, else the ``Store`` (PostgreSQL, another revision, a damaged file).  ``StoreError`` if there
    is no database; nothing is created."""
    light = LightRecords.open(url)
    if light is not None:
        return light
    from sequencer.store.store import Store

    return Store.open(url, create=False)
