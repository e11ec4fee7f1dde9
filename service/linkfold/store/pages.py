"""Writes and queries of the content tables: ``pages``, ``fetch_results`` and ``documents``.

Every function works inside the caller's transaction (``conn``), so a stage commits one batch at a time
and a crash loses at most the batch in flight. Pages and documents are never updated or deleted; a
``fetch_results`` row holds the latest fetch outcome of its canonical URL and is updated in place.

Bodies are stored zlib-compressed (RFC 1950): HTML shrinks to a fifth or so, the format is in the
standard library of every language a lab might read the table with, and it needs no framing of its own.
"""

from __future__ import annotations

import hashlib
import zlib
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ..errors import InputError, NotFound
from . import tables as t
from .clock import utc
from .lookup import Located, locate

_IN_CHUNK = 500  # ids per IN (…) list, well under SQLite's limit of bound parameters

#: zlib level 6 is zlib's own default: most of level 9's ratio at a fraction of its time.
COMPRESSION_LEVEL = 6


def _chunks(items: Sequence[Any]) -> Iterator[Sequence[Any]]:
    for i in range(0, len(items), _IN_CHUNK):
        yield items[i:i + _IN_CHUNK]


def compress_body(body: bytes) -> bytes:
    return zlib.compress(body, COMPRESSION_LEVEL)


def decompress_body(blob: bytes) -> bytes:
    return zlib.decompress(blob)


def _insert_ignoring_conflicts(conn: Connection, table: sa.Table, rows: Sequence[Mapping[str, Any]]) -> None:
    """INSERT … ON CONFLICT DO NOTHING (any unique constraint), executemany.

    Not COPY: pages carry binary bodies and JSON headers, which want the driver's own adaptation, and a
    batch is a few hundred rows, not millions.
    """
    if not rows:
        return
    from sqlalchemy.dialects import postgresql, sqlite

    stmt = (postgresql.insert(table) if conn.dialect.name == "postgresql" else sqlite.insert(table))
    conn.execute(stmt.on_conflict_do_nothing(), list(rows))


# --- pages ---------------------------------------------------------------------------------------------------
def page_row(*, canonical_id: int, requested_url: str, final_url: str, final_canonical_id: int | None,
             status: int | None, headers: Mapping[str, str] | None, body: bytes, truncated: bool,
             source: str, fetched_at: datetime | None, run_id: int | None,
             stored_at: datetime | None = None) -> dict[str, Any]:
    """One ``pages`` row; the body is compressed here and described by its uncompressed size and hash."""
    return {"canonical_id": canonical_id, "requested_url": requested_url, "final_url": final_url,
            "final_canonical_id": final_canonical_id, "status": status,
            "headers": dict(headers) if headers else None, "body": compress_body(body),
            "body_size": len(body), "truncated": truncated,
            "body_sha256": hashlib.sha256(body).hexdigest(), "source": source, "fetched_at": fetched_at,
            "stored_at": stored_at or datetime.now(UTC), "run_id": run_id}


def store_pages(conn: Connection, rows: Sequence[Mapping[str, Any]]) -> tuple[int, dict[tuple[int, str], int]]:
    """Store pages, skipping any whose (canonical URL, body hash) is already stored.

    Returns the number of new rows and the page id of every row given, by (canonical_id, body_sha256).
    """
    if not rows:
        return 0, {}
    p = t.pages
    keys = {(int(r["canonical_id"]), r["body_sha256"]) for r in rows}
    before = _page_ids(conn, keys)
    fresh: dict[tuple[int, str], Mapping[str, Any]] = {}
    for row in rows:
        key = (int(row["canonical_id"]), row["body_sha256"])
        if key not in before:
            fresh.setdefault(key, row)  # the same bytes twice in one batch are one page
    _insert_ignoring_conflicts(conn, p, list(fresh.values()))
    ids = before | _page_ids(conn, set(fresh))
    return len(fresh), ids


