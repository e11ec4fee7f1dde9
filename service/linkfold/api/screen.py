"""Checks every request passes before a route sees it, and headers every response carries.

* NUL characters are refused in the query (400 ``invalid_request``) and the path (404 ``not_found``):
  PostgreSQL text cannot hold them (psycopg raises a DataError, which was a 500), and no URL, key, ID or
  name of ours has one. Both backends answer alike.
* A form post to the inspection pages must come from this server's own pages (:func:`same_origin`). The
  token cookie is SameSite=Strict, but a site is not an origin: a page on another port of the same host is
  the same site (RFC 6265bis §5.2) and the browser sends the cookie with its post. The ``Origin`` header,
  which browsers send with every cross-origin POST (the Fetch standard; ``null`` from an opaque origin), or
  else the ``Referer``, must name this server's host and port.
* Every response says ``X-Content-Type-Options: nosniff``; pages also carry a Content-Security-Policy that
  allows no script at all (the pages have none), no framing (so the decision buttons cannot be overlaid
  by another site), and form posts to this origin only.
"""

from __future__ import annotations

import logging
from urllib.parse import urlsplit

from fastapi import Request
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from .errors import API_PREFIX, ApiError

log = logging.getLogger("linkfold")

# Inline style is allowed: the network page draws its SVG into the page with a <style> element of its own
# (every label escaped, api/network_svg.py); style cannot run anything, script-src 'none' is what counts.
PAGE_POLICY = ("default-src 'none'; style-src 'self' 'unsafe-inline'; img-src 'self'; form-action 'self'; "
               "frame-ancestors 'none'; base-uri 'none'; script-src 'none'")
# The charts are SVG documents with their own <style> element (every label in them is escaped, api/charts.py):
# opened on their own they keep it; nothing else is allowed.
SVG_POLICY = "default-src 'none'; style-src 'unsafe-inline'; frame-ancestors 'none'; script-src 'none'"


def no_nul(request: Request) -> None:
    """A dependency of every route: refuse NUL in the path (404: no name of ours holds one, so the path
    names nothing) or the query string (400)."""
    if "\x00" in request.url.path:
        raise ApiError(404, "not_found", "no such path: names, keys and IDs never hold NUL characters (%00)")
    if any("\x00" in k or "\x00" in v for k, v in request.query_params.multi_items()):
        raise ApiError(400, "invalid_request", "NUL characters (%00) are not allowed in a query")


def refuse_nul(**fields: str | None) -> None:
    """Refuse form or body fields holding NUL, naming the first."""
    for name, value in fields.items():
        if value is not None and "\x00" in value:
            raise ApiError(400, "invalid_request", f"{name}: NUL characters are not allowed")


def json_media(request: Request) -> None:
    """A dependency of routes with a JSON body: any other media type, or none, is 415 (RFC 9110 §15.5.16)."""
    media = request.headers.get("content-type", "").split(";", 1)[0].strip().lower()
    if media != "application/json" and not (media.startswith("application/") and media.endswith("+json")):
        raise ApiError(415, "unsupported_media_type", "send the body as application/json, not "
                       + (media or "without a Content-Type"))


_DEFAULT_PORTS = {"http": 80, "https": 443}


def _is_ours(source: str, host: str, scheme: str) -> bool:
    """Whether ``source`` (an Origin or Referer) names the host and port the request was sent to."""
    if source == "null":
        return False  # an opaque origin (a sandboxed frame, a page that sends no referrer)
    try:
        theirs = urlsplit(source)
        ours = urlsplit("//" + host)
        their_port, our_port = theirs.port, ours.port
    except ValueError:
        return False
    if theirs.scheme not in _DEFAULT_PORTS or not theirs.hostname or theirs.hostname != ours.hostname:
        return False
    if their_port is None and our_port is None:
        return True  # each on its scheme's default port: the proxy case (https outside, http inside)
    return (their_port or _DEFAULT_PORTS[theirs.scheme]) == (our_port or _DEFAULT_PORTS.get(scheme, 80))


def same_origin(request: Request) -> None:
    """A dependency of the page routes that take a form post: refuse one another origin made.

    The scheme is not compared: behind a proxy that ends TLS the browser's origin is https and the server
    sees http on the same host. Host and port are what tell another origin on the same machine apart.
    With neither ``Origin`` nor ``Referer`` the post is not a browser's from another origin (browsers send
    ``Origin`` with every cross-origin POST) and passes.
    """
    origin = request.headers.get("origin")
    source = origin if origin is not None else request.headers.get("referer")
    if source is None or _is_ours(source, request.headers.get("host", ""), request.url.scheme):
        return
    client = request.client.host if request.client else "-"
    which = "Origin" if origin is not None else "Referer"
    if origin is None:
        # Only the Referer's origin: its path and query may hold what the reviewer looked up.
        try:
            parts = urlsplit(source)
            source = f"{parts.scheme}://{parts.netloc}"
        except ValueError:
            source = "(unreadable)"
    log.warning("api access refused: %s %s from %s: a form post from another origin (%s: %s)",
                request.method, request.url.path, client, which, source[:200])
    raise ApiError(403, "forbidden", "this form was sent from another origin; open the page on this server "
                   "and send the form from there")


class SecurityHeaders:
    """ASGI middleware: ``nosniff`` on every response, the page policy on pages (not on the API's JSON)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path = scope.get("path", "")
        page = not path.startswith(API_PREFIX)
        policy = (SVG_POLICY if path.endswith(".svg") else PAGE_POLICY).encode()

        async def headed(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = list(message.get("headers", ()))
                headers.append((b"x-content-type-options", b"nosniff"))
                if page:
                    headers.append((b"content-security-policy", policy))
                    headers.append((b"referrer-policy", b"same-origin"))
                message = {**message, "headers": headers}
            await send(message)

        await self.app(scope, receive, headed)


__all__ = ["PAGE_POLICY", "SVG_POLICY", "SecurityHeaders", "json_media", "no_nul", "refuse_nul", "same_origin"]
