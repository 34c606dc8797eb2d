"""The pages of the web view: each handler reads the store and renders one template.

Handlers are plain functions (Starlette runs them in its thread pool: the store's queries block).
Every page is read-only; filters come from the query string and are echoed back in the form.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime, time, timedelta
from typing import Any

from starlette.exceptions import HTTPException
from starlette.requests import Request
from starlette.responses import Response

from sequencer.errors import StoreError
from sequencer.reports.quantities import format_limits, format_measured, format_number
from sequencer.store.overview import batch_lines, count_runs, run_counts, run_lines
from sequencer.web.certificates import certificates_of_run
from sequencer.web.rows import run_rows_html
from sequencer.web.settings import MAX_PAGE_SIZE

RUNS_COLUMNS = ("run", "board", "batch", "procedure", "operator", "status", "verdict", "values",
                "started", "took")
CURVE_CACHE_RUNS = 32  # completed runs whose curves are kept for the next view
RUN_FILTERS = ("board", "batch", "procedure", "verdict", "operator", "status", "since", "until")
VERDICTS = ("pass", "fail", "")


def _state(request: Request) -> Any:
    return request.app.state


def render(request: Request, template: str, **context: Any) -> Response:
    state = _state(request)
    return state.templates.TemplateResponse(
        request, template, {"database": state.database, "page": template.split(".")[0], **context}
    )


def _day(text: str, name: str, end: bool = False) -> datetime | None:
    if not text:
        return None
    try:
        day = datetime.fromisoformat(text)
    except ValueError:
        raise HTTPException(400, f"{name}: not a date (YYYY-MM-DD): {text!r}") from None
    if len(text) <= 10:  # a day: since its start, until the end of it
        day = datetime.combine(day.date(), time(0), tzinfo=UTC)
        if end:
            day += timedelta(days=1)
    return day if day.tzinfo else day.replace(tzinfo=UTC)


def _int(text: str | None, name: str, default: int) -> int:
    if text in (None, ""):
        return default
    try:
        return int(text)
    except ValueError:
        raise HTTPException(400, f"{name}: not a whole number: {text!r}") from None


def runs_page(request: Request) -> Response:
    """Runs, newest first, filtered by board, batch, procedure, verdict, operator, status, dates."""
    q = {k: request.query_params.get(k, "").strip() for k in RUN_FILTERS}
    limit = min(_int(request.query_params.get("limit"), "limit", _state(request).settings.page_size), MAX_PAGE_SIZE)
    offset = max(0, _int(request.query_params.get("offset"), "offset", 0))
    filters: dict[str, Any] = {k: q[k] or None for k in ("board", "batch", "procedure", "status", "operator")}
    filters["since"] = _day(q["since"], "since")
    filters["until"] = _day(q["until"], "until", end=True)
    store = _state(request).store
    with store.engine.connect() as conn:
        if q["verdict"]:
            lines = run_lines(conn, **filters)  # a verdict is counted, not a column: filter here
            counts = run_counts(conn, [r.id for r in lines], steps=False)
            lines = [r for r in lines if counts[r.id].verdict(r.status) == _verdict(q["verdict"])]
            total = len(lines)
            lines = lines[offset : offset + limit]
        else:
            total = count_runs(conn, **filters)
            lines = run_lines(conn, limit=limit, offset=offset, **filters)
            counts = run_counts(conn, [r.id for r in lines], steps=False)
    rows = [{"run": r, "counts": counts[r.id], "verdict": counts[r.id].verdict(r.status)} for r in lines]
    html = run_rows_html(rows, columns=RUNS_COLUMNS)
    return render(request, "runs.html", rows=rows, rows_html=html, q=q, total=total, offset=offset, limit=limit)


def _verdict(text: str) -> str:
    return "" if text == "open" else text


def _run_or_404(store: Any, run_id: int) -> Any:
    try:
        return store.get_run(run_id)
    except StoreError:
        raise HTTPException(404, f"no run {run_id} in this database") from None


def measurement_rows(measurements: list[Any]) -> list[dict[str, Any]]:
    """Cells of the run page's measurement table: the verdict with the decision rule's qualifier
    (``fail (within uncertainty)``), and beside a value not measured, the reason it was refused."""
    rows = []
    for m in measurements:
        value, unc = format_measured(m.value if m.measured else None, m.uncertainty)
        qualifier = m.qualifier
        rows.append({
            "m": m, "value": value, "uncertainty": unc, "limits": format_limits(m.low, m.high),
            "verdict": f"{m.verdict} ({qualifier})" if qualifier else m.verdict,
            "reason": "" if m.measured else m.reason,
        })  # fmt: skip
    return rows


def run_page(request: Request) -> Response:
    """One run: provenance, steps, measurements with limits and verdicts, curves, live panel."""
    from sequencer.results.series import read_series
    from sequencer.web.live import live_snapshot

    store = _state(request).store
    run_id = int(request.path_params["run_id"])
    run = _run_or_404(store, run_id)
    with store.engine.connect() as conn:
        counts = run_counts(conn, [run_id])[run_id]
    steps = store.steps(run_id)
    measurements = store.measurements(run_id=run_id)
    curves = _curves(request, run, read_series) if run.status != "running" else []
    return render(
        request, "run.html", run=run, counts=counts, verdict=counts.verdict(run.status),
        steps=steps, rows=measurement_rows(measurements), curves=curves,
        safety=store.safety_events(run_id), notes=store.audit_trail(run_id),
        snapshot=live_snapshot(store, run_id, _state(request).outlines),
        certificates=certificates_of_run(_state(request).settings.certificates, run_id),
        certificate_folders=_state(request).settings.certificates,
    )  # fmt: skip


def _curves(request: Request, run: Any, read_series: Any) -> list[dict[str, Any]]:
    """The run's curves for the page; kept per completed run (a completed run never changes)."""
    cache = _state(request).curve_cache
    if run.status == "completed" and run.id in cache:
        return cache[run.id]
    curves: dict[str, dict[str, Any]] = {}
    for p in read_series(_state(request).store, run.id):
        key = f"ch{p.channel} {p.label}" if p.channel is not None else p.label
        curve = curves.setdefault(key, {"title": key, "series": p.series, "x_unit": p.x_unit,
                                        "y_unit": p.y_unit, "x": [], "y": []})  # fmt: skip
        curve["x"].append(p.x)
        curve["y"].append(p.y)
    found = list(curves.values())
    if run.status == "completed":
        while len(cache) >= CURVE_CACHE_RUNS:
            cache.pop(next(iter(cache)))  # the oldest entry: memory stays bounded
        cache[run.id] = found
    return found


