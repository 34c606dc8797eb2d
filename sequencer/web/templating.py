"""Jinja2 filters of the web view: times, durations, numbers, query strings."""

from __future__ import annotations

import json
import math
from datetime import datetime
from typing import Any
from urllib.parse import quote, urlencode

from jinja2 import Environment
from markupsafe import Markup

from sequencer.reports.quantities import format_number


def when(value: datetime | None) -> str:
    """UTC time to the second, ``2026-04-02 09:31:05Z``; "—" if None."""
    return "—" if value is None else value.strftime("%Y-%m-%d %H:%M:%SZ")


def duration(seconds: float | None) -> str:
    """``1 h 05 min``, ``4 min 12 s``, ``37 s``; "—" if unknown."""
    if seconds is None or not math.isfinite(seconds):
        return "—"
    s = round(seconds)
    if s >= 3600:
        return f"{s // 3600} h {s % 3600 // 60:02d} min"
    if s >= 60:
        return f"{s // 60} min {s % 60:02d} s"
    return f"{s} s"


def run_duration(run: Any) -> str:
    end = getattr(run, "ended_at", None)
    return "—" if end is None else duration((end - run.started_at).total_seconds())


def number(value: float | None) -> str:
    return format_number(value)


def query(params: dict[str, Any], **changes: Any) -> str:
    """A query string of ``params`` with ``changes`` (empty values dropped)."""
    merged = {**params, **changes}
    return urlencode({k: v for k, v in merged.items() if v not in (None, "")})


def as_json(value: Any) -> Markup:
    """JSON for a ``<script type="application/json">`` block (``</`` escaped)."""
    text = json.dumps(value, separators=(",", ":"), allow_nan=False, default=str)
    return Markup(text.replace("</", "<\\/"))


def install_filters(env: Environment) -> None:
    env.filters.update(
        when=when, duration=duration, run_duration=run_duration, number=number, query=query,
        as_json=as_json, path=lambda v: quote(str(v), safe=""),
    )  # fmt: skip
