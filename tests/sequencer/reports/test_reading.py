"""Reports read the store through one typed interface (issue 16, STYLE.md rule 18)."""

from __future__ import annotations

import inspect
import re
from pathlib import Path

from sequencer.reports.reading import StoreReader
from sequencer.store import Store

REPORTS = Path(__file__).resolve().parents[3] / "sequencer" / "reports"


def _protocol_methods() -> list[str]:
    return [n for n, v in vars(StoreReader).items() if callable(v) and not n.startswith("_")]


def test_the_store_is_a_reader_with_the_same_parameters(store):
    assert isinstance(store, StoreReader)
    assert len(_protocol_methods()) == 8
    for name in _protocol_methods():
        wanted = inspect.signature(getattr(StoreReader, name)).parameters
        has = inspect.signature(getattr(Store, name)).parameters
        assert list(wanted) == list(has), name  # same names, same order (callers pass keywords)


def test_no_report_takes_the_store_as_any():
    offenders = [
        f"{p.name}:{i}"
        for p in sorted(REPORTS.glob("*.py"))
        for i, line in enumerate(p.read_text(encoding="utf-8").splitlines(), start=1)
        if re.search(r"\bstore: Any\b", line)
    ]
    assert offenders == []
