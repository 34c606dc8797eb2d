"""The rows of the run listings as HTML, built in Python.

A page of 1,000 runs is the web view's largest (issue 20: under 200 ms); through Jinja2 each of its
~16 cells a row costs an attribute lookup and an escape call, about half the page's time.  Here a
row is one f-string over escaped texts.  The template keeps the table's head and the layout.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from html import escape
from typing import Any
from urllib.parse import quote

from markupsafe import Markup

from sequencer.web.templating import run_duration, when


def _link(prefix: str, text: str) -> str:
    return f'<a href="{prefix}{escape(quote(text, safe=""))}">{escape(text)}</a>' if text else ""


def run_rows_html(rows: Iterable[Mapping[str, Any]], *, columns: tuple[str, ...]) -> Markup:
    """``<tr>`` elements for ``rows`` (``run``, ``counts``, ``verdict``), cells in ``columns`` order
    out of: run, board, batch, procedure, operator, status, verdict, values, started, took."""
    out: list[str] = []
    for row in rows:
        r, c, verdict = row["run"], row["counts"], row["verdict"]
        failed = f' <span class="fail">({c.failed} out)</span>' if c.failed else ""
        cells = {
            "run": f'<a href="/runs/{int(r.id)}">{int(r.id)}</a>',
            "board": _link("/boards/", r.board),
            "batch": _link("/batches/", r.batch),
            "procedure": f"{escape(r.procedure)} <small>{escape(r.procedure_version)}</small>",
            "operator": escape(r.operator),
            "status": f'<td class="status {escape(r.status)}">{escape(r.status)}',
            "verdict": f'<td class="verdict {escape(verdict or "open")}">{escape(verdict or "·")}',
            "values": f"{c.measurements}{failed}",
            "started": when(r.started_at),
            "took": run_duration(r),
        }
        tds = "".join(v if v.startswith("<td") else f"<td>{v}" for v in (cells[k] for k in columns))
        out.append(f'<tr class="run-row">{tds}</tr>')
    return Markup("\n".join(out))
