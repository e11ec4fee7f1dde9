"""What an incremental stage still has to take into account, without ever passing over a row.

An incremental stage (the steps of the dedupe stage) reads the rows added since it last ran. A mark
that says "every row up to id N is done" is only right if no row with an id at or below N can be
committed after the mark moved. SQLite gives that: it has one writer at a time, and a row's id is the
table's largest plus one when it is written, under the write lock, so rows are committed in id order.
PostgreSQL does not: a sequence hands out ids when rows are inserted, not when they are committed, so
a load whose transaction is still open holds ids below those of a load that commits first; a mark moved
past the second load passes over the first for good (issue 16: 7,513 canonical URLs left without IDs).

So each backend has its own record of what is pending, behind one interface (:func:`claim`,
:func:`advance`, :func:`settle`, :func:`reset`):

* **SQLite** keeps the mark (``stage_marks``): a claim is the id range past it, up to the largest id
  committed when the claim is made.
* **PostgreSQL** keeps a queue, ``stage_pending``: a statement-level trigger on each watched table
  writes one row ``(topic, lo, hi)`` — the smallest and largest id the statement inserted — *in the
  inserting transaction*, so the entry is committed exactly when the rows are (migration 0013). A claim
  is the entries committed so far; the stage reads the rows in their ranges, and :func:`settle` deletes
  exactly the entries it claimed, by id, once the work is committed. An entry committed later is claimed
  by the next run, whatever its ids. A range may also cover rows of other transactions: those are either
  committed (looked at twice, which every consumer tolerates) or not yet (and have entries of their own).

The proof is the trigger's: no row of a watched table commits without its entry, and no entry is
removed before a stage committed the work on every row in its range. The cost on the ingest path is
one small row per batch for the new canonical URLs (bench/ingest_bench.py; docs/ingest.md).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import tables as t
from .clock import now

#: Topic -> the (table, id column) pairs it watches. The topic is also the stage mark's name on SQLite.
TOPICS: dict[str, tuple[tuple[str, str], ...]] = {
    "dedupe.signed": (("documents", "id"),),
    # Matching takes on documents given band keys or title keys since it last ran.
    "dedupe.matched": (("band_keys", "document_id"), ("title_keys", "document_id")),
    "dedupe.canonical": (("canonical_urls", "id"),),
    "dedupe.links": (("links", "id"),),
    "dedupe.decisions": (("decisions", "id"),),
}
#: Ranges a claim keeps apart; beyond that the closest ones are joined (covering more rows is harmless).
MAX_RANGES = 64


def uses_queue(conn: Connection) -> bool:
    """Whether this backend records pending rows in ``stage_pending`` (PostgreSQL) or by a mark."""
    return conn.dialect.name == "postgresql"


def _columns(topic: str) -> list[sa.Column]:
    return [t.metadata.tables[table].c[column] for table, column in TOPICS[topic]]


def _span(conn: Connection, topic: str) -> tuple[int | None, int | None]:
    """The smallest and largest id of ``topic``'s rows (None, None when there are none)."""
    spans = [conn.execute(sa.select(sa.func.min(c), sa.func.max(c))).one() for c in _columns(topic)]
    los = [int(lo) for lo, _hi in spans if lo is not None]
    his = [int(hi) for _lo, hi in spans if hi is not None]
    return (min(los) if los else None), (max(his) if his else None)


@dataclass(frozen=True)
class Claim:
    """The rows of ``topic`` a stage takes on: ids in ``ranges`` (inclusive, sorted, disjoint)."""

    topic: str
    ranges: tuple[tuple[int, int], ...]
    #: PostgreSQL: the queue entries behind the ranges, deleted by :func:`settle`.
    entries: tuple[int, ...] = ()

    @property
    def empty(self) -> bool:
        return not self.ranges

    @property
    def top(self) -> int:
        """The largest id claimed (0 when empty)."""
        return self.ranges[-1][1] if self.ranges else 0

    def where(self, column: sa.ColumnElement) -> sa.ColumnElement[bool]:
        """``column`` lies in one of the claimed ranges."""
        if not self.ranges:
            return sa.false()
        return sa.or_(*(column.between(lo, hi) for lo, hi in self.ranges))


