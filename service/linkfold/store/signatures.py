"""Reads and writes of signing: which documents take part, signatures, band keys and title keys.

Every function works inside the caller's transaction. What is signed and when (the newest document of a
canonical URL, superseding older ones, bringing stored signatures to new settings) is the dedupe stage's
(:mod:`linkfold.dedupe.stage.signing`); the maths is pure (:mod:`linkfold.dedupe.minhash`).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import pending as pq
from . import tables as t
from .bulk import insert_rows
from .clusters import chunks

#: Content reasons of documents whose short or missing text still takes part, through their title.
SHORT_REASONS = ("too_short", "empty")


def takes_part() -> sa.ColumnElement[bool]:
    """Documents that take part in finding copies: the usable ones, and the short or empty ones."""
    d = t.documents
    return sa.or_(d.c.state == "usable", sa.and_(d.c.state == "no_text", d.c.reason.in_(SHORT_REASONS)))


def count_taking_part(conn: Connection, claim: pq.Claim) -> int:
    return pq.count(conn, claim, where=takes_part())


def any_signed(conn: Connection) -> bool:
    return conn.execute(sa.select(t.signatures.c.document_id).limit(1)).first() is not None


def with_usable(conn: Connection, canonical_ids: Sequence[int]) -> set[int]:
    """The canonical URLs among ``canonical_ids`` that have a usable document (a short one never
    replaces it)."""
    d = t.documents
    out: set[int] = set()
    for part in chunks(canonical_ids):
        out.update(int(c) for c in conn.execute(sa.select(d.c.canonical_id).distinct()
                                                .where(d.c.canonical_id.in_(part), d.c.state == "usable")).scalars())
    return out


def signing_batch(conn: Connection, claim: pq.Claim, after: int, limit: int) -> Sequence[Any]:
    """The next ``limit`` documents of ``claim`` that take part, with ids above ``after``, in id order."""
    d = t.documents
    return conn.execute(sa.select(d.c.id, d.c.canonical_id, d.c.text, d.c.title, d.c.published, d.c.state)
                        .where(takes_part(), d.c.id > after, claim.where(d.c.id))
                        .order_by(d.c.id).limit(limit)).all()


def newest_taking_part(conn: Connection, canonical_ids: Sequence[int]) -> Iterable[tuple[int, str, int]]:
    """(canonical id, status, newest document id) per canonical URL and status, over the whole table."""
    d = t.documents
    for part in chunks(canonical_ids):
        for cid, status, top in conn.execute(sa.select(d.c.canonical_id, d.c.state, sa.func.max(d.c.id))
                                             .where(d.c.canonical_id.in_(part), takes_part())
                                             .group_by(d.c.canonical_id, d.c.state)):
            yield int(cid), status, int(top)


def signed_among(conn: Connection, doc_ids: Sequence[int]) -> set[int]:
    sg = t.signatures
    out: set[int] = set()
    for part in chunks(doc_ids):
        out.update(int(x) for x in conn.execute(sa.select(sg.c.document_id).where(sg.c.document_id.in_(part)))
                   .scalars())
    return out


def banded_among(conn: Connection, doc_ids: Sequence[int]) -> set[int]:
    """The documents among ``doc_ids`` that have band keys (the current ones)."""
    bk = t.band_keys
    out: set[int] = set()
    for part in chunks(doc_ids):
        out.update(int(x) for x in conn.execute(sa.select(bk.c.document_id).distinct()
                                                .where(bk.c.document_id.in_(part))).scalars())
    return out


def add_signatures(conn: Connection, rows: Sequence[Mapping[str, Any]]) -> None:
    if rows:
        conn.execute(t.signatures.insert(), list(rows))


def add_band_keys(conn: Connection, rows: Sequence[Mapping[str, Any]]) -> None:
    insert_rows(conn, t.band_keys, rows)


def add_title_keys(conn: Connection, rows: Sequence[Mapping[str, Any]]) -> None:
    insert_rows(conn, t.title_keys, rows)


def drop_band_keys(conn: Connection, doc_ids: Sequence[int]) -> int:
    bk = t.band_keys
    return sum(conn.execute(bk.delete().where(bk.c.document_id.in_(part))).rowcount or 0 for part in chunks(doc_ids))


def supersede(conn: Connection, canonical_ids: Sequence[int], keep: Mapping[int, int]) -> int:
    """Remove band and title keys of documents older than ``keep[canonical id]`` (the current one of each
    canonical URL); returns the band-key rows removed. Signatures stay."""
    d, tk = t.documents, t.title_keys
    removed = 0
    for part in chunks(canonical_ids):
        older = [int(i) for i, c in conn.execute(sa.select(d.c.id, d.c.canonical_id)
                                                 .where(d.c.canonical_id.in_(part))) if i < keep[int(c)]]
        for sub in chunks(older):
            removed += drop_band_keys(conn, sub)
            conn.execute(tk.delete().where(tk.c.document_id.in_(sub)))
    return removed


def drop_all_title_keys(conn: Connection) -> None:
    conn.execute(t.title_keys.delete())


def current_signed(conn: Connection) -> list[int]:
    """The newest signed document taking part of every canonical URL, in id order."""
    d, sg = t.documents, t.signatures
    return sorted(int(i) for i in conn.execute(
        sa.select(sa.func.max(sg.c.document_id)).select_from(sg.join(d, d.c.id == sg.c.document_id))
        .where(takes_part()).group_by(d.c.canonical_id)).scalars())


def titles_of(conn: Connection, doc_ids: Sequence[int]) -> list[tuple[int, str | None, Any]]:
    """(document id, title, published) of ``doc_ids``."""
    d = t.documents
    return [(int(i), title, published) for i, title, published in conn.execute(
        sa.select(d.c.id, d.c.title, d.c.published).where(d.c.id.in_(doc_ids)))]


def count_stale(conn: Connection, token: str) -> int:
    """Signatures stored under other settings than ``token``."""
    sg = t.signatures
    return int(conn.execute(sa.select(sa.func.count()).select_from(sg).where(sg.c.params != token)).scalar_one())


def stale_batch(conn: Connection, token: str, after: int, limit: int) -> Sequence[Any]:
    """The next ``limit`` signatures not under ``token`` (document id, params, signature, the text)."""
    sg, d = t.signatures, t.documents
    return conn.execute(sa.select(sg.c.document_id, sg.c.params, sg.c.signature, d.c.text)
                        .select_from(sg.join(d, d.c.id == sg.c.document_id))
                        .where(sg.c.params != token, sg.c.document_id > after)
                        .order_by(sg.c.document_id).limit(limit)).all()


def replace_signatures(conn: Connection, token: str, signatures: Mapping[int, bytes], *, run_id: int | None) -> None:
    """Store new signature bytes under ``token`` for each document id."""
    sg = t.signatures
    if signatures:
        conn.execute(sg.update().where(sg.c.document_id == sa.bindparam("b_id")).values(
            params=token, signature=sa.bindparam("b_sig"), run_id=run_id),
            [{"b_id": i, "b_sig": b} for i, b in signatures.items()])


__all__ = ["SHORT_REASONS", "add_band_keys", "add_signatures", "add_title_keys", "any_signed", "banded_among",
           "count_stale", "count_taking_part", "current_signed", "drop_all_title_keys", "drop_band_keys",
           "newest_taking_part", "replace_signatures", "signed_among", "signing_batch", "stale_batch",
           "supersede", "takes_part", "titles_of", "with_usable"]
