"""Reads and writes of manual decisions (``decisions``): append-only; the latest on a pair is in force.

Every function works inside the caller's transaction (or connection, for the reads). What a decision
means and how it is anchored is the dedupe stage's (:mod:`linkfold.dedupe.stage.decisions`).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import tables as t
from .clock import utc
from .clusters import chunks


def add_decision(conn: Connection, row: Mapping[str, Any]) -> int:
    return int(conn.execute(t.decisions.insert().values(**row).returning(t.decisions.c.id)).scalar_one())


def decisions_touching(conn: Connection, level: str, members: Iterable[int]) -> list[dict[str, Any]]:
    """The decision in force (the latest) for every pair at ``level`` with an anchor among ``members``."""
    d = t.decisions
    rows: dict[int, dict[str, Any]] = {}
    ids = sorted(set(members))
    for part in chunks(ids):
        q = sa.select(d).where(d.c.level == level, sa.or_(d.c.a_member.in_(part), d.c.b_member.in_(part)))
        for row in conn.execute(q).mappings():
            rows[row["id"]] = dict(row)
    return latest_per_pair(rows.values())


def latest_per_pair(rows: Iterable[Mapping[str, Any]]) -> list[dict[str, Any]]:
    latest: dict[tuple[int, int], dict[str, Any]] = {}
    for row in sorted(rows, key=lambda r: r["id"]):
        latest[(row["a_member"], row["b_member"])] = dict(row)
    return [latest[k] for k in sorted(latest)]


def decisions_after(conn: Connection, after_id: int, upto_id: int) -> list[dict[str, Any]]:
    d = t.decisions
    return [dict(r) for r in conn.execute(sa.select(d).where(d.c.id > after_id, d.c.id <= upto_id)
                                          .order_by(d.c.id)).mappings()]


def decision_history(conn: Connection, level: str, a_member: int, b_member: int) -> list[dict[str, Any]]:
    d = t.decisions
    q = sa.select(d).where(d.c.level == level, d.c.a_member == a_member, d.c.b_member == b_member)
    return [dict(r) | {"decided_at": utc(r["decided_at"])} for r in conn.execute(q.order_by(d.c.id)).mappings()]


def decision_log(conn: Connection, *, limit: int | None = None) -> list[dict[str, Any]]:
    """Every decision, newest first, with the URLs of both anchors (``a_url``, ``b_url``)."""
    d, c1, c2 = t.decisions, t.canonical_urls.alias("ca"), t.canonical_urls.alias("cb")
    q = (sa.select(d, c1.c.url.label("a_url"), c2.c.url.label("b_url"))
         .select_from(d.join(c1, c1.c.id == d.c.a_member).join(c2, c2.c.id == d.c.b_member))
         .order_by(d.c.id.desc()))
    if limit:
        q = q.limit(limit)
    return [dict(r) for r in conn.execute(q).mappings()]


__all__ = ["add_decision", "decision_history", "decision_log", "decisions_after", "decisions_touching",
           "latest_per_pair"]