def live_page(request: Request) -> Response:
    """Runs in progress on this database (any bench writing to it), each with its progress."""
    store = _state(request).store
    with store.engine.connect() as conn:
        lines = run_lines(conn, status="running")
    return render(request, "live.html", runs=lines)


def batches_page(request: Request) -> Response:
    store = _state(request).store
    with store.engine.connect() as conn:
        batches = batch_lines(conn)
    return render(request, "batches.html", batches=batches)


def batch_page(request: Request) -> Response:
    """A batch: yield, distributions per quantity, robust outliers, failed channels."""
    from sequencer.reports import batch_summary

    store = _state(request).store
    name = request.path_params["name"]
    summary = batch_summary(store, name)
    if not summary.runs:
        raise HTTPException(404, f"no batch {name!r} in this database")
    stats = [
        {"s": s, "median": format_number(s.median), "sigma": format_number(s.robust_sigma),
         "min": format_number(s.minimum), "max": format_number(s.maximum),
         "limits": format_limits(s.low, s.high),
         "values": [v for v in s.values if math.isfinite(v)]}
        for s in summary.stats
    ]  # fmt: skip
    return render(request, "batch.html", summary=summary, stats=stats)


def board_page(request: Request) -> Response:
    """A board's history: every run, newest first, and the quantities that can be trended."""
    store = _state(request).store
    serial = request.path_params["serial"]
    with store.engine.connect() as conn:
        lines = run_lines(conn, board=serial)
        counts = run_counts(conn, [r.id for r in lines], steps=False)
    if not lines:
        raise HTTPException(404, f"no runs of board {serial!r} in this database")
    quantities = sorted({(m.quantity, m.channel, m.output or "") for m in store.measurements(board=serial)},
                        key=lambda k: (k[0], k[1] or 0, k[2]))  # fmt: skip
    rows = [{"run": r, "counts": counts[r.id], "verdict": counts[r.id].verdict(r.status)} for r in lines]
    return render(request, "board.html", serial=serial, rows=rows, quantities=quantities)


def trend_page(request: Request) -> Response:
    """A quantity of a board over its completed runs, with the control band (interactive plot)."""
    from sequencer.reports import trend as compute_trend

    store = _state(request).store
    qp = request.query_params
    board, quantity = qp.get("board", ""), qp.get("quantity", "")
    if not board or not quantity:
        raise HTTPException(400, "trend needs board and quantity")
    channel = _int(qp.get("channel"), "channel", 0) or None
    output = qp.get("output") or None
    try:
        result = compute_trend(store, board, quantity, channel=channel, output=output)
    except ValueError as exc:
        raise HTTPException(400, str(exc)) from None
    plot = {
        "title": f"{quantity} · {board}" + (f" ch{result.channel}" if result.channel else "")
        + (f" {result.output}" if result.output else ""),
        "unit": result.unit,
        "points": [{"run": p.run_id, "at": p.started_at, "y": p.value, "err": p.uncertainty,
                    "verdict": p.verdict, "out": p.outside_band} for p in result.points],
        "band": [result.band_low, result.band_high], "centre": result.centre,
        "limits": [result.points[-1].low, result.points[-1].high] if result.points else [None, None],
    }  # fmt: skip
    return render(request, "trend.html", result=result, plot=plot)
