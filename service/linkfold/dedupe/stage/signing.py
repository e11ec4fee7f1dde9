"""Signing: MinHash signatures and LSH band keys for documents not yet signed, stored in the database.

Pending documents are the usable documents past the ``dedupe.signed`` mark, in id order, one transaction
per batch; the mark moves in the same transaction, so a killed run resumes at the first unsigned batch.
Only the newest usable document of a canonical URL is its current one (docs/content.md): when a newer
one is signed, the band keys of the older ones are removed (they are derived data; the signatures stay),
so candidate joins only ever meet current documents.

The parameter record of every signature is stored beside it. When the settings change, the stored
signatures that disagree are brought up to date: band keys are rebuilt from the stored signature when
only the banding changed (no text read again), and the signature is recomputed from the text otherwise.
"""

from __future__ import annotations

import logging
import time
import zlib
from dataclasses import dataclass

import numpy as np
import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ...progress import SILENT, Progress
from ...store import tables as t
from ...store.bulk import insert_rows
from ...store.clusters import chunks, get_mark, set_mark
from ...store.registry import now
from .. import (
    SignatureParams,
    band_keys,
    empty_rows,
    signature_from_bytes,
    signature_to_bytes,
    signatures_from_texts,
)

log = logging.getLogger("linkfold")

SIGNED = "dedupe.signed"
MATCHED = "dedupe.matched"
PARAMS = "dedupe.params"


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


def _usable(after: int):
    d = t.documents
    return sa.and_(d.c.status == "usable", d.c.id > after)


def count_unsigned(conn: Connection) -> int:
    after = get_mark(conn, SIGNED) or 0
    return int(conn.execute(sa.select(sa.func.count()).select_from(t.documents).where(_usable(after))).scalar_one())


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


def _supersede(conn: Connection, canonical_ids: list[int], keep: dict[int, int]) -> int:
    """Remove band keys of documents older than the current one of each canonical URL."""
    d, bk = t.documents, t.band_keys
    removed = 0
    for part in chunks(canonical_ids):
        older = [int(i) for i, c in conn.execute(sa.select(d.c.id, d.c.canonical_id)
                                                 .where(d.c.canonical_id.in_(part))) if i < keep[int(c)]]
        for sub in chunks(older):
            removed += conn.execute(bk.delete().where(bk.c.document_id.in_(sub))).rowcount or 0
    return removed


def sign_pending(engine: Engine, params: SignatureParams, *, run_id: int | None, batch_size: int,
                 progress: Progress = SILENT) -> SignCounts:
    counts = SignCounts()
    d, sg = t.documents, t.signatures
    with engine.connect() as conn:
        total = count_unsigned(conn)
    progress.start("signing documents", total)
    started = time.monotonic()
    while True:
        with engine.begin() as conn:
            after = get_mark(conn, SIGNED) or 0
            batch = conn.execute(sa.select(d.c.id, d.c.canonical_id, d.c.text).where(_usable(after))
                                 .order_by(d.c.id).limit(batch_size)).all()
            if not batch:
                break
            # The newest document of a canonical URL in the batch is the one to sign; any older one is
            # already superseded (its id stays below the mark, so it is not pending again).
            newest: dict[int, int] = {}
            for doc_id, cid, _text in batch:
                newest[int(cid)] = max(newest.get(int(cid), 0), int(doc_id))
            chosen = [(int(i), txt or "") for i, c, txt in batch if newest[int(c)] == int(i)]
            already: set[int] = set()
            for part in chunks([i for i, _ in chosen]):
                already.update(int(x) for x in conn.execute(sa.select(sg.c.document_id)
                                                            .where(sg.c.document_id.in_(part))).scalars())
            chosen = [(i, txt) for i, txt in chosen if i not in already]
            ids = [i for i, _ in chosen]
            if chosen:
                sigs = signatures_from_texts([txt for _, txt in chosen], params)
                stamp = now()
                conn.execute(sg.insert(), [{"document_id": i, "params": params.band_token,
                                            "signature": signature_to_bytes(sigs[r], params),
                                            "created_at": stamp, "run_id": run_id} for r, i in enumerate(ids)])
                rows = _band_rows(ids, sigs, params)
                insert_rows(conn, t.band_keys, rows)
                counts.empty += len(ids) - len({r["document_id"] for r in rows})
                counts.signed += len(ids)
            counts.superseded += _supersede(conn, sorted(newest), newest)
            set_mark(conn, SIGNED, int(batch[-1].id), run_id=run_id, now=now())
            if get_mark(conn, PARAMS) is None:
                set_mark(conn, PARAMS, params_mark(params), run_id=run_id, now=now())
        progress.advance(len(batch))
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
    sg, bk, d = t.signatures, t.band_keys, t.documents
    token = params.band_token
    with engine.connect() as conn:
        total = int(conn.execute(sa.select(sa.func.count()).select_from(sg).where(sg.c.params != token))
                    .scalar_one())
    progress.start("refreshing signatures", total)
    last = 0
    while True:
        with engine.begin() as conn:
            batch = conn.execute(sa.select(sg.c.document_id, sg.c.params, sg.c.signature, d.c.text)
                                 .select_from(sg.join(d, d.c.id == sg.c.document_id))
                                 .where(sg.c.params != token, sg.c.document_id > last)
                                 .order_by(sg.c.document_id).limit(batch_size)).all()
            if not batch:
                break
            last = int(batch[-1].document_id)
            ids = [int(r.document_id) for r in batch]
            current: set[int] = set()
            for part in chunks(ids):
                current.update(int(x) for x in conn.execute(sa.select(bk.c.document_id).distinct()
                                                            .where(bk.c.document_id.in_(part))).scalars())
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
            conn.execute(sg.update().where(sg.c.document_id == sa.bindparam("b_id")).values(
                params=token, signature=sa.bindparam("b_sig"), run_id=run_id),
                [{"b_id": i, "b_sig": signature_to_bytes(sigs[r], params)} for r, i in enumerate(ids)])
            for part in chunks(ids):
                conn.execute(bk.delete().where(bk.c.document_id.in_(part)))
            keep = [r for r, i in enumerate(ids) if i in current]
            insert_rows(conn, bk, _band_rows([ids[r] for r in keep], sigs[keep], params))
        progress.advance(len(batch))
    with engine.begin() as conn:
        set_mark(conn, PARAMS, params_mark(params), run_id=run_id, now=now())
        set_mark(conn, MATCHED, 0, run_id=run_id, now=now())
    progress.finish()
    return counts


__all__ = ["MATCHED", "PARAMS", "SIGNED", "SignCounts", "count_unsigned", "params_mark", "refresh_signatures",
           "settings_changed", "sign_pending"]