def _page_ids(conn: Connection, keys: set[tuple[int, str]]) -> dict[tuple[int, str], int]:
    p = t.pages
    out: dict[tuple[int, str], int] = {}
    by_canonical: dict[int, set[str]] = {}
    for cid, sha in keys:
        by_canonical.setdefault(cid, set()).add(sha)
    for part in _chunks(sorted(by_canonical)):
        for pid, cid, sha in conn.execute(sa.select(p.c.id, p.c.canonical_id, p.c.body_sha256)
                                          .where(p.c.canonical_id.in_(part))):
            if sha in by_canonical[int(cid)]:
                out[(int(cid), sha)] = int(pid)
    return out


@dataclass(frozen=True)
class StoredPage:
    """A ``pages`` row with its body decompressed, ready for extraction."""

    id: int
    canonical_id: int
    final_canonical_id: int | None
    requested_url: str
    final_url: str
    status: int | None
    headers: dict[str, str]
    body: bytes
    truncated: bool
    source: str
    fetched_at: datetime | None

    @property
    def document_canonical_id(self) -> int:
        """The canonical URL a document of this page belongs to: where the page was served from."""
        return self.final_canonical_id if self.final_canonical_id is not None else self.canonical_id


def load_pages(conn: Connection, page_ids: Sequence[int]) -> list[StoredPage]:
    """The pages with these ids, in id order."""
    p = t.pages
    out: list[StoredPage] = []
    for part in _chunks(sorted(set(page_ids))):
        for r in conn.execute(sa.select(p).where(p.c.id.in_(part)).order_by(p.c.id)).mappings():
            out.append(StoredPage(id=int(r["id"]), canonical_id=int(r["canonical_id"]),
                                  final_canonical_id=r["final_canonical_id"], requested_url=r["requested_url"],
                                  final_url=r["final_url"], status=r["status"], headers=dict(r["headers"] or {}),
                                  body=decompress_body(r["body"]), truncated=bool(r["truncated"]),
                                  source=r["source"], fetched_at=utc(r["fetched_at"])))
    return sorted(out, key=lambda sp: sp.id)


def pages_of(conn: Connection, canonical_id: int) -> list[dict[str, Any]]:
    """Every page stored for (or served as) a canonical URL, oldest first, without bodies."""
    p = t.pages
    cols = [c for c in p.c if c.name != "body"]
    q = (sa.select(*cols).where(sa.or_(p.c.canonical_id == canonical_id, p.c.final_canonical_id == canonical_id))
         .order_by(p.c.id))
    return [_times(dict(r)) for r in conn.execute(q).mappings()]


def _times(row: dict[str, Any]) -> dict[str, Any]:
    return {k: (utc(v) if isinstance(v, datetime) else v) for k, v in row.items()}


# --- fetch state ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class FetchOutcome:
    """One fetch attempt of one canonical URL, as written to ``fetch_results``."""

    canonical_id: int
    state: str  # fetched | failed | refused
    at: datetime
    failure: str | None = None
    http_status: int | None = None
    page_id: int | None = None
    next_attempt_at: datetime | None = None
    detail: str | None = None


def fetch_attempts(conn: Connection, canonical_ids: Iterable[int]) -> dict[int, int]:
    """Attempts so far per canonical URL (absent: never attempted)."""
    fr = t.fetch_results
    out: dict[int, int] = {}
    for part in _chunks(sorted(set(canonical_ids))):
        out.update({int(c): int(n) for c, n in conn.execute(
            sa.select(fr.c.canonical_id, fr.c.attempts).where(fr.c.canonical_id.in_(part)))})
    return out


