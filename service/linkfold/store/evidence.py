"""Writes and queries of the evidence tables: ``links`` (shared by every stage) and the follow state
(``follow_results``, ``follow_attempts``).

Every function works inside the caller's transaction (``conn``), so a stage commits one batch at a time
and a crash loses at most the batch in flight. Nothing here deletes: links and attempts are append-only;
``follow_results`` holds the latest outcome per canonical URL, and every outcome is also an attempt row.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..canon import Canonical
from . import tables as t
from .bulk import insert_new_rows
from .clock import utc
from .lookup import ids_by_hash
from .text import raw_hash, storable

_IN_CHUNK = 500  # ids per IN (…) list, well under SQLite's limit of bound parameters
def _chunks(items: Sequence[Any]) -> Iterator[Sequence[Any]]:
    for i in range(0, len(items), _IN_CHUNK):
        yield items[i:i + _IN_CHUNK]


# --- URLs met while following ----------------------------------------------------------------------------
@dataclass(frozen=True)
class UrlIds:
    canonical_id: int
    raw_id: int


def register_urls(conn: Connection, urls: Iterable[tuple[str, Canonical]], *, ruleset_id: int,
                  stamp: datetime | None = None) -> dict[str, UrlIds]:
    """Make sure each (raw URL, its canonical form) is stored; return the ids by raw URL text.

    A hop's URL is a raw URL like any other (text exactly as the chain produced it), so a later stage can
    fetch the URL a server named rather than its canonical form. A raw URL that is already stored keeps
    the canonical URL it has; the returned canonical id is that of the form computed now.
    """
    stamp = stamp or datetime.now(UTC)
    pairs = {storable(raw): canon for raw, canon in urls}
    if not pairs:
        return {}
    canon_rows: dict[str, dict[str, Any]] = {}
    for canon in pairs.values():
        canon_rows.setdefault(canon.url_key, {
            "url_key": canon.url_key, "url": canon.url, "host": canon.host, "domain": canon.domain,
            "outlet": canon.outlet, "is_article": canon.is_article, "ruleset_id": ruleset_id,
            "created_at": stamp})
    insert_new_rows(conn, t.canonical_urls, list(canon_rows.values()), ["url_key"])
    c = t.canonical_urls
    ids: dict[str, int] = {}
    for part in _chunks(list(canon_rows)):
        ids.update({k: int(i) for i, k in conn.execute(sa.select(c.c.id, c.c.url_key).where(c.c.url_key.in_(part)))})
    hashes = {raw: raw_hash(raw) for raw in pairs}
    raw_rows = [{"raw_hash": hashes[raw], "raw": raw, "canonical_id": ids[canon.url_key], "ruleset_id": ruleset_id,
                 "reason": None, "created_at": stamp} for raw, canon in pairs.items()]
    insert_new_rows(conn, t.raw_urls, raw_rows, ["raw_hash"])
    raw_ids = ids_by_hash(conn, hashes.values())
    return {raw: UrlIds(ids[canon.url_key], raw_ids[hashes[raw]]) for raw, canon in pairs.items()}


# --- links ---------------------------------------------------------------------------------------------------
def add_links(conn: Connection, rows: Sequence[Mapping[str, Any]]) -> int:
    """Append links, skipping any that repeats a stored one in (kind, src_id, dst_id, source).

    Following the same short link twice observes the same redirect twice; evidence is about *whether*
    two URLs are linked, so one row per source is kept, with the time it was first seen. Returns the
    number written.
    """
    if not rows:
        return 0
    lk = t.links
    wanted: dict[tuple, Mapping[str, Any]] = {}
    for row in rows:
        wanted.setdefault((row["kind"], row["src_id"], row["dst_id"], row.get("source")), row)
    src_ids = sorted({key[1] for key in wanted})
    for part in _chunks(src_ids):
        stored = conn.execute(sa.select(lk.c.kind, lk.c.src_id, lk.c.dst_id, lk.c.source)
                              .where(lk.c.src_id.in_(part)))
        for kind, src, dst, source in stored:
            wanted.pop((kind, src, dst, source), None)
    if not wanted:
        return 0
    full = [{"kind": r["kind"], "src_id": r["src_id"], "dst_id": r["dst_id"], "status": r.get("status"),
             "hop": r.get("hop"), "source": r.get("source"), "detail": r.get("detail"),
             "run_id": r.get("run_id"), "created_at": r["created_at"]} for r in wanted.values()]
    # executemany rather than COPY: the JSON detail needs the driver's adaptation.
    conn.execute(sa.insert(lk), full)
    return len(full)


def links_of(conn: Connection, canonical_id: int, *, kind: str | None = None) -> list[dict[str, Any]]:
    """Every link from or to a canonical URL, oldest first."""
    lk = t.links
    q = sa.select(lk).where(sa.or_(lk.c.src_id == canonical_id, lk.c.dst_id == canonical_id))
    if kind is not None:
        q = q.where(lk.c.kind == kind)
    return [dict(r) | {"created_at": utc(r["created_at"])} for r in conn.execute(q.order_by(lk.c.id)).mappings()]


# --- what points at a URL (sink detection, docs/dedupe.md §10) --------------------------------------------
#: Link kinds that say "this URL stands for that one": their targets can be sinks.
POINTING_KINDS = ("redirect", "declared")


@dataclass(frozen=True)
class UrlFacts:
    """What sink detection needs of one canonical URL."""

    canonical_id: int
    url: str
    host: str
    is_article: bool | None


def url_facts(conn: Connection, ids: Iterable[int]) -> dict[int, UrlFacts]:
    c = t.canonical_urls
    out: dict[int, UrlFacts] = {}
    for part in _chunks(sorted(set(ids))):
        for r in conn.execute(sa.select(c.c.id, c.c.url, c.c.host, c.c.is_article).where(c.c.id.in_(part))):
            out[int(r.id)] = UrlFacts(int(r.id), r.url, r.host, r.is_article)
    return out


def pointing_counts(conn: Connection, targets: Iterable[int]) -> dict[int, int]:
    """Distinct sources of ``redirect``/``declared`` links into each target (itself excluded); an upper
    bound of the fan-in, counted in the database."""
    lk = t.links
    out: dict[int, int] = {}
    for part in _chunks(sorted(set(targets))):
        q = (sa.select(lk.c.dst_id, sa.func.count(sa.distinct(lk.c.src_id)))
             .where(lk.c.dst_id.in_(part), lk.c.kind.in_(POINTING_KINDS), lk.c.src_id != lk.c.dst_id)
             .group_by(lk.c.dst_id))
        out.update({int(d): int(n) for d, n in conn.execute(q)})
    return out


def pointing_sources(conn: Connection, targets: Iterable[int]) -> dict[int, list[UrlFacts]]:
    """The distinct sources of ``redirect``/``declared`` links into each target (itself excluded)."""
    lk, c = t.links, t.canonical_urls
    out: dict[int, dict[int, UrlFacts]] = {}
    for part in _chunks(sorted(set(targets))):
        q = (sa.select(lk.c.dst_id, c.c.id, c.c.url, c.c.host, c.c.is_article)
             .select_from(lk.join(c, c.c.id == lk.c.src_id))
             .where(lk.c.dst_id.in_(part), lk.c.kind.in_(POINTING_KINDS), lk.c.src_id != lk.c.dst_id))
        for r in conn.execute(q):
            out.setdefault(int(r.dst_id), {})[int(r.id)] = UrlFacts(int(r.id), r.url, r.host, r.is_article)
    return {dst: list(by_id.values()) for dst, by_id in out.items()}


def pointed_targets(conn: Connection, *, min_sources: int, dataset_id: int | None = None) -> list[int]:
    """Targets of ``redirect``/``declared`` links that could be sinks: more than ``min_sources`` distinct
    sources, not an article by the site rules, or a site's root URL (``https://host/``). With
    ``dataset_id``, only targets of links from URLs sighted in that dataset, or where their chains ended."""
    lk, c, r = t.links, t.canonical_urls, t.raw_urls
    q = (sa.select(lk.c.dst_id).select_from(lk.join(c, c.c.id == lk.c.dst_id))
         .where(lk.c.kind.in_(POINTING_KINDS), lk.c.src_id != lk.c.dst_id))
    if dataset_id is not None:
        sighted = (sa.select(r.c.canonical_id).select_from(r.join(t.sightings, t.sightings.c.raw_url_id == r.c.id))
                   .where(t.sightings_in_dataset(dataset_id), r.c.canonical_id.is_not(None)))
        ended = sa.select(t.follow_results.c.final_id).where(t.follow_results.c.canonical_id.in_(sighted))
        q = q.where(sa.or_(lk.c.src_id.in_(sighted), lk.c.dst_id.in_(ended)))
    # A root URL ends with its first "/" after the host: "%/" but not "%://%/%/".
    root = sa.and_(c.c.url.like("%/"), sa.not_(c.c.url.like("%://%/%/")))
    q = q.group_by(lk.c.dst_id, c.c.is_article, c.c.url).having(sa.or_(
        sa.func.count(sa.distinct(lk.c.src_id)) > min_sources, c.c.is_article.is_(False), root))
    return sorted(int(i) for i in conn.execute(q).scalars())


def link_ends_on_hosts(conn: Connection, hosts: Iterable[str]) -> set[int]:
    """Canonical URLs on ``hosts`` (or their subdomains) that are an end of any link."""
    c, lk = t.canonical_urls, t.links
    names = sorted(set(hosts))
    if not names:
        return set()
    on = sa.or_(*[sa.or_(c.c.host == h, c.c.host.like("%." + h)) for h in names])
    ends = sa.union(sa.select(lk.c.src_id.label("cid")), sa.select(lk.c.dst_id.label("cid"))).subquery()
    q = sa.select(c.c.id).where(on, c.c.id.in_(sa.select(ends.c.cid)))
    return {int(i) for i in conn.execute(q).scalars()}


# --- follow state ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Outcome:
    """One follow outcome for one canonical URL, as written to ``follow_results``/``follow_attempts``."""

    canonical_id: int
    state: str
    via: str  # fetched | chain | imported
    at: datetime
    failure: str | None = None
    http_status: int | None = None
    final_id: int | None = None
    hops: int | None = None
    next_attempt_at: datetime | None = None
    detail: str | None = None
    reason: str | None = None  # a refusal's stable key (private, loopback …, robots_file)


def record_outcomes(conn: Connection, outcomes: Sequence[Outcome], *, run_id: int | None,
                    replace: str = "always") -> int:
    """Store outcomes: the latest in ``follow_results``, each also as an attempt in ``follow_attempts``.

    ``replace`` says when an existing result is overwritten: ``always`` (a new attempt of the URL
    itself), ``unresolved`` (an import: it settles a failed URL but never a resolved one) or ``learned``
    (a URL learned from another URL's chain: it fills a gap or replaces what an earlier chain taught,
    never the URL's own outcome, and is not an attempt of its own).
    Returns the number of results written.
    """
    if not outcomes:
        return 0
    fr = t.follow_results
    latest: dict[int, Outcome] = {}
    for outcome in outcomes:
        latest[outcome.canonical_id] = outcome  # the last one of a batch wins, as it would one by one
    existing: dict[int, tuple[int, str, str]] = {}
    for part in _chunks(sorted(latest)):
        for cid, attempts, state, via in conn.execute(
                sa.select(fr.c.canonical_id, fr.c.attempts, fr.c.state, fr.c.via)
                .where(fr.c.canonical_id.in_(part))):
            existing[int(cid)] = (int(attempts), state, via)
    inserts, updates = [], []
    for cid, o in latest.items():
        values = {"state": o.state, "failure": o.failure, "http_status": o.http_status, "final_id": o.final_id,
                  "hops": o.hops, "via": o.via, "last_attempt_at": o.at, "next_attempt_at": o.next_attempt_at,
                  "run_id": run_id, "reason": o.reason}
        if cid not in existing:
            inserts.append({"canonical_id": cid, "attempts": 0 if replace == "learned" else 1,
                            "first_attempt_at": o.at, **values})
            continue
        attempts, state, via = existing[cid]
        if replace == "always" or (replace == "unresolved" and state != "resolved"):
            updates.append({"b_cid": cid, "attempts": attempts + 1, **values})
        elif replace == "learned" and via == "chain":
            updates.append({"b_cid": cid, "attempts": attempts, **values})
    if inserts:
        conn.execute(sa.insert(fr), inserts)
    if updates:
        stmt = sa.update(fr).where(fr.c.canonical_id == sa.bindparam("b_cid")).values(
            {k: sa.bindparam(k) for k in updates[0] if k != "b_cid"})
        conn.execute(stmt, updates)
    if replace != "learned":
        conn.execute(sa.insert(t.follow_attempts), [
            {"canonical_id": o.canonical_id, "run_id": run_id, "attempted_at": o.at, "state": o.state,
             "failure": o.failure, "http_status": o.http_status, "final_id": o.final_id, "hops": o.hops,
             "detail": (o.detail or None) and o.detail[:500]} for o in outcomes])
    return len(inserts) + len(updates)


def follow_result(conn: Connection, canonical_id: int) -> dict[str, Any] | None:
    fr = t.follow_results
    row = conn.execute(sa.select(fr).where(fr.c.canonical_id == canonical_id)).mappings().first()
    if row is None:
        return None
    return {k: (utc(v) if isinstance(v, datetime) else v) for k, v in dict(row).items()}


def follow_attempts_of(conn: Connection, canonical_id: int) -> list[dict[str, Any]]:
    fa = t.follow_attempts
    rows = conn.execute(sa.select(fa).where(fa.c.canonical_id == canonical_id).order_by(fa.c.id)).mappings()
    return [{k: (utc(v) if isinstance(v, datetime) else v) for k, v in dict(r).items()} for r in rows]


@dataclass(frozen=True)
class Pending:
    canonical_id: int
    url: str  # the canonical URL
    raw: str | None  # the first raw URL stored for it, the one to fetch (see docs/following.md)


def _pending_where(q: sa.Select, *, hosts: Iterable[str] | None, dataset_id: int | None, retry_failed: bool,
                   retry_refused: bool, now: datetime | None, due_only: bool = True) -> sa.Select | None:
    """``q`` (over canonical_urls outer-joined to follow_results) narrowed to the pending URLs; None when
    ``hosts`` is empty, so nothing can be pending."""
    c, fr, r = t.canonical_urls, t.follow_results, t.raw_urls
    if retry_failed:
        # URLs that only inherited a failure from another URL's chain are settled when that URL is retried.
        q = q.where(fr.c.state == "failed", fr.c.via != "chain")
        if due_only:
            q = q.where(fr.c.next_attempt_at <= (now or datetime.now(UTC)))
    elif retry_refused:
        q = q.where(fr.c.state == "refused", fr.c.via != "chain")
    else:
        q = q.where(fr.c.id.is_(None))
    if hosts is not None:
        host_list = sorted(set(hosts))
        if not host_list:
            return None
        q = q.where(c.c.host.in_(host_list))
    if dataset_id is not None:
        sighted = (sa.select(r.c.canonical_id).select_from(r.join(t.sightings, t.sightings.c.raw_url_id == r.c.id))
                   .where(t.sightings_in_dataset(dataset_id), r.c.canonical_id.is_not(None)))
        q = q.where(c.c.id.in_(sighted))
    return q


def select_pending(conn: Connection, *, hosts: Iterable[str] | None, dataset_id: int | None = None,
                   retry_failed: bool = False, retry_refused: bool = False, now: datetime | None = None,
                   limit: int | None = None, due_only: bool = True) -> list[Pending]:
    """Canonical URLs to follow, oldest first.

    Without ``retry_failed``: those never followed. With it: those whose own last outcome is ``failed``
    and, unless ``due_only`` is false, whose ``next_attempt_at`` has passed. ``hosts`` (canonical host
    names) restricts the choice; ``None`` means every host. ``dataset_id`` keeps URLs sighted in that dataset.
    """
    c, fr, r = t.canonical_urls, t.follow_results, t.raw_urls
    first_raw = (sa.select(r.c.raw).where(r.c.canonical_id == c.c.id).order_by(r.c.id).limit(1)
                 .correlate(c).scalar_subquery())
    base = sa.select(c.c.id, c.c.url, first_raw.label("raw")).select_from(
        c.outerjoin(fr, fr.c.canonical_id == c.c.id))
    q = _pending_where(base, hosts=hosts, dataset_id=dataset_id, retry_failed=retry_failed,
                       retry_refused=retry_refused, now=now, due_only=due_only)
    if q is None:
        return []
    q = q.order_by(c.c.id)
    if limit is not None:
        q = q.limit(limit)
    return [Pending(int(i), url, raw) for i, url, raw in conn.execute(q)]


def count_pending(conn: Connection, *, hosts: Iterable[str] | None, dataset_id: int | None = None,
                  retry_failed: bool = False, retry_refused: bool = False, now: datetime | None = None) -> int:
    """How many URLs :func:`select_pending` would choose, counted in the database."""
    c, fr = t.canonical_urls, t.follow_results
    base = sa.select(sa.func.count()).select_from(c.outerjoin(fr, fr.c.canonical_id == c.c.id))
    q = _pending_where(base, hosts=hosts, dataset_id=dataset_id, retry_failed=retry_failed,
                       retry_refused=retry_refused, now=now)
    return 0 if q is None else int(conn.execute(q).scalar_one())


def follow_totals(conn: Connection, *, dataset_id: int | None = None) -> dict[str, Any]:
    """Follow outcomes of the canonical URLs that datasets hold (one dataset's, or any dataset's).

    Counts the URLs sighted, not every URL with an outcome: the URLs that chains passed through or ended
    at are outcomes too (``via = chain``), but no dataset held them unless one sighted them as well.
    Returns ``held`` (distinct canonical URLs sighted), ``resolved``, ``failed`` and ``refused`` by class,
    and ``refusals`` by reason (``None`` for a refusal stored before reasons were).
    """
    fr, r, s = t.follow_results, t.raw_urls, t.sightings
    if dataset_id is not None:
        sighted = (sa.select(r.c.canonical_id).select_from(r.join(s, s.c.raw_url_id == r.c.id))
                   .where(r.c.canonical_id.is_not(None), t.sightings_in_dataset(dataset_id)))
    else:
        # Every raw URL once, with an index probe into the sightings, rather than every sighting.
        sighted = sa.select(r.c.canonical_id).where(
            r.c.canonical_id.is_not(None), sa.exists().where(s.c.raw_url_id == r.c.id))
    held_ids = sighted.distinct().subquery()
    held = int(conn.execute(sa.select(sa.func.count()).select_from(held_ids)).scalar_one())
    q = (sa.select(fr.c.state, fr.c.failure, fr.c.reason, sa.func.count())
         .select_from(fr.join(held_ids, held_ids.c.canonical_id == fr.c.canonical_id))
         .group_by(fr.c.state, fr.c.failure, fr.c.reason))
    out: dict[str, Any] = {"held": held, "resolved": 0, "failed": {}, "refused": {}, "refusals": {}}
    for state, failure, reason, n in conn.execute(q):
        if state == "resolved":
            out["resolved"] += int(n)
            continue
        by_class = out.setdefault(state, {})
        by_class[failure or "unknown"] = by_class.get(failure or "unknown", 0) + int(n)
        if state == "refused":
            out["refusals"][reason] = out["refusals"].get(reason, 0) + int(n)
    return out


__all__ = [
    "POINTING_KINDS",
    "Outcome",
    "Pending",
    "UrlFacts",
    "UrlIds",
    "add_links",
    "follow_attempts_of",
    "follow_result",
    "follow_totals",
    "link_ends_on_hosts",
    "links_of",
    "pointed_targets",
    "pointing_counts",
    "pointing_sources",
    "record_outcomes",
    "register_urls",
    "select_pending",
    "url_facts",
]
