"""The text of ``benchwright export`` and ``benchwright runs``: column names, one dict per run, and
csv / json / table formatting.

The export columns and their order are fixed by DESIGN.md.  Values keep their exact meaning:
floats are written with ``repr`` (shortest text that reads back to the same double), empty fields are
empty strings in CSV and ``null`` in JSON, times are ISO 8601 in UTC.  Plain Python only (no
SQLAlchemy): the light read path (``store.light``) formats with it too.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Iterable, Mapping, Sequence
from datetime import datetime
from typing import Any, Literal

EXPORT_COLUMNS: tuple[str, ...] = (
    "run_id", "started_at", "procedure", "procedure_version", "procedure_sha256", "bench", "board",
    "channel", "output", "aggressor", "quantity", "value", "uncertainty", "unit", "low", "high",
    "verdict", "qualifier", "reason",
)  # DESIGN.md's columns, then the decision rule's qualifier and why a value is empty  # fmt: skip
RUN_COLUMNS: tuple[str, ...] = (
    "id", "procedure", "board", "status", "start", "end", "verdict", "operator", "batch",
)  # DESIGN.md's six, then the verdict (pass / fail / empty while not judged), operator, batch  # fmt: skip
Format = Literal["csv", "json", "table"]


def iso_utc(when: datetime | None) -> str | None:
    """ISO 8601 text of an aware UTC datetime (``2025-03-04T09:30:00.250000+00:00``)."""
    return None if when is None else when.isoformat()


def run_rows(runs: Iterable[Any], verdicts: Mapping[int, str] | None = None) -> list[dict[str, Any]]:
    """One dict per run keyed by ``RUN_COLUMNS`` (for ``benchwright runs``); ``verdicts`` maps run
    id to its verdict (``store.overview.RunCounts.verdict``), empty where not given."""
    given = verdicts or {}
    return [
        {
            "id": r.id,
            "procedure": r.procedure,
            "board": r.board,
            "status": r.status,
            "start": iso_utc(r.started_at),
            "end": iso_utc(r.ended_at),
            "verdict": given.get(r.id, ""),
            "operator": r.operator,
            "batch": r.batch,
        }
        for r in runs
    ]


def _text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, datetime):
        return value.isoformat()
    return str(value)


def _json_value(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None  # JSON has no inf / nan
    if isinstance(value, datetime):
        return value.isoformat()
    return value


def format_rows(rows: Sequence[Mapping[str, Any]], fmt: Format, columns: Sequence[str]) -> str:
    """``rows`` as CSV (header line, ``\\n`` line ends), a JSON array of objects, or an aligned table."""
    if fmt == "csv":
        out = io.StringIO()
        w = csv.writer(out, lineterminator="\n")
        w.writerow(columns)
        w.writerows([_text(row.get(c)) for c in columns] for row in rows)
        return out.getvalue()
    if fmt == "json":
        objects = [{c: _json_value(row.get(c)) for c in columns} for row in rows]
        return json.dumps(objects, indent=2, allow_nan=False) + "\n"
    if fmt == "table":
        cells = [[_text(row.get(c)) for c in columns] for row in rows]
        widths = [max([len(c), *(len(r[i]) for r in cells)]) for i, c in enumerate(columns)]
        lines = ["  ".join(c.ljust(w) for c, w in zip(columns, widths, strict=True)).rstrip()]
        lines.append("  ".join("-" * w for w in widths))
        lines += [
            "  ".join(v.ljust(w) for v, w in zip(r, widths, strict=True)).rstrip() for r in cells
        ]
        return "\n".join(lines) + "\n"
    raise ValueError(f"unknown format {fmt!r}: use csv, json or table")
