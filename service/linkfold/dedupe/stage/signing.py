"""Signing: MinHash signatures and LSH band keys for documents not yet signed, stored in the database.

Pending documents are the documents of the ``dedupe.signed`` claim (``store/pending.py``: past the mark on
SQLite, the entries committed with the documents on PostgreSQL) that take part in finding copies, in id
order, one transaction per batch; on SQLite the mark moves in the same transaction, so a killed run
resumes at the first unsigned batch (on PostgreSQL a rerun skips what is signed already). They are the
usable documents and, for a canonical URL that has no usable
document, the short or empty ones (content reasons ``too_short`` and ``empty``: briefs, teasers, pages
with a headline only), for which the title decides (docs/dedupe.md §6). Only the newest usable document
of a canonical URL is its current one (docs/content.md), else its newest short one, looked up in the
whole table (on PostgreSQL an older document can be committed after a newer one was signed): when a
newer one is signed, the band and title keys of the older ones are removed (they are derived data; the signatures
stay), so candidate joins only ever meet current documents.

Title keys (:mod:`linkfold.dedupe.titles`) are written beside the band keys for current documents with a
publication date, and removed with them; documents signed before title keys existed get theirs on the
first run that finds the ``dedupe.titles`` mark missing, and are then matched again.

The parameter record of every signature is stored beside it. When the settings change, the stored
signatures that disagree are brought up to date: band keys are rebuilt from the stored signature when
only the banding changed (no text read again), and the signature is recomputed from the text otherwise.
"""

from __future__ import annotations

import logging
import time
import zlib
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy.engine import Connection, Engine

from ...executor import Executor, executor_for
from ...progress import SILENT, Progress
from ...store import pending as pq
from ...store import signatures as sg
from ...store.clock import now
from ...store.clusters import chunks, get_mark, set_mark
from ...store.signatures import SHORT_REASONS
from .. import (
    TITLE_KEY_NAME,
    SignatureParams,
    band_keys,
    empty_rows,
    signature_from_bytes,
    signature_to_bytes,
    signatures_from_texts,
    title_keys,
)

log = logging.getLogger("linkfold")

SIGNED = "dedupe.signed"
MATCHED = "dedupe.matched"
PARAMS = "dedupe.params"
TITLES = "dedupe.titles"


def titles_mark() -> int:
    """The title-key scheme as a number: a change of scheme rebuilds every title key."""
    return zlib.crc32(TITLE_KEY_NAME.encode("ascii"))


def params_mark(params: SignatureParams) -> int:
    """The band token as a number, so ``stage_marks`` can tell whether the settings changed."""
    return zlib.crc32(params.band_token.encode("ascii"))


@dataclass
class SignCounts:
    signed: int = 0
    empty: int = 0
    superseded: int = 0
    rebanded: int = 0
    resigned: int = 0
    titled: int = 0


def count_unsigned(conn: Connection) -> int:
    n = sg.count_taking_part(conn, pq.claim(conn, SIGNED))
    if get_mark(conn, TITLES) != titles_mark() and sg.any_signed(conn):
        n += 1   # signed documents without title keys: the next run gives them theirs
    return n


def settings_changed(conn: Connection, params: SignatureParams) -> bool:
    stored = get_mark(conn, PARAMS)
    return stored is not None and stored != params_mark(params)


def _band_rows(doc_ids: list[int], sigs: np.ndarray, params: SignatureParams) -> list[dict]:
    keys = band_keys(sigs, params.bands, params.rows)
    empty = empty_rows(sigs, params)
    rows: list[dict[str, int]] = []
    for row, doc in enumerate(doc_ids):
        if empty[row]:
            continue  # an empty text's signature equals every other empty one: never a candidate
        rows.extend({"document_id": doc, "band": b, "key": int(keys[row, b])} for b in range(params.bands))
    return rows