def record_fetch_outcomes(conn: Connection, outcomes: Sequence[FetchOutcome], *, run_id: int | None) -> int:
    """Store the latest outcome per canonical URL (the last of a batch wins). Returns rows written."""
    if not outcomes:
        return 0
    fr = t.fetch_results
    latest = {o.canonical_id: o for o in outcomes}
    existing = fetch_attempts(conn, latest)
    inserts, updates = [], []
    for cid, o in latest.items():
        values = {"state": o.state, "failure": o.failure, "http_status": o.http_status, "page_id": o.page_id,
                  "last_attempt_at": o.at, "next_attempt_at": o.next_attempt_at,
                  "detail": (o.detail or None) and o.detail[:500], "run_id": run_id}
        if cid in existing:
            updates.append({"b_cid": cid, "attempts": existing[cid] + 1, **values})
        else:
            inserts.append({"canonical_id": cid, "attempts": 1, "first_attempt_at": o.at, **values})
    if inserts:
        conn.execute(sa.insert(fr), inserts)
    if updates:
        stmt = sa.update(fr).where(fr.c.canonical_id == sa.bindparam("b_cid")).values(
            {k: sa.bindparam(k) for k in updates[0] if k != "b_cid"})
        conn.execute(stmt, updates)
    return len(inserts) + len(updates)


def fetch_result(conn: Connection, canonical_id: int) -> dict[str, Any] | None:
    fr = t.fetch_results
    row = conn.execute(sa.select(fr).where(fr.c.canonical_id == canonical_id)).mappings().first()
    return None if row is None else _times(dict(row))


@dataclass(frozen=True)
class FetchPending:
    canonical_id: int
    url: str  # the canonical URL
    raw: str | None  # the first raw URL stored for it: the one to request
    is_article: bool | None


def _fetch_pending_query(*, dataset_id: int | None, only_articles: bool, retry_refused: bool,
                         now: datetime) -> sa.Select:
    c, fr, p, fo, r = t.canonical_urls, t.fetch_results, t.pages, t.follow_results, t.raw_urls
    has_page = sa.or_(
        sa.exists().where(p.c.canonical_id == c.c.id),
        sa.exists().where(p.c.final_canonical_id == c.c.id),
    )
    # A URL the follow stage resolved to another canonical URL is a redirect: its page is the target's.
    redirected = sa.exists().where(fo.c.canonical_id == c.c.id, fo.c.state == "resolved",
                                   fo.c.final_id.is_not(None), fo.c.final_id != c.c.id)
    q = sa.select(c.c.id).select_from(c.outerjoin(fr, fr.c.canonical_id == c.c.id)).where(~has_page, ~redirected)
    if retry_refused:
        q = q.where(fr.c.state == "refused")
    else:
        q = q.where(sa.or_(fr.c.id.is_(None),
                           sa.and_(fr.c.state == "failed", fr.c.next_attempt_at.is_not(None),
                                   fr.c.next_attempt_at <= now)))
    if only_articles:
        q = q.where(c.c.is_article.is_(True))
    if dataset_id is not None:
        sighted = (sa.select(r.c.canonical_id).select_from(r.join(t.sightings, t.sightings.c.raw_url_id == r.c.id))
                   .where(t.sightings_in_dataset(dataset_id), r.c.canonical_id.is_not(None)))
        q = q.where(c.c.id.in_(sighted))
    return q


def select_fetch_pending(conn: Connection, *, dataset_id: int | None = None, only_articles: bool = False,
                         retry_refused: bool = False, now: datetime | None = None,
                         limit: int | None = None) -> list[FetchPending]:
    """Canonical URLs to fetch, articles first (by the ruleset's article patterns), then oldest first.

    Pending: no page stored for it or served from it, not resolved by the follow stage to another
    canonical URL, and never attempted or failed with its next attempt due (``now``, default the clock).
    With ``retry_refused``: instead the URLs whose last attempt was refused (robots.txt, the guard).
    """
    c, r = t.canonical_urls, t.raw_urls
    base = _fetch_pending_query(dataset_id=dataset_id, only_articles=only_articles, retry_refused=retry_refused,
                                now=now or datetime.now(UTC)).subquery()
    first_raw = (sa.select(r.c.raw).where(r.c.canonical_id == c.c.id).order_by(r.c.id).limit(1)
                 .correlate(c).scalar_subquery())
    article_first = sa.case((c.c.is_article.is_(True), 0), else_=1)
    q = (sa.select(c.c.id, c.c.url, first_raw.label("raw"), c.c.is_article)
         .where(c.c.id.in_(sa.select(base.c.id))).order_by(article_first, c.c.id))
    if limit is not None:
        q = q.limit(limit)
    return [FetchPending(int(i), url, raw, art) for i, url, raw, art in conn.execute(q)]


