"""The ASGI application of ``benchwright serve``: routes, the access-token check, the live streams.

Read-only over the store.  Live updates are server-sent events: the server polls the store every
``poll_s`` and sends a run's snapshot (``live.py``) whenever something new was stored, so a run
written by any bench on the same database fills the page.  A stream ends by itself when its run
ends or after ``stream_s`` (the browser's EventSource then reconnects).
"""

from __future__ import annotations

import asyncio
import json
import secrets
import time
from collections.abc import AsyncIterator
from http.cookies import SimpleCookie
from pathlib import Path
from typing import Any
from urllib.parse import parse_qsl, urlencode

from sequencer.errors import MissingExtra, StoreError
from sequencer.web.settings import ServeSettings

HERE = Path(__file__).resolve().parent
COOKIE = "benchwright_token"


def _starlette() -> Any:
    try:
        import jinja2  # noqa: F401
        import starlette  # noqa: F401
    except ImportError as exc:
        raise MissingExtra(exc.name or "starlette", "web", "the web view") from exc


class TokenGate:
    """ASGI middleware: every request must carry the token (query ``token``, the cookie set after
    it, or ``Authorization: Bearer``); a valid query token is moved into a cookie by a redirect."""

    def __init__(self, app: Any, token: str) -> None:
        self.app = app
        self.token = token

    def _ok(self, given: str | None) -> bool:
        return bool(given) and secrets.compare_digest(str(given), self.token)

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        from starlette.requests import Request
        from starlette.responses import PlainTextResponse, RedirectResponse

        request = Request(scope)
        auth = request.headers.get("authorization", "")
        bearer = auth[7:] if auth.lower().startswith("bearer ") else None
        cookie = SimpleCookie(request.headers.get("cookie", "")).get(COOKIE)
        if self._ok(bearer) or (cookie is not None and self._ok(cookie.value)):
            await self.app(scope, receive, send)
            return
        if self._ok(request.query_params.get("token")):
            rest = [(k, v) for k, v in parse_qsl(scope.get("query_string", b"").decode()) if k != "token"]
            target = request.url.path + (f"?{urlencode(rest)}" if rest else "")
            response = RedirectResponse(target, status_code=303)
            response.set_cookie(COOKIE, self.token, httponly=True, samesite="strict")
            await response(scope, receive, send)
            return
        denied = PlainTextResponse(
            "benchwright: this view needs the access token printed by `benchwright serve`\n", 401
        )
        await denied(scope, receive, send)


def _sse(data: Any, event: str = "snapshot") -> bytes:
    return f"event: {event}\ndata: {json.dumps(data, separators=(',', ':'))}\n\n".encode()


async def _run_stream(request: Any, run_id: int) -> AsyncIterator[bytes]:
    """Snapshots of one run whenever it changes; ends when the run is no longer running."""
    from sequencer.web.live import live_snapshot, signature

    state = request.app.state
    settings: ServeSettings = state.settings
    deadline = time.monotonic() + settings.stream_s
    last: tuple[Any, ...] | None = None
    idle = 0.0
    while time.monotonic() < deadline and not await request.is_disconnected():
        snap = await asyncio.to_thread(live_snapshot, state.store, run_id, state.outlines)
        if signature(snap) != last:
            last = signature(snap)
            idle = 0.0
            yield _sse(snap)
        elif idle >= 10.0:
            idle = 0.0
            yield b": still here\n\n"  # a comment keeps proxies and the browser from timing out
        if snap["status"] != "running":
            yield _sse({"status": snap["status"]}, event="finished")
            return
        await asyncio.sleep(settings.poll_s)
        idle += settings.poll_s


async def _live_stream(request: Any) -> AsyncIterator[bytes]:
    """The set of running runs with their progress, whenever it changes."""
    from sequencer.store.overview import run_lines
    from sequencer.web.live import live_snapshot

    state = request.app.state
    settings: ServeSettings = state.settings
    deadline = time.monotonic() + settings.stream_s
    last: Any = None

    def gather() -> list[dict[str, Any]]:
        with state.store.engine.connect() as conn:
            ids = [r.id for r in run_lines(conn, status="running")]
        out = []
        for i in ids:
            s = live_snapshot(state.store, i, state.outlines, detail=False)
            out.append({k: s[k] for k in ("run_id", "board", "procedure", "status", "done", "total",
                                          "percent", "eta_s", "current_step", "failed", "measurements", "quiet_s")})  # fmt: skip
        return out

    while time.monotonic() < deadline and not await request.is_disconnected():
        runs = await asyncio.to_thread(gather)
        if runs != last:
            last = runs
            yield _sse(runs, event="runs")
        await asyncio.sleep(settings.poll_s)


