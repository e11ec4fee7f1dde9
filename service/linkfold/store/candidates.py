"""Candidate pairs for matching, from the band-key, title-key and text-hash tables (docs/dedupe.md §4, §4a).

A :class:`Window` is the documents matched in one transaction; every query here is set-based and runs
inside the caller's transaction. Which pairs are verified, and how, is the dedupe stage's
(:mod:`linkfold.dedupe.stage.matching`); the rule itself is pure (:mod:`linkfold.dedupe.verify`).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import pending as pq
from . import tables as t
from .clusters import chunks


@dataclass(frozen=True)
class Window:
    """The documents matched in one transaction: ids in ``(lo, hi]`` within the run's claim."""

    lo: int
    hi: int
    claim: pq.Claim

    def holds(self, column: Any) -> Any:
        return sa.and_(column > self.lo, column <= self.hi, self.claim.where(column))

    def partner(self, other: Any, mine: Any) -> Any:
        """Whom a window document is paired with: every other document, except one with a larger id that
        this run matches as well (it pairs with this one in its own window, so each pair is met once).
        Claimed documents are matched in id order, but a document claimed in no earlier run can have a
        smaller id than one matched before: pairing only with smaller ids would miss that pair."""
        return sa.and_(other != mine, sa.or_(other < mine, sa.not_(self.claim.where(other))))


def keyed_ids(w: Window) -> sa.Subquery:
    """Ids of the window's documents that have band keys or title keys: the current documents that
    can meet a candidate (a short text without shingles may still have a title that decides)."""
    bk, tk = t.band_keys, t.title_keys
    return sa.union(sa.select(bk.c.document_id.label("id")).where(w.holds(bk.c.document_id)),
                    sa.select(tk.c.document_id.label("id")).where(w.holds(tk.c.document_id))).subquery()


def oversize_buckets(conn: Connection, w: Window, max_bucket: int) -> tuple[list[tuple[int, int]], int]:
    """(band, key) buckets met by the window's documents that hold more than ``max_bucket`` documents,
    and the largest bucket size met."""
    bk = t.band_keys
    mine = sa.select(bk.c.band, bk.c.key).where(w.holds(bk.c.document_id)).subquery()
    q = (sa.select(bk.c.band, bk.c.key, sa.func.count(sa.distinct(bk.c.document_id)).label("n"))
         .where(sa.tuple_(bk.c.band, bk.c.key).in_(sa.select(mine.c.band, mine.c.key)))
         .group_by(bk.c.band, bk.c.key).having(sa.func.count(sa.distinct(bk.c.document_id)) > 1))
    big: list[tuple[int, int]] = []
    largest = 0
    for band, key, n in conn.execute(q):
        largest = max(largest, int(n))
        if n > max_bucket:
            big.append((int(band), int(key)))
    return big, largest


def _pair(a: Any, b: Any) -> tuple[int, int]:
    return (int(a), int(b)) if int(a) < int(b) else (int(b), int(a))


def band_pairs(conn: Connection, w: Window, skip: Sequence[tuple[int, int]]) -> set[tuple[int, int]]:
    n, o = t.band_keys.alias("n"), t.band_keys.alias("o")
    q = (sa.select(o.c.document_id, n.c.document_id).distinct()
         .select_from(n.join(o, sa.and_(o.c.band == n.c.band, o.c.key == n.c.key,
                                        w.partner(o.c.document_id, n.c.document_id))))
         .where(w.holds(n.c.document_id)))
    if skip:
        q = q.where(sa.tuple_(n.c.band, n.c.key).not_in(list(skip)))
    return {_pair(a, b) for a, b in conn.execute(q)}


def oversize_titles(conn: Connection, w: Window, max_bucket: int) -> tuple[list[int], int]:
    """Title keys met by the window's documents that more than ``max_bucket`` documents share (a title
    every outlet uses), and the largest such bucket met."""
    tk = t.title_keys
    mine = sa.select(tk.c.key).where(w.holds(tk.c.document_id)).subquery()
    q = (sa.select(tk.c.key, sa.func.count().label("n")).where(tk.c.key.in_(sa.select(mine.c.key)))
         .group_by(tk.c.key).having(sa.func.count() > 1))
    big: list[int] = []
    largest = 0
    for key, n in conn.execute(q):
        largest = max(largest, int(n))
        if n > max_bucket:
            big.append(int(key))
    return big, largest


