"""Reads for the cluster reports (``linkfold clusters``, a cluster's page): clusters by size with their
outlets, founders, current documents, the similarity scores of stored links."""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..canon import registered_domain
from . import tables as t
from .clusters import chunks
from .finals import FinalsJoin


def _on_outlet(fj: FinalsJoin, outlet: str) -> sa.ColumnElement[bool]:
    """Whether the URL a canonical URL stands for (its final URL) is on ``outlet``: an outlet name as the
    site rules give it (any case), or a domain or host name, taken to its registered domain
    (``www.Herald.example`` means ``herald.example``)."""
    text = outlet.strip()
    cond = sa.func.lower(fj.column("outlet")) == text.lower()
    host = text.lower().rstrip(".")
    if host and "." in host and " " not in host:
        domain = registered_domain(host) or host
        cond = sa.or_(cond, fj.column("domain") == domain, fj.column("host") == host)
    return cond


def cluster_heads(conn: Connection, level: str, *, min_size: int, outlet: str | None = None,
                  limit: int | None = None) -> Sequence[Any]:
    """(cluster_id, size, outlets) of the clusters of ``level`` with at least ``min_size`` members (and,
    with ``outlet``, a member whose final outlet is that one, see :func:`_on_outlet`), largest first."""
    cm, c = t.cluster_members, t.canonical_urls
    fj = FinalsJoin.of(c)
    # Outlets are counted and matched where each member leads (its final outlet): a short link in a
    # cluster is on its target's outlet, not on the shortener's.
    member_outlet = fj.column("outlet")
    size = sa.func.count().label("size")
    q = (sa.select(cm.c.cluster_id, size, sa.func.count(sa.distinct(member_outlet)).label("outlets"))
         .select_from(fj.join(cm.join(c, c.c.id == cm.c.canonical_id)))
         .where(cm.c.level == level).group_by(cm.c.cluster_id).having(sa.func.count() >= min_size))
    if outlet is not None:
        q = q.having(sa.func.sum(sa.case((_on_outlet(fj, outlet), 1), else_=0)) > 0)
    q = q.order_by(size.desc(), cm.c.cluster_id)
    if limit:
        q = q.limit(limit)
    return conn.execute(q).all()


def founder_urls(conn: Connection, cluster_ids: Sequence[str]) -> dict[str, str]:
    """ID -> the URL of its founder."""
    c, ci = t.canonical_urls, t.cluster_ids
    out: dict[str, str] = {}
    for part in chunks(list(cluster_ids)):
        out.update(conn.execute(sa.select(ci.c.id, c.c.url).select_from(ci.join(c, c.c.id == ci.c.founder_id))
                                .where(ci.c.id.in_(part))).all())
    return out


def current_documents(conn: Connection, canonical_ids: Sequence[int]) -> dict[int, Any]:
    """The current document of each canonical URL: its newest usable one."""
    d = t.documents
    out: dict[int, Any] = {}
    for part in chunks(sorted(set(canonical_ids))):
        q = (sa.select(d.c.id, d.c.canonical_id, d.c.title, d.c.text, d.c.word_count, d.c.published)
             .where(d.c.canonical_id.in_(part), d.c.state == "usable").order_by(d.c.id))
        for r in conn.execute(q):
            out[int(r.canonical_id)] = r   # ascending ids: the newest usable document wins
    return out


def similarity_details(conn: Connection) -> Iterator[Any]:
    """(detail, source outlet, target outlet) of every stored ``similar_text`` link, streamed."""
    lk = t.links
    src, dst = t.canonical_urls.alias("src"), t.canonical_urls.alias("dst")
    q = (sa.select(lk.c.detail, src.c.outlet, dst.c.outlet.label("dst_outlet"))
         .select_from(lk.join(src, src.c.id == lk.c.src_id).join(dst, dst.c.id == lk.c.dst_id))
         .where(lk.c.kind == "similar_text"))
    yield from conn.execute(q.execution_options(yield_per=10000))


__all__ = ["cluster_heads", "current_documents", "founder_urls", "similarity_details"]