def create_app(settings: ServeSettings, store: Any) -> Any:
    """The Starlette application over ``store`` (opened and closed by the caller)."""
    _starlette()
    from jinja2 import Environment, FileSystemLoader, select_autoescape
    from starlette.applications import Starlette
    from starlette.exceptions import HTTPException
    from starlette.requests import Request
    from starlette.responses import (
        FileResponse,
        HTMLResponse,
        JSONResponse,
        Response,
        StreamingResponse,
    )
    from starlette.routing import Mount, Route
    from starlette.staticfiles import StaticFiles
    from starlette.templating import Jinja2Templates

    from sequencer.web import pages
    from sequencer.web.certificates import CertificateChecks, certificates_of_run, find_certificate
    from sequencer.web.live import Outlines, live_snapshot
    from sequencer.web.templating import install_filters

    env = Environment(loader=FileSystemLoader(HERE / "templates"), autoescape=select_autoescape())
    install_filters(env)

    def run_json(request: Request) -> Response:
        run_id = int(request.path_params["run_id"])
        pages._run_or_404(request.app.state.store, run_id)
        return JSONResponse(live_snapshot(request.app.state.store, run_id, request.app.state.outlines))

    async def run_events(request: Request) -> Response:
        run_id = int(request.path_params["run_id"])
        await asyncio.to_thread(pages._run_or_404, request.app.state.store, run_id)
        return StreamingResponse(_run_stream(request, run_id), media_type="text/event-stream",
                                 headers={"Cache-Control": "no-store"})  # fmt: skip

    def run_certificates(request: Request) -> Response:
        state = request.app.state
        run_id = int(request.path_params["run_id"])
        pages._run_or_404(state.store, run_id)
        files = certificates_of_run(state.settings.certificates, run_id)
        checks = [state.certificate_checks.check(state.store, f) for f in files]
        return JSONResponse([{"name": c.name, "ok": c.ok, "number": c.number,
                              "differences": list(c.differences)} for c in checks])  # fmt: skip

    def certificate_file(request: Request) -> Response:
        path = find_certificate(request.app.state.settings.certificates, request.path_params["name"])
        if path is None:
            raise HTTPException(404, "no such certificate in the certificate folders")
        media = "application/pdf" if path.suffix.lower() == ".pdf" else "text/html"
        return FileResponse(path, media_type=media)

    async def live_events(request: Request) -> Response:
        return StreamingResponse(_live_stream(request), media_type="text/event-stream",
                                 headers={"Cache-Control": "no-store"})  # fmt: skip

    def error_page(status: int, detail: str) -> Response:
        html = env.get_template("error.html").render(
            database=app.state.database, status=status, detail=detail, page="error"
        )
        return HTMLResponse(html, status_code=status)

    async def http_error(request: Request, exc: Exception) -> Response:
        assert isinstance(exc, HTTPException)
        return error_page(exc.status_code, str(exc.detail))

    async def store_error(request: Request, exc: Exception) -> Response:
        return error_page(503, f"the database cannot be read: {exc}")

    routes = [
        Route("/", pages.runs_page, name="runs"),
        Route("/runs/{run_id:int}", pages.run_page, name="run"),
        Route("/runs/{run_id:int}/live.json", run_json, name="run_json"),
        Route("/runs/{run_id:int}/events", run_events, name="run_events"),
        Route("/runs/{run_id:int}/certificates", run_certificates, name="run_certificates"),
        Route("/certificates/{name}", certificate_file, name="certificate"),
        Route("/live", pages.live_page, name="live"),
        Route("/live/events", live_events, name="live_events"),
        Route("/batches", pages.batches_page, name="batches"),
        Route("/batches/{name:path}", pages.batch_page, name="batch"),
        Route("/boards/{serial:path}", pages.board_page, name="board"),
        Route("/trend", pages.trend_page, name="trend"),
        Route("/favicon.ico", lambda request: Response(status_code=204)),  # none: no console error
        Mount("/static", StaticFiles(directory=HERE / "static"), name="static"),
    ]

    app = Starlette(routes=routes,
                    exception_handlers={HTTPException: http_error, StoreError: store_error})
    app.state.settings = settings
    app.state.store = store
    app.state.outlines = Outlines()
    app.state.certificate_checks = CertificateChecks()
    app.state.curve_cache = {}  # completed run id -> its curves (web/pages.py)
    app.state.templates = Jinja2Templates(env=env)
    app.state.database = store.engine.url.render_as_string(hide_password=True)
    if settings.token is not None:
        return TokenGate(app, settings.token)
    return app
