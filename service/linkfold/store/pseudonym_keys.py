"""The registry's record of the key its units are pseudonymised under (table ``pseudonym_keys``)."""

from __future__ import annotations

from datetime import UTC, datetime

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..errors import ConfigError
from . import tables as t

UNITS = "units"


def stored_fingerprint(conn: Connection) -> str | None:
    """The fingerprint of the key the registry's units are pseudonymised under, if units were loaded."""
    pk = t.pseudonym_keys
    return conn.execute(sa.select(pk.c.fingerprint).where(pk.c.name == UNITS)).scalar_one_or_none()


def check_key(conn: Connection, *, scheme: str, fingerprint: str) -> None:
    """Record the key's fingerprint on first use; refuse a key whose fingerprint differs from the stored
    one (changing the key means a new registry: the same people would get new pseudonyms)."""
    pk = t.pseudonym_keys
    stored = stored_fingerprint(conn)
    if stored is None:
        try:
            with conn.begin_nested():
                conn.execute(sa.insert(pk).values(name=UNITS, scheme=scheme, fingerprint=fingerprint,
                                                  created_at=datetime.now(UTC)))
            return
        except sa.exc.IntegrityError:
            stored = stored_fingerprint(conn)  # a concurrent first load recorded one a moment ago
    if stored != fingerprint:
        raise ConfigError(
            f"this registry's units are pseudonymised under another key (fingerprint {stored}; the key "
            f"given has {fingerprint}); nothing was loaded",
            hint="use the lab's key the registry was started with; a new key means a new registry, never "
                 "a silent change (docs/exposure.md)")


__all__ = ["UNITS", "check_key", "stored_fingerprint"]
