"""``benchwright serve``: the local web view of the results database (attached by ``cli.py``)."""

from __future__ import annotations

from pathlib import Path

import click

from sequencer.cli_common import db_option, env, handles_errors
from sequencer.web.settings import DEFAULT_HOST, DEFAULT_PORT, is_loopback, new_token


@click.command()
@db_option
@click.option("--host", default=DEFAULT_HOST, show_default=True,
              help="Address to listen on; any address but loopback requires the access token printed at start.")
@click.option("--port", default=DEFAULT_PORT, show_default=True, type=click.IntRange(0, 65535),
              help="TCP port (0: any free port, printed at start).")
@click.option("--certificates", "certificate_dirs", multiple=True, type=click.Path(file_okay=False, exists=True),
              help="Folder where `benchwright certify` wrote certificates: listed per run and verified (repeatable).")
@handles_errors
def serve(db: str | None, host: str, port: int, certificate_dirs: tuple[str, ...]) -> None:
    """Local web view: runs, live progress, batches, boards, trends (read-only).

    Runs in progress on the same database, from any bench writing to it, fill the live view as
    their steps are stored.  Stop with Ctrl-C.
    """
    import socket

    from sequencer import compose
    from sequencer.errors import MissingExtra
    from sequencer.web.app import create_app
    from sequencer.web.settings import ServeSettings

    try:
        import uvicorn
    except ImportError as exc:
        raise MissingExtra("uvicorn", "web", "the web view") from exc
    token = None if is_loopback(host) else new_token()
    settings = ServeSettings(db_url=db or "", host=host, port=port, token=token,
                             certificates=tuple(Path(d) for d in certificate_dirs))
    with compose.open_existing_store(db, env()) as store:
        app = create_app(settings, store)
        family = socket.AF_INET6 if ":" in host else socket.AF_INET
        sock = socket.socket(family, socket.SOCK_STREAM)
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            sock.bind((host, port))
        except OSError as exc:
            sock.close()
            raise click.UsageError(f"cannot listen on {host}:{port}: {exc.strerror}") from None
        sock.listen(128)
        bound = sock.getsockname()[1]
        shown = f"[{host}]" if ":" in host else host
        url = f"http://{shown}:{bound}/"
        where = store.engine.url.render_as_string(hide_password=True)
        click.echo(f"benchwright: serving {where} read-only at {url}", err=True)
        if token:
            click.echo(f"access token (needed off loopback): {token}", err=True)
            click.echo(f"open: {url}?token={token}", err=True)
        config = uvicorn.Config(app, log_level="warning", access_log=False, lifespan="off")
        uvicorn.Server(config).run(sockets=[sock])

