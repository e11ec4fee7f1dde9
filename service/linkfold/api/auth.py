"""Token checks for every route: who may read, who may write, and a log line for every refusal.

The rules (docs/api.md, "Access"), following RFC 6750 §3.1:

* no token on a read, unless ``open_reads`` is set → 401 ``unauthorized`` (``WWW-Authenticate: Bearer``
  without an error code, RFC 6750 §3.1: a request that carries no credentials gets none);
* a token that is not one of ours → 401 ``unauthorized``, ``error="invalid_token"``;
* a revoked token → 401 ``token_revoked``, ``error="invalid_token"`` (RFC 6750 §3.1 names revoked
  tokens as ``invalid_token``, answered with 401);
* a read token on a write → 403 ``insufficient_scope``, ``error="insufficient_scope"`` with the scope
  needed (RFC 6750 §3.1).

A token presented on a read is checked even when reads are open, so a client learns early that its
token is wrong. The API reads the token from ``Authorization: Bearer`` only (RFC 6750 §2.1); never from the
query string, which ends up in access logs (RFC 6750 §2.3 discourages it). The inspection pages also
accept the token from an HttpOnly, SameSite=Strict cookie that their token form sets.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

from fastapi import Request

from ..store.tokens import Scope, TokenState, check_token
from .errors import ApiError, is_page_request

log = logging.getLogger("linkfold")

COOKIE_NAME = "linkfold_token"
REALM = "linkfold"


@dataclass(frozen=True)
class Access:
    """Who is asking: a token (id and scope) or, on open reads, nobody in particular."""

    token_id: int | None
    scope: Scope | None

    @property
    def can_write(self) -> bool:
        return self.scope is Scope.WRITE


def _presented(request: Request) -> str | None:
    header = request.headers.get("authorization")
    if header is not None:
        scheme, _, value = header.partition(" ")
        # RFC 6750 §2.1: the scheme is "Bearer"; RFC 9110 §11.1: auth schemes are case-insensitive.
        if scheme.lower() != "bearer" or not value.strip():
            return ""  # present but not a bearer token: treated as an unknown token, not as none
        return value.strip()
    if is_page_request(request):
        cookie = request.cookies.get(COOKIE_NAME)
        if cookie:
            return cookie
    return None


def _refuse(request: Request, status: int, code: str, message: str, header: str, why: str,
            token_id: int | None = None, *, log_it: bool = True) -> ApiError:
    # The log names the token by its id (or says it is unknown); the token text itself never appears.
    if log_it:
        client = request.client.host if request.client else "-"
        who = f"token id {token_id}" if token_id is not None else "no known token"
        log.warning("api access refused: %s %s from %s: %s (%s)", request.method, request.url.path, client,
                    why, who)
    return ApiError(status, code, message, headers={"WWW-Authenticate": header})


def authorise(request: Request, needed: Scope, *, log_refusal: bool = True) -> Access:
    """The caller's access for a route that needs ``needed``; raises :class:`ApiError` to refuse.

    ``log_refusal=False`` is for asking rather than acting (may this page show its decision buttons?):
    a page served under open reads must not log a refusal for a write nobody attempted.
    """
    state = request.app.state.linkfold
    secret = _presented(request)
    if secret is None:
        if needed is Scope.READ and state.settings.open_reads:
            return Access(None, None)
        raise _refuse(request, 401, "unauthorized", f"this needs a {needed.value} token: send "
                      "Authorization: Bearer <token>", f'Bearer realm="{REALM}"', "no token", log_it=log_refusal)
    check = check_token(state.engine, secret) if secret else None
    if check is None or check.state is TokenState.UNKNOWN:
        raise _refuse(request, 401, "unauthorized", "the token is not valid",
                      f'Bearer realm="{REALM}", error="invalid_token"', "unknown token", log_it=log_refusal)
    if check.state is TokenState.REVOKED:
        raise _refuse(request, 401, "token_revoked", "the token has been revoked",
                      f'Bearer realm="{REALM}", error="invalid_token"', "revoked token", check.token_id, log_it=log_refusal)
    assert check.scope is not None
    if not check.scope.allows(needed):
        raise _refuse(request, 403, "insufficient_scope", f"this needs a {needed.value} token; this one "
                      f"is a {check.scope.value} token",
                      f'Bearer realm="{REALM}", error="insufficient_scope", scope="{needed.value}"',
                      f"{check.scope.value} token on a {needed.value} route", check.token_id, log_it=log_refusal)
    return Access(check.token_id, check.scope)


def read_access(request: Request) -> Access:
    return authorise(request, Scope.READ)


def write_access(request: Request) -> Access:
    return authorise(request, Scope.WRITE)


def may_write(request: Request) -> bool:
    """Whether the caller holds a write token, asked without logging a refusal (for what a page shows)."""
    try:
        return authorise(request, Scope.WRITE, log_refusal=False).can_write
    except ApiError:
        return False


def units_access(request: Request) -> Access:
    """Unit-level rows: only a ``units`` token, never open reads (the rows are personal data)."""
    return authorise(request, Scope.UNITS)
