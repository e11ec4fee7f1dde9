"""Matching and verification: candidate pairs from the band-key table, checked, stored as links.

Documents signed past the ``dedupe.matched`` mark are matched in id windows, one transaction each (the
mark moves with the links it produced). A pair ``(x, y)`` with ``x < y`` is looked for only when ``y``
is matched — the join asks for partners with a *smaller* document id — so every pair is examined exactly
once however the documents were split into runs, and the cost of a window is its own documents' band
keys joined on the (band, key) index: it grows with the new documents, not with the registry.

Candidates come from three set-based queries: equal band keys (LSH, docs/dedupe.md §4), equal
``text_hash`` (an exact copy, found even when a text is too short for shingles to decide), and equal title
keys across outlets where at least one text is short (§4a: a rewritten brief shares no shingles, and for
short texts the title decides). Every
candidate is verified by the pure rule (§6); accepted pairs become ``links`` rows between the two
documents' canonical URLs:

* ``same_text`` — the normalised texts are equal;
* ``similar_text`` — the verdict of :func:`linkfold.dedupe.verify_pairs`, with every score in ``detail``.

Which level a link serves follows from the outlets of its two ends (same outlet: article; different
outlets: story), so a link never needs rewriting when thresholds are read again.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ...progress import SILENT, Progress
from ...store import pending as pq
from ...store import tables as t
from ...store.clock import now
from ...store.clusters import chunks
from ...store.evidence import add_links
from .. import DocFeatures, SignatureParams, Thresholds, shingle_hashes, signature_from_bytes, verify_pairs
from .signing import MATCHED

log = logging.getLogger("linkfold")

LINK_SOURCE = "dedupe"
WINDOW = 2000  # documents matched per transaction


@dataclass
class MatchCounts:
    matched: int = 0
    candidates: int = 0
    same_text: int = 0
    similar_text: int = 0
    rejected: int = 0
    oversize_buckets: int = 0
    largest_bucket: int = 0
    links_written: int = 0
    title_candidates: int = 0


@dataclass(frozen=True)
class _Window:
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


def _keyed(w: _Window) -> sa.Subquery:
    """Ids of the window's documents that have band keys or title keys: the current documents that
    can meet a candidate (a short text without shingles may still have a title that decides)."""
    bk, tk = t.band_keys, t.title_keys
    return sa.union(sa.select(bk.c.document_id.label("id")).where(w.holds(bk.c.document_id)),
                    sa.select(tk.c.document_id.label("id")).where(w.holds(tk.c.document_id))).subquery()


def count_unmatched(conn: Connection, todo: pq.Claim | None = None) -> int:
    todo = todo if todo is not None else pq.claim(conn, MATCHED)
    if todo.empty:
        return 0
    return int(conn.execute(sa.select(sa.func.count()).select_from(_keyed(_Window(0, todo.top, todo))))
               .scalar_one())


def _oversize(conn: Connection, w: _Window, max_bucket: int) -> tuple[list[tuple[int, int]], int]:
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


def _band_pairs(conn: Connection, w: _Window, skip: Sequence[tuple[int, int]]) -> set[tuple[int, int]]:
    n, o = t.band_keys.alias("n"), t.band_keys.alias("o")
    q = (sa.select(o.c.document_id, n.c.document_id).distinct()
         .select_from(n.join(o, sa.and_(o.c.band == n.c.band, o.c.key == n.c.key,
                                        w.partner(o.c.document_id, n.c.document_id))))
         .where(w.holds(n.c.document_id)))
    if skip:
        q = q.where(sa.tuple_(n.c.band, n.c.key).not_in(list(skip)))
    return {_pair(a, b) for a, b in conn.execute(q)}


def _title_oversize(conn: Connection, w: _Window, max_bucket: int) -> tuple[list[int], int]:
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


def _title_pairs(conn: Connection, w: _Window, skip: Sequence[int], min_words: int) -> set[tuple[int, int]]:
    """Pairs sharing a title key, on different outlets, at least one of them short: the only pairs the
    title-and-date rule can join (docs/dedupe.md §6). Partners as for band keys (``_Window.partner``)."""
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


def _hash_pairs(conn: Connection, w: _Window) -> set[tuple[int, int]]:
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


@dataclass(frozen=True)
class _Doc:
    features: DocFeatures
    canonical_id: int
    text_hash: str | None


def _load_docs(conn: Connection, doc_ids: Sequence[int], params: SignatureParams) -> dict[int, _Doc]:
    d, c, sg = t.documents, t.canonical_urls, t.signatures
    out: dict[int, _Doc] = {}
    for part in chunks(sorted(set(doc_ids))):
        q = (sa.select(d.c.id, d.c.canonical_id, d.c.title, d.c.text, d.c.text_hash, d.c.word_count,
                       d.c.published, c.c.outlet, sg.c.signature)
             .select_from(d.join(c, c.c.id == d.c.canonical_id).join(sg, sg.c.document_id == d.c.id))
             .where(d.c.id.in_(part)))
        for r in conn.execute(q):
            text = r.text or ""
            feats = DocFeatures(
                doc=int(r.id), outlet=r.outlet, words=int(r.word_count),
                signature=signature_from_bytes(r.signature, params) if text else None,
                # Exact Jaccard where both texts are at hand: the estimate alone falls below 0.5 about
                # one time in eight at J = 0.55 (docs/dedupe.md §6).
                shingles=shingle_hashes(text, params.shingle_size, width=params.width) if text else None,
                title=r.title, published=r.published.date() if r.published else None)
            out[int(r.id)] = _Doc(feats, int(r.canonical_id), r.text_hash)
    return out


def _link_row(kind: str, a: _Doc, b: _Doc, detail: dict[str, Any], run_id: int | None,
              stamp: datetime) -> dict[str, Any]:
    return {"kind": kind, "src_id": a.canonical_id, "dst_id": b.canonical_id, "source": LINK_SOURCE,
            "detail": detail | {"documents": [a.features.doc, b.features.doc]}, "run_id": run_id,
            "created_at": stamp}


def match_window(conn: Connection, lo: int, hi: int, params: SignatureParams, thresholds: Thresholds, *,
                 max_bucket: int, run_id: int | None, counts: MatchCounts, claim: pq.Claim | None = None) -> int:
    """Match the documents of ``claim`` (default: every document) with ids in ``(lo, hi]`` against every
    current document they have not met (``_Window.partner``); returns the number of documents matched."""
    w = _Window(lo, hi, claim if claim is not None else pq.Claim(MATCHED, ((lo + 1, hi),)))
    skip, largest = _oversize(conn, w, max_bucket)
    counts.oversize_buckets += len(skip)
    counts.largest_bucket = max(counts.largest_bucket, largest)
    band = _band_pairs(conn, w, skip)
    exact = _hash_pairs(conn, w)
    skip_titles, largest_titles = _title_oversize(conn, w, max_bucket)
    counts.oversize_buckets += len(skip_titles)
    counts.largest_bucket = max(counts.largest_bucket, largest_titles)
    titles = _title_pairs(conn, w, skip_titles, thresholds.min_words) - band - exact
    counts.title_candidates += len(titles)
    pairs = sorted(band | exact | titles)
    counts.candidates += len(pairs)
    docs = _load_docs(conn, [x for p in pairs for x in p], params)
    stamp = now()
    rows: list[dict[str, Any]] = []
    rest: list[tuple[int, int]] = []
    for a, b in pairs:
        da, db = docs.get(a), docs.get(b)
        if da is None or db is None or da.canonical_id == db.canonical_id:
            continue
        if da.text_hash is not None and da.text_hash == db.text_hash:
            fa, fb = da.features, db.features
            if fa.outlet is None or fb.outlet is None:
                continue
            rows.append(_link_row("same_text", da, db, {"exact_jaccard": 1.0, "strength": 1.0,
                                                       "same_outlet": fa.outlet == fb.outlet}, run_id, stamp))
            counts.same_text += 1
        else:
            rest.append((a, b))
    order = sorted({x for p in rest for x in p})
    index = {doc: row for row, doc in enumerate(order)}
    feats = [docs[doc].features for doc in order]
    verified = verify_pairs(feats, np.array([(index[a], index[b]) for a, b in rest], dtype=np.int64),
                            thresholds=thresholds)
    for link in verified:
        v = link.verdict
        rows.append(_link_row("similar_text", docs[link.a], docs[link.b], {
            "level": v.level.value, "reason": v.reason.value, "strength": v.strength,
            "est_jaccard": v.est_jaccard, "exact_jaccard": v.exact_jaccard, "title_ratio": v.title_ratio,
            "date_gap_days": v.date_gap_days, "same_outlet": v.same_outlet}, run_id, stamp))
    counts.similar_text += len(verified)
    counts.rejected += len(rest) - len(verified)
    counts.links_written += add_links(conn, rows)
    return int(conn.execute(sa.select(sa.func.count()).select_from(_keyed(w))).scalar_one())


def match_pending(engine: Engine, params: SignatureParams, thresholds: Thresholds, *, max_bucket: int,
                  run_id: int | None, progress: Progress = SILENT, window: int = WINDOW) -> MatchCounts:
    counts = MatchCounts()
    with engine.connect() as conn:
        todo = pq.claim(conn, MATCHED)
        total = count_unmatched(conn, todo)
    progress.start("matching and verifying", total)
    lo, top = 0, todo.top
    while not todo.empty:
        with engine.begin() as conn:
            keyed = _keyed(_Window(lo, top, todo))
            ids = conn.execute(sa.select(keyed.c.id).order_by(keyed.c.id).limit(window)).scalars().all()
            if not ids:
                break
            hi = int(ids[-1]) if len(ids) == window else top
            done = match_window(conn, lo, hi, params, thresholds, max_bucket=max_bucket, run_id=run_id,
                                counts=counts, claim=todo)
            counts.matched += done
            pq.advance(conn, todo, hi, run_id=run_id)
        lo = hi
        progress.advance(done)
    with engine.begin() as conn:
        pq.settle(conn, todo, run_id=run_id)
    progress.finish()
    if counts.oversize_buckets:
        log.warning("skipped %d band-key bucket(s) of more than %d documents (largest: %d); see lsh_max_bucket",
                    counts.oversize_buckets, max_bucket, counts.largest_bucket)
    return counts


__all__ = ["LINK_SOURCE", "MatchCounts", "count_unmatched", "match_pending", "match_window"]