def count_fetch_pending(conn: Connection, *, now: datetime | None = None) -> int:
    base = _fetch_pending_query(dataset_id=None, only_articles=False, retry_refused=False,
                                now=now or datetime.now(UTC)).subquery()
    return int(conn.execute(sa.select(sa.func.count()).select_from(base)).scalar_one())


# --- documents -----------------------------------------------------------------------------------------------
def _extract_pending_filter(version: str, reextract: bool) -> sa.ColumnElement[bool]:
    p, d = t.pages, t.documents
    if reextract:
        return ~sa.exists().where(d.c.page_id == p.c.id, d.c.extractor_version == version)
    return ~sa.exists().where(d.c.page_id == p.c.id)


def select_extract_pending(conn: Connection, *, version: str, reextract: bool = False, after_id: int = 0,
                           limit: int) -> list[int]:
    """Ids of pages to extract, in id order, after ``after_id``.

    Without ``reextract``: pages that have no document at all. With it: pages with no document under
    ``version`` (the current extractor version), so documents from an older extractor are redone.
    """
    p = t.pages
    q = (sa.select(p.c.id).where(p.c.id > after_id, _extract_pending_filter(version, reextract))
         .order_by(p.c.id).limit(limit))
    return [int(i) for i in conn.execute(q).scalars()]


def count_extract_pending(conn: Connection, *, version: str, reextract: bool = False) -> int:
    p = t.pages
    return int(conn.execute(sa.select(sa.func.count()).select_from(p)
                            .where(_extract_pending_filter(version, reextract))).scalar_one())


def store_documents(conn: Connection, rows: Sequence[Mapping[str, Any]]) -> int:
    """Store documents, skipping those that repeat a stored (page, extractor version) or loaded record.

    Returns the number of new rows.
    """
    if not rows:
        return 0
    d = t.documents
    by_page = [r for r in rows if r.get("page_id") is not None]
    by_record = [r for r in rows if r.get("page_id") is None]
    known_pages: set[tuple[int, str]] = set()
    for part in _chunks(sorted({int(r["page_id"]) for r in by_page})):
        known_pages |= {(int(pid), v) for pid, v in conn.execute(
            sa.select(d.c.page_id, d.c.extractor_version).where(d.c.page_id.in_(part)))}
    known_records: set[str] = set()
    for part in _chunks(sorted({r["record_sha256"] for r in by_record if r.get("record_sha256")})):
        known_records |= set(conn.execute(sa.select(d.c.record_sha256).where(d.c.record_sha256.in_(part)))
                             .scalars())
    fresh: dict[tuple[Any, ...], Mapping[str, Any]] = {}
    for r in by_page:
        page_key = (int(r["page_id"]), r["extractor_version"])
        if page_key not in known_pages:
            fresh.setdefault(("page", *page_key), r)
    for r in by_record:
        if r.get("record_sha256") not in known_records:
            fresh.setdefault(("record", r.get("record_sha256")), r)
    _insert_ignoring_conflicts(conn, d, list(fresh.values()))
    return len(fresh)


def document_ids(conn: Connection, page_ids: Sequence[int], version: str) -> dict[int, int]:
    """Document id by page id, for documents under ``version``."""
    d = t.documents
    out: dict[int, int] = {}
    for part in _chunks(sorted(set(page_ids))):
        out.update({int(p): int(i) for i, p in conn.execute(
            sa.select(d.c.id, d.c.page_id).where(d.c.page_id.in_(part), d.c.extractor_version == version))})
    return out


