"""An invented world for the dedupe stage tests: outlets on reserved names, generated texts.

Nothing is real: the outlets are ``*.example`` / ``*.test`` names (RFC 2606), the words are invented
syllable strings (``tests/synthetic_texts.py``). URLs are loaded through the real ingest path and
redirects through the real import path; documents are written as the content stage writes them (one
``documents`` row per text, usable), since what is tested here is everything after extraction.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import sqlalchemy as sa

from linkfold.content import count_words, normalise_text, text_hash
from linkfold.follow import import_redirects
from linkfold.ingest import ingest_dump
from linkfold.settings import load_settings
from linkfold.store import tables as t
from synthetic_texts import edited_copy, invented_vocabulary, random_words

STAMP = datetime(2031, 3, 4, 5, 6, 7, tzinfo=UTC)


def settings(**overrides):
    return load_settings(overrides={"batch_size": 50, **overrides}, environ={})


def load_urls(engine, urls: Sequence[str], tmp: Path, *, dataset: str = "panel") -> None:
    path = tmp / f"{dataset}-{abs(hash(tuple(urls))) % 10**8}.txt"
    path.write_text("\n".join(urls) + "\n", encoding="utf-8")
    ingest_dump(engine, [path], dataset=dataset)


def load_redirects(engine, pairs: Sequence[tuple[str, str]], tmp: Path) -> None:
    path = tmp / f"redirects-{abs(hash(tuple(pairs))) % 10**8}.csv"
    path.write_text("short,expanded\n" + "".join(f"{a},{b}\n" for a, b in pairs), encoding="utf-8")
    import_redirects(engine, path)


def canonical_id(conn, url_part: str) -> int:
    c = t.canonical_urls
    rows = conn.execute(sa.select(c.c.id).where(c.c.url.like(f"%//{url_part}"))).scalars().all()
    assert len(rows) == 1, (url_part, rows)
    return int(rows[0])


def add_document(engine, url_part: str, text: str, *, title: str | None = None,
                 published: datetime | None = None) -> int:
    norm = normalise_text(text)
    with engine.begin() as conn:
        cid = canonical_id(conn, url_part)
        return int(conn.execute(t.documents.insert().values(
            canonical_id=cid, page_id=None, title=title, text=norm, text_hash=text_hash(norm),
            word_count=count_words(norm), published=published, state="usable", reason=None,
            extractor_version="test-world", source=f"test:{url_part}", record_sha256=None,
            created_at=STAMP).returning(t.documents.c.id)).scalar_one())


class Texts:
    """Seeded generator of article texts and edited copies."""

    def __init__(self, seed: int = 7) -> None:
        self.rng = np.random.default_rng(seed)
        self.vocab = invented_vocabulary(6000, self.rng)

    def article(self, n_words: int = 300) -> list[str]:
        return random_words(self.rng, self.vocab, n_words)

    def copy(self, words: list[str], edit_rate: float) -> list[str]:
        return edited_copy(self.rng, words, edit_rate, self.vocab)


def ids_of(engine, level: str) -> dict[str, str]:
    """url → current ID at ``level``."""
    cm, c = t.cluster_members, t.canonical_urls
    with engine.connect() as conn:
        return dict(conn.execute(sa.select(c.c.url, cm.c.cluster_id)
                                 .select_from(cm.join(c, c.c.id == cm.c.canonical_id))
                                 .where(cm.c.level == level)).all())


def registry_snapshot(engine) -> dict[str, object]:
    """Everything the ID registry holds, comparable across runs (no run ids or times)."""
    with engine.connect() as conn:
        ids = sorted(tuple(r) for r in conn.execute(sa.select(
            t.cluster_ids.c.id, t.cluster_ids.c.level, t.cluster_ids.c.founder_id, t.cluster_ids.c.state,
            t.cluster_ids.c.successor)))
        members = sorted(tuple(r) for r in conn.execute(sa.select(
            t.cluster_members.c.level, t.cluster_members.c.canonical_id, t.cluster_members.c.cluster_id)))
        events = sorted(tuple(r) for r in conn.execute(sa.select(
            t.id_events.c.cluster_id, t.id_events.c.event, t.id_events.c.other_id, t.id_events.c.reason)))
        links = sorted(tuple(r) for r in conn.execute(sa.select(
            t.links.c.kind, t.links.c.src_id, t.links.c.dst_id).where(t.links.c.source == "dedupe")))
    return {"ids": ids, "members": members, "events": events, "links": links}


def partition(engine, level: str) -> set[frozenset[str]]:
    groups: dict[str, set[str]] = {}
    for url, cid in ids_of(engine, level).items():
        groups.setdefault(cid, set()).add(url)
    return {frozenset(g) for g in groups.values()}


def bulk_world(engine, tmp: Path, n_families: int, *, seed: int = 5, family: int = 3) -> None:
    """``n_families`` families of near-duplicates over four outlets: URLs loaded, documents stored."""
    texts = Texts(seed)
    outlets = ["herald.example", "courier.test", "gazette.example", "ledger.test"]
    urls, bodies = [], []
    for f in range(n_families):
        base = texts.article(200)
        for k in range(family):
            urls.append(f"https://{outlets[(f + k) % 4]}/n/{f}-{k}")
            bodies.append(base if k == 0 else texts.copy(base, 0.02 * k))
    load_urls(engine, urls, tmp, dataset=f"bulk-{seed}")
    with engine.begin() as conn:
        ids = dict(conn.execute(sa.select(t.canonical_urls.c.url, t.canonical_urls.c.id)).all())
        rows = []
        for url, words in zip(urls, bodies, strict=True):
            norm = normalise_text(" ".join(words))
            rows.append({"canonical_id": ids[url], "page_id": None, "title": None, "text": norm,
                         "text_hash": text_hash(norm), "word_count": count_words(norm), "published": None,
                         "state": "usable", "reason": None, "extractor_version": "test-world",
                         "source": f"test:{url}", "record_sha256": None, "created_at": STAMP})
        conn.execute(t.documents.insert(), rows)
