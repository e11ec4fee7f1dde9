"""One error envelope for the API, one error page for the inspection pages.

Every error the API returns is ``{"error": {"code": "...", "message": "..."}}`` with the HTTP status
below. ``code`` is the :class:`linkfold.errors.LinkfoldError` code where the failure is one of ours, or
one of the API's own codes (``unauthorized``, ``token_revoked``, ``insufficient_scope``,
``invalid_request``, ``batch_too_large``, ``body_too_large``, ``unsupported_media_type``, ``not_found``,
``method_not_allowed``, ``internal``). docs/api.md lists them.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel
from starlette.exceptions import HTTPException as StarletteHTTPException

from .. import errors as lf
from ..store.conflicts import as_write_conflict

log = logging.getLogger("linkfold")

API_PREFIX = "/v1"

# RFC 9110 §15.5 / §15.6: which status says what went wrong. A missing thing is 404, bad input 400
# (RFC 9110 §15.5.1), a registry that cannot answer right now 503 (§15.6.4), a held lock 409 (§15.5.10).
_STATUS_BY_ERROR: tuple[tuple[type[lf.LinkfoldError], int], ...] = (
    (lf.NotFound, 404),
    (lf.InvalidURL, 400),
    (lf.InputError, 400),
    (lf.RulesError, 400),
    (lf.LockHeld, 409),
    (lf.DatabaseError, 503),
    (lf.ConfigError, 500),
    (lf.NetworkError, 502),
)

_CODE_BY_STATUS = {400: "invalid_request", 401: "unauthorized", 403: "forbidden", 404: "not_found",
                   405: "method_not_allowed", 406: "not_acceptable", 413: "body_too_large",
                   415: "unsupported_media_type", 422: "invalid_request"}


class ErrorBody(BaseModel):
    code: str
    message: str


class ErrorEnvelope(BaseModel):
    """The body of every error response."""

    error: ErrorBody


class ApiError(Exception):
    """An error the API raises itself (auth, limits, media types), with its status and code."""

    def __init__(self, status: int, code: str, message: str, *, headers: dict[str, str] | None = None) -> None:
        super().__init__(message)
        self.status = status
        self.code = code
        self.message = message
        self.headers = headers or {}


def status_of(exc: lf.LinkfoldError) -> int:
    for kind, status in _STATUS_BY_ERROR:
        if isinstance(exc, kind):
            return status
    return 500


def envelope(code: str, message: str) -> dict[str, Any]:
    return {"error": {"code": code, "message": message}}


def error_responses(*statuses: int) -> dict[int | str, dict[str, Any]]:
    """OpenAPI ``responses`` entries for the error statuses a route can answer with."""
    return {status: {"model": ErrorEnvelope, "description": _DESCRIPTIONS.get(status, "error")}
            for status in statuses}


_DESCRIPTIONS = {400: "Bad input", 401: "No token, or an unknown or revoked one (RFC 6750 §3.1)",
                 403: "The token's scope does not allow this (RFC 6750 §3.1)", 404: "Not found",
                 413: "Request body or batch too large", 415: "Unsupported request media type",
                 422: "Invalid parameters", 503: "The registry cannot answer now"}


def is_page_request(request: Request) -> bool:
    return not request.url.path.startswith(API_PREFIX)


# Renders an error for a page request: (request, status, code, message, headers=) -> Response.
PageRenderer = Callable[..., Response]


def _respond(request: Request, status: int, code: str, message: str,
             headers: dict[str, str] | None = None) -> Response:
    render_page: PageRenderer | None = getattr(request.app.state, "render_error_page", None)
    if render_page is not None and is_page_request(request):
        return render_page(request, status, code, message, headers=headers)
    return JSONResponse(envelope(code, message), status_code=status, headers=headers)


def _validation_message(exc: RequestValidationError) -> str:
    parts = []
    for err in exc.errors()[:5]:
        where = ".".join(str(p) for p in err.get("loc", ()) if p != "body") or "request"
        parts.append(f"{where}: {err.get('msg', 'invalid')}")
    return "; ".join(parts) or "invalid request"


def install_handlers(app: FastAPI, *, render_page: PageRenderer | None = None) -> None:
    """One error envelope for the API; ``render_page`` draws the error page for page requests (the
    pages module hands it in, so this module needs no import of the pages)."""
    app.state.render_error_page = render_page

    @app.exception_handler(ApiError)
    async def _api_error(request: Request, exc: ApiError) -> Response:
        return _respond(request, exc.status, exc.code, exc.message, exc.headers)

    @app.exception_handler(lf.LinkfoldError)
    async def _linkfold_error(request: Request, exc: lf.LinkfoldError) -> Response:
        status = status_of(exc)
        if status >= 500:
            log.error("%s %s failed: %s", request.method, request.url.path, exc)
        return _respond(request, status, exc.code, str(exc))

    @app.exception_handler(RequestValidationError)
    async def _invalid(request: Request, exc: RequestValidationError) -> Response:
        # A body that is not JSON at all is malformed syntax, 400 (RFC 9110 §15.5.1); JSON of the wrong
        # shape is content the server cannot process, 422 (§15.5.21).
        if any(err.get("type") == "json_invalid" for err in exc.errors()):
            return _respond(request, 400, "invalid_request", "the body is not valid JSON: "
                            + _validation_message(exc))
        return _respond(request, 422, "invalid_request", _validation_message(exc))

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException) -> Response:
        code = _CODE_BY_STATUS.get(exc.status_code, "error")
        message = exc.detail if isinstance(exc.detail, str) else code
        if exc.status_code == 404 and message == "Not Found":
            message = f"no such path: {request.url.path}"
        return _respond(request, exc.status_code, code, message, dict(exc.headers or {}))

    @app.exception_handler(Exception)
    async def _bug(request: Request, exc: Exception) -> Response:
        conflict = as_write_conflict(exc)
        if conflict is not None:  # a concurrent writer's conflict is a known condition (store/conflicts.py)
            return await _linkfold_error(request, conflict)
        # A bug, not the caller's fault: log the traceback here, give the caller no internals.
        log.exception("internal error on %s %s", request.method, request.url.path)
        return _respond(request, 500, "internal", "internal error (logged on the server)")
