"""Stored rows as the records the store hands back, whichever path read them.

Why a module of its own: ``queries`` (SQLAlchemy) and ``light_records`` (the standard library's
sqlite3, for ``verify``) read the same tables and must hand back the same records; the conversions
live here once, with no database library imported; numpy (``drivers.trace``, ``tracecodec``) only
when a trace is read: ``verify`` reads none, and starts without it.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from collections.abc import Iterable, Mapping
from typing import TYPE_CHECKING, Any, TypeVar

from sequencer.events import InstrumentInfo
from sequencer.records import Measurement
from sequencer.store.records import RunRecord

if TYPE_CHECKING:  # drivers.trace imports numpy
    from drivers.trace import Trace

R = TypeVar("R")


@functools.cache
def field_names(cls: type) -> tuple[str, ...]:
    return tuple(f.name for f in dataclasses.fields(cls))


def record(cls: type[R], row: Mapping[str, Any], **given: Any) -> R:
    """A ``cls`` from the columns of ``row`` named as its fields; ``given`` supplies the others."""
    names = field_names(cls)
    return cls(**{name: row[name] for name in names if name not in given}, **given)


def run_record(
    row: Mapping[str, Any], texts: Mapping[str, str], instruments: Iterable[Mapping[str, Any]]
) -> RunRecord:
    """A ``runs`` row with its documents' texts (sha256 -> text) and its ``instruments`` rows."""
    return record(
        RunRecord, row,
        procedure_text=texts[row["procedure_doc"]],
        bench_text=texts.get(row["bench_doc"], "") if row["bench_doc"] else "",
        instruments=tuple(record(InstrumentInfo, i) for i in instruments),
    )  # fmt: skip


def stored_trace(t: Mapping[str, Any]) -> Trace:
    """The trace record of a ``traces`` row joined with its step's path (samples in the dtype
    they were captured in)."""
    from drivers.trace import Trace
    from sequencer.store.tracecodec import decode_samples

    return record(Trace, t, volts=decode_samples(t["data"]), meta=stored_meta(t.get("meta")))


def stored_meta(meta: Any) -> dict[str, str]:
    """A stored trace's meta; a row written before revision 0008 kept none, and says so (an
    analysis that needs the input's rails then refuses it rather than not checking for clipping)."""
    if meta is None:
        from drivers.trace import META_NOT_STORED

        return {META_NOT_STORED: "stored before the database kept a trace's meta (revision 0008)"}
    return {str(k): str(v) for k, v in dict(meta).items()}


def stored_measurement(m: Mapping[str, Any]) -> Measurement:
    """The one boundary of a missing value on the way out: SQL NULL reads back as NaN
    (``recording`` writes NaN as NULL); see ``sequencer.records``."""
    value = m["value"]
    return record(Measurement, m, value=math.nan if value is None else float(value))


_LABEL_VALUE = {
    "int": lambda number, _text: int(number),
    "float": lambda number, _text: float(number),
    "bool": lambda number, _text: bool(number),
    "text": lambda _number, text: text,
}


def label_value(type_: str, number: float | None, text: str | None) -> Any:
    """A step label's value with its type restored (int, float, bool, text)."""
    return _LABEL_VALUE[type_](number, text)
