"""The evidence graph as clustering reads it: links with the facts of both ends, and what a run claimed.

Every function works inside the caller's transaction. Which links join what, and the regions grown from
them, is the dedupe stage's (:mod:`linkfold.dedupe.stage.regions`).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import pending as pq
from . import tables as t
from .clusters import chunks


def links_touching(conn: Connection, members: Sequence[int], *, within: pq.Claim | None = None) -> list[Any]:
    """Links with an end among ``members`` (or, with ``within``, the links of that claim), with the
    outlets of both ends."""
    lk = t.links
    src, dst = t.canonical_urls.alias("src"), t.canonical_urls.alias("dst")
    base = (sa.select(lk.c.id, lk.c.kind, lk.c.src_id, lk.c.dst_id, lk.c.detail,
                      src.c.outlet.label("src_outlet"), dst.c.outlet.label("dst_outlet"),
                      src.c.url.label("src_url"), src.c.host.label("src_host"),
                      src.c.is_article.label("src_is_article"), dst.c.url.label("dst_url"),
                      dst.c.host.label("dst_host"), dst.c.is_article.label("dst_is_article"))
            .select_from(lk.join(src, src.c.id == lk.c.src_id).join(dst, dst.c.id == lk.c.dst_id)))
    rows: dict[int, Any] = {}
    if within is not None:
        for r in conn.execute(base.where(within.where(lk.c.id))):
            rows[r.id] = r
        return [rows[k] for k in sorted(rows)]
    for part in chunks(sorted(set(members))):
        for col in (lk.c.src_id, lk.c.dst_id):
            for r in conn.execute(base.where(col.in_(part))):
                rows[r.id] = r
    return [rows[k] for k in sorted(rows)]


def claimed_canonical_ids(conn: Connection, claim: pq.Claim) -> set[int]:
    """The canonical URLs of ``claim`` (new since the last clustering)."""
    c = t.canonical_urls
    return {int(i) for i in conn.execute(sa.select(c.c.id).where(claim.where(c.c.id))).scalars()}


def claimed_decision_anchors(conn: Connection, claim: pq.Claim) -> Iterable[tuple[str, int, int]]:
    """(level, a_member, b_member) of the decisions of ``claim``."""
    d = t.decisions
    for level, a, b in conn.execute(sa.select(d.c.level, d.c.a_member, d.c.b_member).where(claim.where(d.c.id))):
        yield level, int(a), int(b)


__all__ = ["claimed_canonical_ids", "claimed_decision_anchors", "links_touching"]
