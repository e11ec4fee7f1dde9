"""``linkfold serve`` and ``linkfold tokens create|list|revoke``."""

from __future__ import annotations

import ipaddress
import logging
from collections.abc import Mapping
from typing import Any

import click

from ..store import tokens as tok
from ._common import Context, common_options, format_option, pass_ctx, to_json, write_rows

log = logging.getLogger("linkfold")


def _is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


@click.command("serve")
@click.option("--host", default="127.0.0.1", show_default=True, metavar="ADDRESS",
              help="Address to listen on. Anything but loopback exposes personal data: put a TLS proxy "
                   "in front and keep reads closed.")
@click.option("--port", type=click.IntRange(0, 65535), default=8750, show_default=True, metavar="PORT",
              help="Port to listen on.")
@click.option("--access-log/--no-access-log", default=False, show_default=True,
              help="One line per request on stderr (paths and statuses; never tokens or bodies).")
@common_options
@pass_ctx
def serve_command(obj: Context, host: str, port: int, access_log: bool) -> None:
    """Serve the HTTP API (paths under /v1/) and the inspection pages, until stopped with Ctrl-C.

    The OpenAPI document is at /v1/openapi.json (load it into any OpenAPI viewer; the server ships no
    viewer, which would load scripts from elsewhere); /v1/health answers without a token; the inspection
    pages start at / (/lookup, /clusters, /charts).
    Reads need a read token unless LINKFOLD_OPEN_READS=true; writes always need a write token (see
    linkfold tokens create). docs/api.md describes every endpoint.

    \b
    Example:
      linkfold tokens create --scope read --note "survey linkage project"
      linkfold --db postgresql+psycopg://lab@dbhost/linkfold serve --port 8750
    """
    import uvicorn

    from ..api import create_app

    app = create_app(obj.settings, engine=obj.engine())
    if not _is_loopback(host):
        log.warning("serving on %s, not loopback: the registry holds personal data; use a TLS proxy", host)
    obj.message(f"linkfold API on http://{host}:{port}/v1/ (pages at http://{host}:{port}/); "
                f"reads {'open' if obj.settings.open_reads else 'need a read token'}")
    uvicorn.run(app, host=host, port=port, access_log=access_log, log_level="warning",
                server_header=False, proxy_headers=False)


@click.group("tokens")
def tokens_group() -> None:
    """Create, list and revoke the API's access tokens (stored only as SHA-256 hashes).

    \b
    Example:
      linkfold tokens create --scope write --note "coder: cluster review"
      linkfold tokens list
      linkfold tokens revoke 3
    """


@tokens_group.command("create")
@click.option("--scope", type=click.Choice([s.value for s in tok.Scope]), required=True,
              help="read: answers reads; write: reads and manual decisions; units: reads and unit-level "
                   "exposure rows (personal data; neither of the others includes them).")
@click.option("--note", required=True, metavar="TEXT", help="Who or what the token is for (kept with it).")
@common_options
@pass_ctx
def tokens_create(obj: Context, scope: str, note: str) -> None:
    """Create a token and print it once, as JSON on stdout (id, scope, note, created_at, token).

    \b
    Example:
      linkfold tokens create --scope read --note "panel linkage notebook" > token.json
    """
    new = tok.create_token(obj.engine(), scope=scope, note=note)
    click.echo(to_json({"id": new.id, "scope": new.scope.value, "note": new.note,
                        "created_at": new.created_at, "token": new.secret}))
    obj.message(f"token {new.id} ({new.scope.value}) created; it is shown once and only its hash is kept: "
                "store it now")


@tokens_group.command("list")
@click.option("--active", is_flag=True, help="Only tokens that are not revoked.")
@format_option()
@common_options
@pass_ctx
def tokens_list(obj: Context, active: bool, fmt: str) -> None:
    """List tokens: id, scope, note, created, last used, revoked. Never the token itself.

    \b
    Example:
      linkfold tokens list --active --format jsonl
    """
    with obj.engine().connect() as conn:
        rows: list[Mapping[str, Any]] = list(tok.list_tokens(conn, include_revoked=not active))
    if fmt != "table" or rows:
        write_rows(fmt, rows, ["id", "scope", "note", "created_at", "last_used_at", "revoked_at"])
    else:
        obj.message("no tokens: create one with linkfold tokens create --scope read --note TEXT")


@tokens_group.command("revoke")
@click.argument("token_id", type=click.IntRange(min=1), metavar="ID")
@common_options
@pass_ctx
def tokens_revoke(obj: Context, token_id: int) -> None:
    """Revoke a token at once: requests with it get 401 from then on. The row is kept.

    \b
    Example:
      linkfold tokens revoke 3
    """
    row = tok.revoke_token(obj.engine(), token_id)
    obj.message(f"token {row['id']} ({row['scope']}, {row['note']!r}) revoked at {row['revoked_at']:%Y-%m-%d %H:%M:%S} UTC")


def register(cli: click.Group) -> None:
    cli.add_command(serve_command)
    cli.add_command(tokens_group)
