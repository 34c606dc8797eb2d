"""The text a certificate shows, as rows of strings: one source for the PDF and the HTML.

Both renderers print exactly these strings, and ``verify`` recomputes them from the embedded data to
check that the visible values were not edited.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

from .certificate_data import CertificateData, QuantityLine
from .quantities import format_limits, format_measured

QUANTITY_HEADER = ("quantity", "output", "value", "±", "unit", "limits", "verdict")
INSTRUMENT_HEADER = ("role", "maker", "model", "serial", "firmware", "calibration due")
SAFETY_HEADER = ("time (UTC)", "step", "event", "detail")
VERDICT_TEXT = {"pass": "pass", "fail": "FAIL", "info": "info"}
OVERALL_TEXT = {
    "PASS": "PASS — every judged value within its limits",
    "FAIL": "FAIL — at least one value outside its limits",
    "INCOMPLETE": "INCOMPLETE — the run did not complete or judged nothing",
}


@dataclass(frozen=True)
class QuantityRow:
    key: str  # "quantities.<index>": the data field the row shows
    cells: tuple[str, ...]
    failed: bool


def identity_rows(d: CertificateData) -> list[tuple[str, str]]:
    """(label, value) pairs of the certificate header."""
    return [
        ("Certificate number", d.number),
        ("Board serial", d.board),
        ("Board type", d.board_type),
        ("Channel", str(d.channel)),
        ("Batch", d.batch or "—"),
        ("Procedure", f"{d.procedure} version {d.procedure_version}"),
        ("Procedure SHA-256", d.procedure_hash_prefix),
        ("Bench", d.bench),
        ("Operator", d.operator),
        ("Started", d.started_at or "—"),
        ("Ended", d.ended_at or "—"),
        ("Run", f"{d.run_id} ({d.run_status}{': ' + d.run_reason if d.run_reason else ''})"),
        ("Software", f"benchwright {d.software_version}"),
    ]


def quantity_label(q: QuantityLine) -> str:
    if q.channel is None:
        return f"{q.quantity} (board)"
    if q.aggressor is not None:
        return f"{q.quantity} (from ch {q.aggressor})"
    return q.quantity


def quantity_cells(q: QuantityLine) -> tuple[str, ...]:
    value, unc = format_measured(q.value, q.uncertainty)
    return (
        quantity_label(q),
        q.output or "—",
        value,
        unc or "—",
        q.unit,
        format_limits(q.low, q.high),
        VERDICT_TEXT.get(q.verdict, q.verdict),
    )


def quantity_rows(d: CertificateData) -> list[QuantityRow]:
    return [
        QuantityRow(key=f"quantities.{i}", cells=quantity_cells(q), failed=q.verdict == "fail")
        for i, q in enumerate(d.quantities)
    ]


def instrument_rows(d: CertificateData) -> list[tuple[str, ...]]:
    return [
        (
            i.role,
            i.maker or "—",
            i.model or "—",
            i.serial or "—",
            i.firmware or "—",
            i.calibration_due or "—",
        )
        for i in d.instruments
    ]


def safety_rows(d: CertificateData) -> list[tuple[str, ...]]:
    rows = []
    for e in d.safety:
        detail = json.loads(e.detail)
        text = ", ".join(f"{k} {v}" for k, v in sorted(detail.items()))
        rows.append((e.at.replace("+00:00", "Z"), e.path, e.kind, text or "—"))
    return rows


def overall_text(d: CertificateData) -> str:
    return OVERALL_TEXT.get(d.verdict, d.verdict)
