"""The request-size limit, enforced before a body is held in memory.

A declared ``Content-Length`` over the limit is refused at once, without reading the body (RFC 9110
§15.5.14, 413 Content Too Large). A body sent without a length (chunked) is counted as it arrives and
refused as soon as it passes the limit, so a client cannot stream an endless body into the server.
"""

from __future__ import annotations

import json
from typing import Any

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from .errors import ApiError, envelope

BODY_TOO_LARGE = "body_too_large"


def too_large(limit: int) -> ApiError:
    return ApiError(413, BODY_TOO_LARGE, f"the request body is larger than {limit:,} bytes "
                    "(setting api_max_body_bytes); split it")


class BodyLimit:
    """ASGI middleware: refuse request bodies larger than ``limit`` bytes with 413 and the envelope."""

    def __init__(self, app: ASGIApp, *, limit: int) -> None:
        self.app = app
        self.limit = limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = _content_length(scope)
        if declared is not None and declared > self.limit:
            await _send_413(send, self.limit)
            return
        seen = 0

        async def counted() -> Message:
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    # Raised inside the app's call, so the app's own handler turns it into the envelope.
                    raise too_large(self.limit)
            return message

        await self.app(scope, counted, send)


def _content_length(scope: Scope) -> int | None:
    for name, value in scope.get("headers", ()):
        if name == b"content-length":
            try:
                return int(value)
            except ValueError:
                return None
    return None


async def _send_413(send: Send, limit: int) -> None:
    err = too_large(limit)
    body = json.dumps(envelope(err.code, err.message)).encode("utf-8")
    headers: list[Any] = [(b"content-type", b"application/json"), (b"content-length", str(len(body)).encode()),
                          (b"connection", b"close")]
    await send({"type": "http.response.start", "status": 413, "headers": headers})
    await send({"type": "http.response.body", "body": body})
