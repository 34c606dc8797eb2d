"""Everything one channel's certificate shows, gathered from the store, and its SHA-256.

The certificate is a rendering of a :class:`CertificateData`; nothing on it comes from elsewhere.  The
data's canonical JSON (:func:`canonical_json`: sorted keys, no whitespace, ASCII, NaN as null, floats
as Python's shortest round-trip ``repr``) is embedded in the PDF and the HTML, and its SHA-256
(:func:`data_sha256`) is printed on them; ``verify`` gathers the same data from the database again and
compares.  Fields marked ``hashed=False`` (the raw samples of a plotted pulse) are left out of the
canonical form; their digest (``trace_sha256``) is in it instead.  Fields marked ``omitted_empty``
(a quantity's ``qualifier`` and ``reason``, added after certificates were first issued) are left out while empty,
so a certificate issued before they existed still hashes as the data gathered again today.

Certificate number scheme: ``BW-<run id, 6 digits>-<board serial>-CH<channel, 2 digits>``, e.g.
``BW-000042-NR-PA8-0001-CH03``: deterministic from the run and the channel, unique in one database.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, fields, is_dataclass
from datetime import datetime
from typing import Any

from .certificate_context import (
    COVERAGE,
    SIMPLE_ACCEPTANCE,
    bias_summary,
    conditions,
    missing_reason,
)
from .evidence import PulseShape, RunSnapshot, SCurve, TransferCurve, gather_evidence, snapshot_run
from .quantities import quantity_rank
from .reading import StoreReader
from .spectra import Spectrum, gather_spectra

SCHEMA = "benchwright-certificate/2"
HASH_PREFIX_DIGITS = 12

__all__ = [
    "SCHEMA",
    "CertificateData",
    "InstrumentLine",
    "QuantityLine",
    "SafetyLine",
    "canonical_dict",
    "canonical_json",
    "certificate_from_dict",
    "certificate_number",
    "data_sha256",
    "gather_certificate",
    "gather_certificates",
]


@dataclass(frozen=True, kw_only=True)
class InstrumentLine:
    role: str
    maker: str
    model: str
    serial: str
    firmware: str
    calibration_due: str
    address: str
    # the date of the last calibration; left out of the canonical record when empty, so the data of
    # certificates printed before it was kept hashes as it did
    calibrated: str = field(default="", metadata={"omitted_empty": True})


@dataclass(frozen=True, kw_only=True)
class QuantityLine:
    """One stored measurement; ``channel`` None for a per-board quantity (e.g. ``leakage_nA``)."""

    quantity: str
    channel: int | None
    output: str | None
    aggressor: int | None
    value: float | None
    uncertainty: float | None
    unit: str
    low: float | None
    high: float | None
    verdict: str
    note: str = ""  # why there is no value (the measurement's stored reason, else the step's error)
    # "within uncertainty" when value ± U straddles a limit (decision rule); left out while empty
    qualifier: str = field(default="", metadata={"omitted_empty": True})
    # why the value could not be measured, as stored with it (revision 0006); printed beside it
    reason: str = field(default="", metadata={"omitted_empty": True})


@dataclass(frozen=True, kw_only=True)
class SafetyLine:
    at: str
    path: str
    kind: str
    detail: str  # canonical JSON of the event's detail mapping


@dataclass(frozen=True, kw_only=True)
class CertificateData:
    """One channel of one run, as certified."""

    schema: str = SCHEMA
    number: str
    run_id: int
    channel: int
    board: str
    board_type: str
    batch: str
    procedure: str
    procedure_version: str
    procedure_sha256: str
    bench: str
    operator: str
    started_at: str
    ended_at: str
    run_status: str
    run_reason: str
    software_version: str
    instruments: tuple[InstrumentLine, ...]
    quantities: tuple[QuantityLine, ...]
    crosstalk_out: tuple[QuantityLine, ...]  # this channel as the aggressor
    safety: tuple[SafetyLine, ...]
    transfer: tuple[TransferCurve, ...] = ()
    s_curves: tuple[SCurve, ...] = ()
    pulses: tuple[PulseShape, ...] = ()
    spectra: tuple[Spectrum, ...] = ()
    caveats: tuple[str, ...] = ()  # how the run was run (overrides, changed draft text): printed
    conditions: tuple[str, ...] = ()  # the run's resolved parameters, "name = value"
    decision_rule: str = SIMPLE_ACCEPTANCE
    coverage: str = COVERAGE
    bias: tuple[tuple[str, str], ...] = ()  # the bias record summarised: (label, text)
    unjudged: int = 0  # values of quantities the limit set limits that no limit matched
    verdict: str = field(default="INCOMPLETE")

    @property
    def procedure_hash_prefix(self) -> str:
        return self.procedure_sha256[:HASH_PREFIX_DIGITS]


def certificate_number(run_id: int, serial: str, channel: int) -> str:
    """``BW-<run_id:06d>-<serial>-CH<channel:02d>`` (module docstring)."""
    return f"BW-{run_id:06d}-{serial}-CH{channel:02d}"


def overall_verdict(quantities: Iterable[QuantityLine], run_status: str, unjudged: int = 0) -> str:
    """FAIL if any value failed; else INCOMPLETE if the run did not complete or nothing was judged
    pass; else UNJUDGED if a value of a limited quantity went unjudged; else PASS.  A failed value
    outranks an incomplete run."""
    verdicts = [q.verdict for q in quantities]
    if "fail" in verdicts:
        return "FAIL"
    if run_status != "completed" or "pass" not in verdicts:
        return "INCOMPLETE"
    if unjudged:
        return "UNJUDGED"
    return "PASS"


def limited_quantities(snap: RunSnapshot) -> frozenset[str]:
    """Quantities the run's limit set limits: every limit of the stored limit set, and every quantity
    a stored value was judged against a limit for (runs recorded before the inputs were kept)."""
    found = {m.quantity for m in snap.measurements if m.low is not None or m.high is not None}
    found |= set(snap.limit_quantities)
    return frozenset(found)


def gather_certificates(store: StoreReader, run_id: int) -> list[CertificateData]:
    """One :class:`CertificateData` per channel that has a measurement in run ``run_id``."""
    snap = snapshot_run(store, run_id)
    return [_certificate(snap, channel) for channel in snap.channels]


def gather_certificate(store: StoreReader, run_id: int, channel: int) -> CertificateData:
    """The data of one channel; ``KeyError`` if the run has no measurement of that channel."""
    snap = snapshot_run(store, run_id)
    if channel not in snap.channels:
        raise KeyError(f"run {run_id} has no measurement of channel {channel}")
    return _certificate(snap, channel)


def _certificate(snap: RunSnapshot, channel: int) -> CertificateData:
    run = snap.run
    mine = [m for m in snap.measurements if m.channel == channel or m.channel is None]
    quantities = tuple(sorted((_quantity(m, snap) for m in mine), key=_quantity_key))
    crosstalk_out = tuple(
        sorted(
            (
                _quantity(m, snap)
                for m in snap.measurements
                if m.aggressor == channel and m.channel != channel
            ),
            key=_quantity_key,
        )
    )
    transfer, s_curves, pulses = gather_evidence(snap, channel)
    limited = limited_quantities(snap)
    unjudged = sum(1 for q in quantities if q.verdict == "info" and q.quantity in limited)
    return CertificateData(
        number=certificate_number(int(run.id), str(run.board), channel),
        run_id=int(run.id),
        channel=channel,
        board=run.board,
        board_type=run.board_type,
        batch=run.batch or "",
        procedure=run.procedure,
        procedure_version=run.procedure_version,
        procedure_sha256=run.procedure_sha256,
        bench=run.bench,
        operator=run.operator,
        started_at=_iso(run.started_at),
        ended_at=_iso(run.ended_at),
        run_status=run.status,
        run_reason=run.reason or "",
        software_version=run.software_version,
        instruments=tuple(sorted((_instrument(i) for i in run.instruments), key=lambda i: i.role)),
        quantities=quantities,
        crosstalk_out=crosstalk_out,
        safety=tuple(_safety(e) for e in snap.safety_events),
        transfer=transfer,
        s_curves=s_curves,
        pulses=pulses,
        spectra=gather_spectra(snap, channel),
        caveats=tuple(snap.caveats),
        conditions=conditions(dict(run.parameters or {})),
        decision_rule=snap.decision_rule,
        coverage=snap.coverage,
        bias=bias_summary(snap.safety_events),
        unjudged=unjudged,
        verdict=overall_verdict(quantities, run.status, unjudged),
    )


def _quantity_key(q: QuantityLine) -> tuple:
    return (
        q.channel is not None,  # board-level rows first
        quantity_rank(q.quantity),
        q.quantity,
        q.output or "",
        q.aggressor or 0,
        q.channel or 0,
    )


def _quantity(m: Any, snap: RunSnapshot | None = None) -> QuantityLine:
    value = _float_or_none(m.value)
    step = snap.steps.get(m.path) if snap is not None and value is None else None
    note = m.reason if value is None and m.reason else ""
    return QuantityLine(
        # runs recorded before measurements kept their reason (store revision 0006): the step's
        note=note or (missing_reason(step) if step is not None else ""),
        qualifier=m.qualifier,
        reason=note,
        quantity=m.quantity,
        channel=m.channel,
        output=m.output,
        aggressor=m.aggressor,
        value=_float_or_none(m.value),
        uncertainty=_float_or_none(m.uncertainty),
        unit=m.unit,
        low=_float_or_none(m.low),
        high=_float_or_none(m.high),
        verdict=m.verdict,
    )


def _instrument(i: Any) -> InstrumentLine:
    return InstrumentLine(
        role=i.role,
        maker=i.maker or "",
        model=i.model or "",
        serial=i.serial or "",
        firmware=i.firmware or "",
        calibration_due=str(i.calibration_due or ""),
        calibrated=str(getattr(i, "calibrated", "") or ""),
        address=i.address or "",
    )


def _safety(e: Any) -> SafetyLine:
    return SafetyLine(
        at=_iso(e.at),
        path=e.path,
        kind=e.kind,
        detail=json.dumps(_plain(dict(e.detail or {})), sort_keys=True, separators=(",", ":")),
    )


def _iso(value: datetime | str | None) -> str:
    if value is None:
        return ""
    return value if isinstance(value, str) else value.isoformat()


def _float_or_none(value: float | None) -> float | None:
    if value is None:
        return None
    v = float(value)
    return v if math.isfinite(v) else None


# -- canonical form -------------------------------------------------------------------------------


def canonical_dict(data: Any) -> Any:
    """Plain JSON value of ``data``: dataclasses as dicts (fields with ``hashed=False`` left out),
    tuples as lists, non-finite floats as None."""
    if is_dataclass(data) and not isinstance(data, type):
        return {
            f.name: canonical_dict(getattr(data, f.name))
            for f in fields(data)
            if f.metadata.get("hashed", True)
            and not (f.metadata.get("omitted_empty") and getattr(data, f.name) == f.default)
        }
    return _plain(data)


def _plain(value: Any) -> Any:
    if is_dataclass(value) and not isinstance(value, type):
        return canonical_dict(value)
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int):
        return int(value)
    if isinstance(value, float) or hasattr(value, "__float__"):
        v = float(value)
        return v if math.isfinite(v) else None
    return str(value)


def canonical_json(data: Any) -> str:
    """The canonical JSON text of ``data`` (a dataclass or an already plain value)."""
    return json.dumps(
        canonical_dict(data),
        sort_keys=True,
        separators=(",", ":"),
        ensure_ascii=True,
        allow_nan=False,
    )


def data_sha256(data: Any) -> str:
    """Hex SHA-256 of the UTF-8 canonical JSON of ``data``."""
    return hashlib.sha256(canonical_json(data).encode("utf-8")).hexdigest()


def certificate_from_dict(value: Mapping[str, Any]) -> CertificateData:
    """A :class:`CertificateData` from its canonical dict (as embedded in a certificate).

    Raises ``KeyError`` / ``TypeError`` when the dict does not have the canonical fields.
    """
    v = dict(value)

    def rows(key: str, cls: type, tuples: tuple[str, ...] = ()) -> tuple[Any, ...]:
        return tuple(
            cls(**{k: tuple(x) if k in tuples else x for k, x in dict(item).items()})
            for item in v.pop(key, [])
        )

    v["instruments"] = rows("instruments", InstrumentLine)
    v["quantities"] = rows("quantities", QuantityLine)
    v["crosstalk_out"] = rows("crosstalk_out", QuantityLine)
    v["safety"] = rows("safety", SafetyLine)
    v["transfer"] = rows("transfer", TransferCurve, ("amplitudes_mV", "heights_mV", "residuals_mV"))
    v["s_curves"] = rows("s_curves", SCurve, ("thresholds_mV", "counts"))
    v["pulses"] = rows("pulses", PulseShape)
    v["spectra"] = rows("spectra", Spectrum, ("edges", "counts", "model"))
    v["caveats"] = tuple(v.get("caveats", ()))
    v["conditions"] = tuple(v.get("conditions", ()))
    v["bias"] = tuple(tuple(pair) for pair in v.get("bias", ()))
    return CertificateData(**v)
