"""API tokens: created once and shown once, stored only as SHA-256 hashes, checked on every request.

A token is ``lf_`` followed by 32 random bytes in URL-safe base64 (``secrets.token_urlsafe``), 256 bits
of entropy. Because it is random and long, one unsalted SHA-256 is enough to store it: unlike a password
there is nothing to guess, so a slow salted hash would only slow every request down. The hash is also
the lookup key, so a check is one indexed query.

Scopes: ``read`` answers reads; ``write`` answers reads and writes (manual decisions); ``units`` answers
reads and unit-level rows (exposure per pseudonymised person), which are personal data: neither of the
other scopes includes them.
"""

from __future__ import annotations

import enum
import hashlib
import hmac
import secrets
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ..errors import InputError, NotFound
from . import tables as t
from .clock import utc

TOKEN_PREFIX = "lf_"
_TOKEN_BYTES = 32
# Refreshing last_used_at on every request would make each read a write (and on SQLite, contend with
# the one writer); once a minute is enough to tell a token in use from an abandoned one.
LAST_USED_RESOLUTION = timedelta(minutes=1)
MAX_NOTE_CHARS = 500


class Scope(enum.StrEnum):
    """What an API token lets its holder do: read aggregates and lookups, write (stages, decisions), or
    read unit-level rows (``units``, a scope of its own; docs/exposure.md)."""

    READ = "read"
    WRITE = "write"
    UNITS = "units"

    def allows(self, needed: Scope) -> bool:
        return needed is Scope.READ or self is needed


class TokenState(enum.StrEnum):
    """What a presented token turned out to be."""

    VALID = "valid"
    UNKNOWN = "unknown"
    REVOKED = "revoked"


@dataclass(frozen=True)
class TokenCheck:
    state: TokenState
    token_id: int | None = None
    scope: Scope | None = None


@dataclass(frozen=True)
class NewToken:
    """A freshly created token: ``secret`` exists only here and is never stored."""

    id: int
    scope: Scope
    note: str
    created_at: datetime
    secret: str


def hash_token(secret: str) -> str:
    return hashlib.sha256(secret.encode("utf-8")).hexdigest()


def _now() -> datetime:
    return datetime.now(UTC)


def _scope(value: str) -> Scope:
    try:
        return Scope(value)
    except ValueError:
        raise InputError(f"unknown token scope {value!r}", hint="use read, write or units") from None


def create_token(engine: Engine, *, scope: str, note: str) -> NewToken:
    """Store a new token's hash and return the token; the caller shows ``secret`` once."""
    chosen = _scope(scope)
    note = note.strip()
    if not note:
        raise InputError("a token needs a note saying who or what it is for")
    if len(note) > MAX_NOTE_CHARS:
        raise InputError(f"the note is {len(note)} characters long; at most {MAX_NOTE_CHARS}")
    secret = TOKEN_PREFIX + secrets.token_urlsafe(_TOKEN_BYTES)
    created = _now()
    with engine.begin() as conn:
        token_id = conn.execute(sa.insert(t.api_tokens).values(
            token_sha256=hash_token(secret), scope=chosen.value, note=note, created_at=created)
            .returning(t.api_tokens.c.id)).scalar_one()
    return NewToken(int(token_id), chosen, note, created, secret)


def _public(row: Any) -> dict[str, Any]:
    return {"id": row["id"], "scope": row["scope"], "note": row["note"],
            "created_at": utc(row["created_at"]), "revoked_at": utc(row["revoked_at"]),
            "last_used_at": utc(row["last_used_at"])}


def list_tokens(conn: Connection, *, include_revoked: bool = True) -> list[dict[str, Any]]:
    """Every token's id, scope, note and times, oldest first; never a hash."""
    stmt = sa.select(t.api_tokens).order_by(t.api_tokens.c.id)
    if not include_revoked:
        stmt = stmt.where(t.api_tokens.c.revoked_at.is_(None))
    return [_public(row) for row in conn.execute(stmt).mappings()]


def revoke_token(engine: Engine, token_id: int) -> dict[str, Any]:
    """Revoke token ``token_id`` (kept, marked revoked). Revoking twice keeps the first time."""
    with engine.begin() as conn:
        row = conn.execute(sa.select(t.api_tokens).where(t.api_tokens.c.id == token_id)).mappings().first()
        if row is None:
            raise NotFound(f"no API token with id {token_id}", hint="see linkfold tokens list")
        if row["revoked_at"] is None:
            conn.execute(sa.update(t.api_tokens).where(t.api_tokens.c.id == token_id)
                         .values(revoked_at=_now()))
        row = conn.execute(sa.select(t.api_tokens).where(t.api_tokens.c.id == token_id)).mappings().one()
    return _public(row)


def check_token(engine: Engine, secret: str) -> TokenCheck:
    """What ``secret`` is: valid (with its id and scope), revoked, or unknown; refreshes last use."""
    if not secret.startswith(TOKEN_PREFIX) or len(secret) > 200:
        return TokenCheck(TokenState.UNKNOWN)
    digest = hash_token(secret)
    with engine.connect() as conn:
        row = conn.execute(sa.select(t.api_tokens).where(t.api_tokens.c.token_sha256 == digest)).mappings().first()
    # The index found the row by its hash; comparing again in constant time costs nothing and keeps the
    # check free of timing differences should the lookup ever change.
    if row is None or not hmac.compare_digest(row["token_sha256"], digest):
        return TokenCheck(TokenState.UNKNOWN)
    if row["revoked_at"] is not None:
        return TokenCheck(TokenState.REVOKED, int(row["id"]), Scope(row["scope"]))
    last = utc(row["last_used_at"])
    now = _now()
    if last is None or now - last >= LAST_USED_RESOLUTION:
        with engine.begin() as conn:
            conn.execute(sa.update(t.api_tokens).where(t.api_tokens.c.id == row["id"])
                         .values(last_used_at=now))
    return TokenCheck(TokenState.VALID, int(row["id"]), Scope(row["scope"]))


__all__ = ["TOKEN_PREFIX", "NewToken", "Scope", "TokenCheck", "TokenState", "check_token", "create_token",
           "hash_token", "list_tokens", "revoke_token"]