def _title_rows(docs: list[tuple[int, str | None, object]]) -> list[dict[str, int]]:
    """Title-key rows of (document id, title, published); the title rule needs both dates, so an
    undated document gets none."""
    return [{"document_id": doc, "key": key} for doc, title, published in docs if published is not None
            for key in title_keys(title)]


def backfill_title_keys(engine: Engine, *, run_id: int | None, batch_size: int) -> int:
    """Give the current signed documents their title keys when the ``dedupe.titles`` mark is missing or
    names another scheme (a registry signed before title keys existed); then every current document is
    matched again, once, so short texts signed earlier meet. Returns the number of keys written."""
    with engine.begin() as conn:
        if get_mark(conn, TITLES) == titles_mark():
            return 0
        sg.drop_all_title_keys(conn)
        written = 0
        for part in chunks(sg.current_signed(conn), max(1, min(batch_size, 500))):
            rows = _title_rows(sg.titles_of(conn, part))
            sg.add_title_keys(conn, rows)
            written += len(rows)
        set_mark(conn, TITLES, titles_mark(), run_id=run_id, now=now())
        if written:
            pq.reset(conn, MATCHED, run_id=run_id)
    if written:
        log.info("wrote %d title keys for documents signed before title keys existed; matching them again",
                 written)
    return written


#: Below this many documents to sign, ``auto`` signs in process: signing is fast (docs/dedupe.md §9) and
#: starting workers costs more than a few thousand signatures take.
SIGN_MIN_WORK = 5000
#: Texts per task handed to a worker.
SIGN_CHUNK = 500


def _signatures(texts: list[str], params: SignatureParams, runner: Executor) -> np.ndarray:
    """Signatures of ``texts`` in order, in chunks over the executor's workers (in process: one call)."""
    if runner.workers <= 1 or len(texts) <= SIGN_CHUNK:
        return signatures_from_texts(texts, params)
    from ..batch import signature_rows

    jobs = ((params, texts[lo:lo + SIGN_CHUNK]) for lo in range(0, len(texts), SIGN_CHUNK))
    return np.vstack(list(runner.map(signature_rows, jobs)))


def sign_pending(engine: Engine, params: SignatureParams, *, run_id: int | None, batch_size: int,
                 progress: Progress = SILENT, settings: Any = None,
                 executor: Executor | None = None) -> SignCounts:
    """Sign the documents pending; the shingling and MinHash go through ``executor`` (default: the one
    the settings choose for this much work), the writes stay here."""
    counts = SignCounts()
    counts.titled = backfill_title_keys(engine, run_id=run_id, batch_size=batch_size)
    with engine.connect() as conn:
        todo = pq.claim(conn, SIGNED)
        total = sg.count_taking_part(conn, todo)
    owned = executor is None
    runner = executor or executor_for(settings, work=total, min_work=SIGN_MIN_WORK)
    try:
        return _sign(engine, params, counts, todo, total, run_id=run_id, batch_size=batch_size,
                     progress=progress, runner=runner)
    finally:
        if owned:
            runner.close()