def title_pairs(conn: Connection, w: Window, skip: Sequence[int], min_words: int) -> set[tuple[int, int]]:
    """Pairs sharing a title key, on different outlets, at least one of them short: the only pairs the
    title-and-date rule can join (docs/dedupe.md §6). Partners as for band keys (``Window.partner``)."""
    n, o = t.title_keys.alias("tn"), t.title_keys.alias("to")
    dn, do = t.documents.alias("dn"), t.documents.alias("do")
    cn, co = t.canonical_urls.alias("cn"), t.canonical_urls.alias("co")
    q = (sa.select(o.c.document_id, n.c.document_id).distinct()
         .select_from(n.join(o, sa.and_(o.c.key == n.c.key, w.partner(o.c.document_id, n.c.document_id)))
                      .join(dn, dn.c.id == n.c.document_id).join(do, do.c.id == o.c.document_id)
                      .join(cn, cn.c.id == dn.c.canonical_id).join(co, co.c.id == do.c.canonical_id))
         .where(w.holds(n.c.document_id), cn.c.outlet != co.c.outlet,
                sa.or_(dn.c.word_count < min_words, do.c.word_count < min_words)))
    if skip:
        q = q.where(n.c.key.not_in(list(skip)))
    return {_pair(a, b) for a, b in conn.execute(q)}


def hash_pairs(conn: Connection, w: Window) -> set[tuple[int, int]]:
    """Pairs of current documents with equal normalised text (band 0 present = current and non-empty)."""
    dn, do = t.documents.alias("dn"), t.documents.alias("do")
    bn, bo = t.band_keys.alias("bn"), t.band_keys.alias("bo")
    q = (sa.select(do.c.id, dn.c.id).distinct()
         .select_from(dn.join(bn, sa.and_(bn.c.document_id == dn.c.id, bn.c.band == 0))
                      .join(do, sa.and_(do.c.text_hash == dn.c.text_hash, w.partner(do.c.id, dn.c.id),
                                        do.c.canonical_id != dn.c.canonical_id))
                      .join(bo, sa.and_(bo.c.document_id == do.c.id, bo.c.band == 0)))
         .where(w.holds(dn.c.id), dn.c.text_hash.is_not(None)))
    return {_pair(a, b) for a, b in conn.execute(q)}


def document_rows(conn: Connection, doc_ids: Sequence[int]) -> Iterator[Any]:
    """The documents behind candidate pairs: id, canonical URL, title, text, text hash, word count, date,
    outlet and stored signature."""
    d, c, sg = t.documents, t.canonical_urls, t.signatures
    for part in chunks(sorted(set(doc_ids))):
        q = (sa.select(d.c.id, d.c.canonical_id, d.c.title, d.c.text, d.c.text_hash, d.c.word_count,
                       d.c.published, c.c.outlet, sg.c.signature)
             .select_from(d.join(c, c.c.id == d.c.canonical_id).join(sg, sg.c.document_id == d.c.id))
             .where(d.c.id.in_(part)))
        yield from conn.execute(q)


def window_ids(conn: Connection, w: Window, limit: int) -> list[int]:
    """The first ``limit`` ids of the window's documents that can meet a candidate, in id order."""
    keyed = keyed_ids(w)
    return [int(i) for i in conn.execute(sa.select(keyed.c.id).order_by(keyed.c.id).limit(limit)).scalars()]


def count_keyed(conn: Connection, w: Window) -> int:
    return int(conn.execute(sa.select(sa.func.count()).select_from(keyed_ids(w))).scalar_one())


__all__ = ["Window", "band_pairs", "count_keyed", "document_rows", "hash_pairs", "keyed_ids", "oversize_buckets",
           "oversize_titles", "title_pairs", "window_ids"]
