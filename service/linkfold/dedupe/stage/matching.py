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
from sqlalchemy.engine import Connection, Engine

from ...progress import SILENT, Progress
from ...store import candidates as cands
from ...store import pending as pq
from ...store.clock import now
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


def count_unmatched(conn: Connection, todo: pq.Claim | None = None) -> int:
    todo = todo if todo is not None else pq.claim(conn, MATCHED)
    if todo.empty:
        return 0
    return cands.count_keyed(conn, cands.Window(0, todo.top, todo))


@dataclass(frozen=True)
class _Doc:
    features: DocFeatures
    canonical_id: int
    text_hash: str | None


def _load_docs(conn: Connection, doc_ids: Sequence[int], params: SignatureParams) -> dict[int, _Doc]:
    out: dict[int, _Doc] = {}
    for r in cands.document_rows(conn, doc_ids):
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
    current document they have not met (``store.candidates.Window.partner``); returns the number of documents matched."""
    w = cands.Window(lo, hi, claim if claim is not None else pq.Claim(MATCHED, ((lo + 1, hi),)))
    skip, largest = cands.oversize_buckets(conn, w, max_bucket)
    counts.oversize_buckets += len(skip)
    counts.largest_bucket = max(counts.largest_bucket, largest)
    band = cands.band_pairs(conn, w, skip)
    exact = cands.hash_pairs(conn, w)
    skip_titles, largest_titles = cands.oversize_titles(conn, w, max_bucket)
    counts.oversize_buckets += len(skip_titles)
    counts.largest_bucket = max(counts.largest_bucket, largest_titles)
    titles = cands.title_pairs(conn, w, skip_titles, thresholds.min_words) - band - exact
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
    return cands.count_keyed(conn, w)


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
            ids = cands.window_ids(conn, cands.Window(lo, top, todo), window)
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