def _sign(engine: Engine, params: SignatureParams, counts: SignCounts, todo: Any, total: int, *,
          run_id: int | None, batch_size: int, progress: Progress, runner: Executor) -> SignCounts:
    progress.start("signing documents", total)
    started = time.monotonic()
    after = 0
    while True:
        with engine.begin() as conn:
            batch = sg.signing_batch(conn, todo, after, batch_size)
            if not batch:
                break
            after = int(batch[-1].id)
            # The newest document of a canonical URL is the one to sign (a short one only where the URL
            # has no usable document); any older one is superseded. The newest may be outside the batch:
            # on PostgreSQL an older document can be committed (and claimed) after a newer one was signed.
            full = sg.with_usable(conn, sorted({int(r.canonical_id) for r in batch}))
            newest: dict[int, int] = {}
            for r in batch:
                if r.state == "usable" or int(r.canonical_id) not in full:
                    newest[int(r.canonical_id)] = max(newest.get(int(r.canonical_id), 0), int(r.id))
            for cid, status, top in sg.newest_taking_part(conn, sorted(newest)):
                if status == "usable" or cid not in full:
                    newest[cid] = max(newest[cid], top)
            chosen = [(int(r.id), r.text or "") for r in batch if newest.get(int(r.canonical_id)) == int(r.id)]
            already = sg.signed_among(conn, [i for i, _ in chosen])
            chosen = [(i, txt) for i, txt in chosen if i not in already]
            ids = [i for i, _ in chosen]
            if chosen:
                sigs = _signatures([txt for _, txt in chosen], params, runner)
                stamp = now()
                sg.add_signatures(conn, [{"document_id": i, "params": params.band_token,
                                          "signature": signature_to_bytes(sigs[r], params),
                                          "created_at": stamp, "run_id": run_id} for r, i in enumerate(ids)])
                rows = _band_rows(ids, sigs, params)
                sg.add_band_keys(conn, rows)
                signed_now = set(ids)
                titled = _title_rows([(int(r.id), r.title, r.published) for r in batch if int(r.id) in signed_now])
                sg.add_title_keys(conn, titled)
                counts.titled += len(titled)
                counts.empty += len(ids) - len({r["document_id"] for r in rows})
                counts.signed += len(ids)
            counts.superseded += sg.supersede(conn, sorted(newest), newest)
            pq.advance(conn, todo, after, run_id=run_id)
            if get_mark(conn, PARAMS) is None:
                set_mark(conn, PARAMS, params_mark(params), run_id=run_id, now=now())
        progress.advance(len(batch))
    with engine.begin() as conn:
        pq.settle(conn, todo, run_id=run_id)
    progress.finish()
    if counts.signed:
        rate = counts.signed / max(time.monotonic() - started, 1e-9)
        log.info("signed %d documents (%.0f/s)", counts.signed, rate)
    return counts


def refresh_signatures(engine: Engine, params: SignatureParams, *, run_id: int | None, batch_size: int,
                       progress: Progress = SILENT) -> SignCounts:
    """Bring every current signature to ``params`` (after the settings changed); resets the match mark
    so every current document is matched again under the new banding."""
    counts = SignCounts()
    token = params.band_token
    with engine.connect() as conn:
        total = sg.count_stale(conn, token)
    progress.start("refreshing signatures", total)
    last = 0
    while True:
        with engine.begin() as conn:
            batch = sg.stale_batch(conn, token, last, batch_size)
            if not batch:
                break
            last = int(batch[-1].document_id)
            ids = [int(r.document_id) for r in batch]
            current = sg.banded_among(conn, ids)
            sigs = np.empty((len(batch), params.num_perm), dtype=params.dtype)
            resign = []
            for row, r in enumerate(batch):
                old = SignatureParams.parse(r.params)
                if old.signature_token == params.signature_token:
                    sigs[row] = signature_from_bytes(r.signature, params)
                    counts.rebanded += 1
                else:
                    resign.append(row)
            if resign:
                sigs[resign] = signatures_from_texts([batch[i].text or "" for i in resign], params)
                counts.resigned += len(resign)
            sg.replace_signatures(conn, token, {i: signature_to_bytes(sigs[r], params) for r, i in enumerate(ids)},
                                  run_id=run_id)
            sg.drop_band_keys(conn, ids)
            keep = [r for r, i in enumerate(ids) if i in current]
            sg.add_band_keys(conn, _band_rows([ids[r] for r in keep], sigs[keep], params))
        progress.advance(len(batch))
    with engine.begin() as conn:
        set_mark(conn, PARAMS, params_mark(params), run_id=run_id, now=now())
        pq.reset(conn, MATCHED, run_id=run_id)
    progress.finish()
    return counts


__all__ = ["MATCHED", "PARAMS", "SHORT_REASONS", "SIGNED", "TITLES", "SignCounts", "backfill_title_keys", "count_unsigned",
           "params_mark", "refresh_signatures", "settings_changed", "sign_pending", "titles_mark"]
