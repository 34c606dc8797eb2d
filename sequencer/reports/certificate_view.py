"""The text a certificate shows, as rows of strings: one source for the PDF and the HTML.

Both renderers print exactly these strings, and ``verify`` recomputes them from the embedded data to
check that the visible values were not edited.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

from .certificate_data import CertificateData, QuantityLine
from .quantities import format_limits, format_measured, readable

QUANTITY_HEADER = ("quantity", "output", "value", "±", "unit", "limits", "verdict")
QUANTITY_COLUMN_KEYS = ("quantity", "output", "value", "uncertainty", "unit", "limits", "verdict")
INSTRUMENT_HEADER = ("role", "maker", "model", "serial", "firmware", "calibration due")
SAFETY_HEADER = ("time (UTC)", "step", "event", "detail")
VERDICT_TEXT = {"pass": "pass", "fail": "FAIL", "info": "info"}
OVERALL_TEXT = {
    "PASS": "PASS — every judged value within its limits",
    "FAIL": "FAIL — at least one value outside its limits",
    "INCOMPLETE": "INCOMPLETE — the run did not complete or judged nothing",
    "UNJUDGED": "NOT PASSED — values of limited quantities went unjudged (no limit matched them)",
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
    name = readable(q.quantity)
    if q.channel is None:
        return f"{name} (board)"
    if q.aggressor is not None:
        return f"{name} (from ch {q.aggressor})"
    return name


def verdict_text(q: QuantityLine) -> str:
    """``pass``, ``FAIL`` or ``info``, with the decision rule's qualifier when the value's interval
    straddles a limit: ``FAIL (within uncertainty)``."""
    text = VERDICT_TEXT.get(q.verdict, q.verdict)
    return f"{text} ({q.qualifier})" if q.qualifier else text


def quantity_cells(q: QuantityLine) -> tuple[str, ...]:
    value, unc = format_measured(q.value, q.uncertainty)
    if q.value is None and q.reason:
        value = f"{value} ({q.reason})"  # the refusal beside the value it explains
    return (
        quantity_label(q),
        q.output or "—",
        value,
        unc or "—",
        q.unit,
        format_limits(q.low, q.high),
        verdict_text(q),
    )


def quantity_rows(d: CertificateData) -> list[QuantityRow]:
    return [
        QuantityRow(key=f"quantities.{i}", cells=quantity_cells(q), failed=q.verdict == "fail")
        for i, q in enumerate(d.quantities)
    ]


def shows_calibrated(d: CertificateData) -> bool:
    """Whether the instruments table has a ``calibrated`` column: when the run kept any instrument's
    calibration date (a bench file without the key, and every run recorded before it was kept,
    print the table as they always did, so their certificates still verify)."""
    return any(i.calibrated for i in d.instruments)


def instrument_header(d: CertificateData) -> tuple[str, ...]:
    return (*INSTRUMENT_HEADER[:-1], "calibrated", INSTRUMENT_HEADER[-1]) if shows_calibrated(d) else INSTRUMENT_HEADER


def instrument_columns(d: CertificateData) -> tuple[str, ...]:
    """The field keys of the instruments table's columns (``instruments.N.<column>``)."""
    if shows_calibrated(d):
        return (*INSTRUMENT_COLUMNS[:-1], "calibrated", INSTRUMENT_COLUMNS[-1])
    return INSTRUMENT_COLUMNS


def instrument_rows(d: CertificateData) -> list[tuple[str, ...]]:
    dated = shows_calibrated(d)
    return [
        (
            i.role,
            i.maker or "—",
            i.model or "—",
            i.serial or "—",
            i.firmware or "—",
            *((i.calibrated or "—",) if dated else ()),
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


def judgement_text(d: CertificateData) -> str:
    """How many values were judged, and how many of limited quantities were not."""
    verdicts = [q.verdict for q in d.quantities]
    info = verdicts.count("info") - d.unjudged
    return (f"Judged values: {verdicts.count('pass')} pass, {verdicts.count('fail')} fail · "
            f"unjudged values of limited quantities: {d.unjudged} · without a limit: {info}")


def caveat_text(caveat: str) -> str:
    return f"Caveat: {caveat}"


def field_slug(label: str) -> str:
    """``Board serial`` -> ``board_serial``: the key of a header field."""
    return "_".join(label.lower().replace("-", " ").split())


INSTRUMENT_COLUMNS = ("role", "maker", "model", "serial", "firmware", "calibration_due")


def printed_fields(d: CertificateData) -> list[tuple[str, str]]:
    """What a certificate prints before its tables, as ``(field key, text)`` in reading order.

    Both renderers print exactly these texts (the HTML marks each with ``data-field``), then the
    tables (:func:`table_fields`), then :func:`closing_fields`; ``verify`` recomputes all three from
    the embedded data, in that order: a certificate whose printed text was edited fails, naming the
    field.  In the PDF a table row is checked as its cells joined by spaces.
    """
    out = [(f"header.{field_slug(label)}", f"{label} {value}") for label, value in identity_rows(d)]
    out.append(("verdict", f"Overall verdict: {overall_text(d)}"))
    out.append(("judgement", judgement_text(d)))
    out += [(f"caveats.{i}", caveat_text(c)) for i, c in enumerate(d.caveats)]
    out.append(("decision_rule", f"Decision rule: {d.decision_rule}; {d.coverage}"))
    out += [(f"conditions.{i}", f"Test condition: {c}") for i, c in enumerate(d.conditions)]
    return out


def crosstalk_out_rows(d: CertificateData) -> list[QuantityRow]:
    """This channel as the aggressor: the crosstalk it caused in each victim (what the crosstalk
    plot draws), so the table and the plot name victim and aggressor the same way."""
    rows = []
    for i, q in enumerate(d.crosstalk_out):
        cells = (f"{readable(q.quantity)} into ch {q.channel}", *quantity_cells(q)[1:])
        rows.append(QuantityRow(key=f"crosstalk_out.{i}", cells=cells, failed=q.verdict == "fail"))
    return rows


def table_fields(d: CertificateData) -> list[tuple[str, tuple[str, ...], tuple[str, ...]]]:
    """The printed tables as ``(row key, column names, cells)``: results (this channel measured,
    as the victim for crosstalk), crosstalk this channel caused, then instruments."""
    rows = [(r.key, QUANTITY_COLUMN_KEYS, r.cells) for r in quantity_rows(d)]
    rows += [(r.key, QUANTITY_COLUMN_KEYS, r.cells) for r in crosstalk_out_rows(d)]
    columns = instrument_columns(d)
    rows += [(f"instruments.{i}", columns, c) for i, c in enumerate(instrument_rows(d))]
    return rows


APPROVAL = ("Reviewed by ______________________________", "Date ______________________")


def closing_fields(d: CertificateData) -> list[tuple[str, str]]:
    """What a certificate prints after its tables: why values are missing (for values recorded
    before their reason was kept with them; a stored reason is printed in the value's own cell),
    the bias record summarised, and the approval block (tested by; reviewed by and date are signed
    by hand)."""
    out = [
        (f"notes.{i}", f"Not measured: {quantity_label(q)} {q.output or ''}: {q.note}".replace("  ", " "))
        for i, q in enumerate(d.quantities)
        if q.note and not q.reason
    ]
    out += [(f"bias.{field_slug(label)}", f"{label}: {text}") for label, text in d.bias]
    out.append(("approval.tested_by", f"Tested by {d.operator or '—'}"))
    out.append(("approval.reviewed_by", APPROVAL[0]))
    out.append(("approval.date", APPROVAL[1]))
    return out
