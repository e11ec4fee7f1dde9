"""Canonical URLs read by id: the rows the dedupe stage and its reports need beside its own tables."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import tables as t
from .clusters import chunks


def url_row(conn: Connection, canonical_id: int) -> Any:
    """id, url, url_key and outlet of one canonical URL (it must exist)."""
    c = t.canonical_urls
    return conn.execute(sa.select(c.c.id, c.c.url, c.c.url_key, c.c.outlet).where(c.c.id == canonical_id)).one()


def url_rows(conn: Connection, canonical_ids: Iterable[int]) -> dict[int, Any]:
    """id -> (id, url, url_key, outlet) of the stored ones among ``canonical_ids``."""
    c = t.canonical_urls
    out: dict[int, Any] = {}
    for part in chunks(sorted(set(canonical_ids))):
        out.update({int(r.id): r for r in conn.execute(
            sa.select(c.c.id, c.c.url, c.c.url_key, c.c.outlet).where(c.c.id.in_(part)))})
    return out


def url_keys(conn: Connection, canonical_ids: Iterable[int]) -> dict[int, str]:
    """id -> url key of the stored ones among ``canonical_ids``."""
    c = t.canonical_urls
    out: dict[int, str] = {}
    for part in chunks(sorted(set(canonical_ids))):
        out.update((int(i), k) for i, k in conn.execute(sa.select(c.c.id, c.c.url_key).where(c.c.id.in_(part))))
    return out


def all_canonical_ids(conn: Connection) -> set[int]:
    return {int(i) for i in conn.execute(sa.select(t.canonical_urls.c.id)).scalars()}


__all__ = ["all_canonical_ids", "url_keys", "url_row", "url_rows"]
