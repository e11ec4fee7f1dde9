"""Incremental nightly benchmark: the cost of a night with 1% new documents against a full run.

A registry is filled with generated documents in families of near-duplicates over four invented
outlets (URLs through the real ingest path, documents as the content stage stores them). Measured in
one run, on one database:

* **full**: the first nightly run over everything (sign, match, verify, cluster every URL);
* **incremental**: after adding 1% new documents (new URLs, some of them copies of stored texts), the next
  nightly run;
* **full again**: ``dedupe --full`` over the grown registry (everything matched and clustered again), a
  second baseline that does not include first-time signing.

The ratio incremental / full is the figure of merit (target ≤ 0.05); the absolute times depend on the
machine and are printed for context only. With ``--titles`` every document has a title and a publication
date (a copy keeps its original's), and a tenth of the new texts are briefs of 20–45 words (stored as
the content stage stores a text under 50 words; a copy of a brief is a rewrite with the same title), so
title keys and the title-and-date rule are exercised as well.

Run:  python bench/nightly_bench.py [--docs 20000] [--db URL] [--titles]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import sqlalchemy as sa

from linkfold.content import count_words, normalise_text, text_hash
from linkfold.dedupe.stage import run_dedupe
from linkfold.ingest import ingest_dump
from linkfold.jobs.nightly import run_nightly
from linkfold.settings import load_settings
from linkfold.store import make_engine, upgrade
from linkfold.store import tables as t

# The generated texts live beside the tests that use them too (not in the package).
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from synthetic_texts import edited_copy, invented_vocabulary, random_words

TARGET = 0.05
OUTLETS = ("herald.example", "courier.test", "gazette.example", "ledger.test")
STAMP = datetime(2031, 1, 1, tzinfo=UTC)


def _add(engine, tmp: Path, rng, vocab, start: int, n: int, stored: list[list[str]], tag: str, *,
         titles: bool = False, heads: dict[int, tuple[str, int]] | None = None) -> None:
    # heads: id(original words) -> (title, day) of each stored original, for --titles
    heads = {} if heads is None else heads
    urls, bodies, meta = [], [], []
    for i in range(start, start + n):
        if stored and rng.random() < 0.5:
            base = stored[int(rng.integers(len(stored)))]
            brief = len(base) < 50
            # a copy of a brief is the other outlet's own wording; of an article, an edited copy
            words = random_words(rng, vocab, len(base)) if brief else edited_copy(rng, base, 0.03, vocab)
            title, day = heads.get(id(base), ("", 0))
        else:
            brief = titles and rng.random() < 0.1
            words = random_words(rng, vocab, int(rng.integers(20, 46) if brief else rng.integers(200, 400)))
            stored.append(words)
            title, day = " ".join(random_words(rng, vocab, int(rng.integers(6, 11)))), int(rng.integers(0, 30))
            heads[id(words)] = (title, day)
        urls.append(f"https://{OUTLETS[i % 4]}/n/{i}")
        bodies.append(" ".join(words))
        meta.append((title, datetime(2030, 6, 1, tzinfo=UTC) + timedelta(days=day, hours=int(rng.integers(0, 6))))
                    if titles else (None, None))
    path = tmp / f"{tag}.txt"
    path.write_text("\n".join(urls) + "\n", encoding="utf-8")
    ingest_dump(engine, [path], dataset=tag)
    with engine.begin() as conn:
        c = t.canonical_urls
        ids = dict(conn.execute(sa.select(c.c.url, c.c.id)).all())
        rows = []
        for url, body, (title, published) in zip(urls, bodies, meta, strict=True):
            norm = normalise_text(body)
            words = count_words(norm)
            short = words < 50
            rows.append({"canonical_id": ids[url], "page_id": None, "title": title, "text": norm,
                         "text_hash": None if short else text_hash(norm), "word_count": words,
                         "published": published, "state": "no_text" if short else "usable",
                         "reason": "too_short" if short else None, "extractor_version": "bench",
                         "source": "bench", "record_sha256": None, "created_at": STAMP})
        for i in range(0, len(rows), 5000):
            conn.execute(t.documents.insert(), rows[i:i + 5000])


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--docs", type=int, default=20_000)
    ap.add_argument("--new-share", type=float, default=0.01)
    ap.add_argument("--db", help="database URL (default: a fresh SQLite file in a temporary folder)")
    ap.add_argument("--titles", action="store_true",
                    help="titles and dates on every document, and a tenth of new texts briefs")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmpdir:
        tmp = Path(tmpdir)
        url = args.db or f"sqlite:///{tmp / 'bench.db'}"
        engine = make_engine(url)
        upgrade(engine)
        settings = load_settings(overrides={"database_url": url}, environ={})
        rng = np.random.default_rng(1)
        vocab = invented_vocabulary(20000, rng)
        stored: list[list[str]] = []
        heads: dict[int, tuple[str, int]] = {}
        _add(engine, tmp, rng, vocab, 0, args.docs, stored, "base", titles=args.titles, heads=heads)

        t0 = time.perf_counter()
        first = run_nightly(engine, settings=settings)
        full = time.perf_counter() - t0
        assert first.ok, first.lines()

        n_new = max(1, int(args.docs * args.new_share))
        _add(engine, tmp, rng, vocab, args.docs, n_new, stored, "night-2", titles=args.titles, heads=heads)
        t0 = time.perf_counter()
        second = run_nightly(engine, settings=settings)
        incremental = time.perf_counter() - t0
        assert second.ok, second.lines()

        t0 = time.perf_counter()
        run_dedupe(engine, settings=settings, full=True)
        full_again = time.perf_counter() - t0
        engine.dispose()

    ratio, ratio_again = incremental / full, incremental / full_again
    print(f"documents: {args.docs:,} then {n_new:,} new ({100 * args.new_share:g}%) on {url.split(':')[0]}"
          f"{' with titles and briefs' if args.titles else ''}")
    print(f"full nightly run:        {full:8.2f} s")
    print(f"incremental nightly run: {incremental:8.2f} s   ratio {ratio:.4f} (target ≤ {TARGET})")
    print(f"dedupe --full afterwards:{full_again:8.2f} s   ratio {ratio_again:.4f}")
    return 0 if ratio <= TARGET else 1


if __name__ == "__main__":
    sys.exit(main())