def documents_of(conn: Connection, canonical_id: int) -> list[dict[str, Any]]:
    """Every document of a canonical URL, oldest first."""
    d = t.documents
    rows = conn.execute(sa.select(d).where(d.c.canonical_id == canonical_id).order_by(d.c.id)).mappings()
    return [_old_names(_times(dict(r))) for r in rows]


def _old_names(doc: dict[str, Any]) -> dict[str, Any]:
    # status and unusable_reason: the old names of state and reason (migration 0022), still given for one
    # release to what reads a document's fields (documents show; docs/vocabulary.md).
    doc["status"], doc["unusable_reason"] = doc.get("state"), doc.get("reason")
    return doc


def current_document(conn: Connection, canonical_id: int) -> dict[str, Any] | None:
    """The current document of a canonical URL: its newest usable one (highest id), or None."""
    d = t.documents
    row = conn.execute(sa.select(d).where(d.c.canonical_id == canonical_id, d.c.state == "usable")
                       .order_by(d.c.id.desc()).limit(1)).mappings().first()
    return None if row is None else _old_names(_times(dict(row)))


@dataclass(frozen=True)
class FoundDocuments:
    """The documents of what a reference names (``linkfold documents show``)."""

    located: Located
    documents: list[dict[str, Any]]


def documents_for(engine: Engine, ref: str, *, all_documents: bool = False) -> FoundDocuments:
    """The current document of what ``ref`` names (its newest usable one), or with ``all_documents`` every
    document of it, oldest first. ``ref`` is found the way ``lookup`` finds it (:func:`.lookup.locate`):
    the raw URL as loaded, any variant that canonicalises to a stored URL under the ruleset in force, a
    url key, or an article or story ID (its founder's documents). Raises :class:`NotFound` when nothing
    is stored for it."""
    shown = ref[:200]
    with engine.connect() as conn:
        try:
            found = locate(engine, conn, ref)
        except InputError as exc:
            raise NotFound(f"{shown!r} is not a URL linkfold can store: {exc}") from None
        except NotFound as exc:
            raise NotFound(f"no canonical URL stored for {shown}", hint=str(exc)) from None
        if all_documents:
            docs = documents_of(conn, found.canonical_id)
        else:
            current = current_document(conn, found.canonical_id)
            docs = [current] if current else []
    if not docs:
        raise NotFound(f"no {'document' if all_documents else 'usable document'} stored for {shown}",
                       hint=None if all_documents else "--all shows unusable ones with their reason")
    return FoundDocuments(found, docs)


def content_totals(conn: Connection) -> dict[str, Any]:
    """Counts for reports: pages, fetch outcomes by state and class, documents by state and reason."""
    p, fr, d = t.pages, t.fetch_results, t.documents
    out: dict[str, Any] = {"pages": int(conn.execute(sa.select(sa.func.count()).select_from(p)).scalar_one()),
                           "fetch": {}, "documents": {}}
    for state, failure, n in conn.execute(sa.select(fr.c.state, fr.c.failure, sa.func.count())
                                          .group_by(fr.c.state, fr.c.failure)):
        out["fetch"].setdefault(state, {})[failure or "-"] = int(n)
    for state, reason, n in conn.execute(sa.select(d.c.state, d.c.reason, sa.func.count())
                                         .group_by(d.c.state, d.c.reason)):
        out["documents"].setdefault(state, {})[reason or "-"] = int(n)
    return out


__all__ = [
    "COMPRESSION_LEVEL",
    "FetchOutcome",
    "FetchPending",
    "FoundDocuments",
    "StoredPage",
    "compress_body",
    "content_totals",
    "count_extract_pending",
    "count_fetch_pending",
    "current_document",
    "decompress_body",
    "document_ids",
    "documents_for",
    "documents_of",
    "fetch_attempts",
    "fetch_result",
    "load_pages",
    "page_row",
    "pages_of",
    "record_fetch_outcomes",
    "select_extract_pending",
    "select_fetch_pending",
    "store_documents",
    "store_pages",
]