def coalesce(ranges: Sequence[tuple[int, int]], *, limit: int = MAX_RANGES) -> tuple[tuple[int, int], ...]:
    """Sorted, disjoint ranges covering ``ranges``: overlapping and adjacent ones joined, then the
    closest neighbours joined until at most ``limit`` are left."""
    merged: list[list[int]] = []
    for lo, hi in sorted(ranges):
        if merged and lo <= merged[-1][1] + 1:
            merged[-1][1] = max(merged[-1][1], hi)
        else:
            merged.append([lo, hi])
    while len(merged) > max(limit, 1):
        _gap, i = min((merged[i + 1][0] - merged[i][1], i) for i in range(len(merged) - 1))
        merged[i][1] = merged[i + 1][1]
        del merged[i + 1]
    return tuple((lo, hi) for lo, hi in merged)


def claim(conn: Connection, topic: str) -> Claim:
    """What ``topic``'s stage has to take into account now (committed rows only)."""
    if uses_queue(conn):
        q = t.stage_pending
        rows = conn.execute(sa.select(q.c.id, q.c.lo, q.c.hi).where(q.c.topic == topic)).all()
        return Claim(topic, coalesce([(int(lo), int(hi)) for _i, lo, hi in rows]),
                     tuple(sorted(int(i) for i, _lo, _hi in rows)))
    lo = _mark(conn, topic)
    hi = _span(conn, topic)[1] or 0
    return Claim(topic, ((lo + 1, hi),) if hi > lo else ())


def advance(conn: Connection, done: Claim, upto: int, *, run_id: int | None) -> None:
    """Record, inside the transaction that did the work, that ``done``'s rows up to ``upto`` are taken
    into account: on SQLite the mark moves (a killed run resumes there); on PostgreSQL nothing (the
    entries go at :func:`settle`, and a rerun looks at the rows again, which every consumer tolerates)."""
    if not uses_queue(conn) and upto > _mark(conn, done.topic):
        _set_mark(conn, done.topic, min(upto, done.top), run_id=run_id)


def settle(conn: Connection, done: Claim, *, run_id: int | None) -> None:
    """Record that every row of ``done`` is taken into account."""
    if uses_queue(conn):
        q = t.stage_pending
        entries = list(done.entries)
        for i in range(0, len(entries), 5000):
            # By id, never by range or "id <= N": an entry committed after the claim is not ours.
            conn.execute(q.delete().where(q.c.id.in_(entries[i:i + 5000])))
        return
    if done.ranges:
        advance(conn, done, done.top, run_id=run_id)


def reset(conn: Connection, topic: str, *, run_id: int | None) -> None:
    """Make every row of ``topic`` pending again (a full rerun of the stage)."""
    if uses_queue(conn):
        lo, hi = _span(conn, topic)
        if lo is not None and hi is not None:
            conn.execute(t.stage_pending.insert().values(topic=topic, lo=lo, hi=hi))
        return
    _set_mark(conn, topic, 0, run_id=run_id)


def count(conn: Connection, pending: Claim, *, where: sa.ColumnElement[bool] | None = None,
          distinct: bool = False) -> int:
    """How many rows of the claimed topic's (first) table lie in the claim (and satisfy ``where``)."""
    if pending.empty:
        return 0
    col = _columns(pending.topic)[0]
    q = sa.select(sa.func.count(sa.distinct(col)) if distinct else sa.func.count()).select_from(col.table)
    q = q.where(pending.where(col))
    if where is not None:
        q = q.where(where)
    return int(conn.execute(q).scalar_one())


def _mark(conn: Connection, name: str) -> int:
    return int(conn.execute(sa.select(t.stage_marks.c.value).where(t.stage_marks.c.name == name)).scalar() or 0)


def _set_mark(conn: Connection, name: str, value: int, *, run_id: int | None) -> None:
    m = t.stage_marks
    done = conn.execute(m.update().where(m.c.name == name).values(value=value, run_id=run_id, updated_at=now()))
    if done.rowcount == 0:
        conn.execute(m.insert().values(name=name, value=value, run_id=run_id, updated_at=now()))


__all__ = ["MAX_RANGES", "TOPICS", "Claim", "advance", "claim", "coalesce", "count", "reset", "settle",
           "uses_queue"]
