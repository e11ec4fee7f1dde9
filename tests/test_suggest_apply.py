"""Applying reviewed suggestions keeps IDs stable (DESIGN.md, "Stable IDs"): `rules load` the suggested file,
re-canonicalise, cluster again; no article ID changes for a URL whose canonical form did not change, and a
URL whose canonical form did change (a dropped parameter) still resolves to the article ID it had."""

from __future__ import annotations

import sqlalchemy as sa

from dedupe_world import STAMP, Texts, add_document, load_urls, settings
from linkfold.canon import load_rules
from linkfold.dedupe.stage import run_dedupe
from linkfold.ingest import lookup
from linkfold.ingest.recanon import recanonicalize
from linkfold.store import tables as t
from linkfold.store.rulesets import store_ruleset
from linkfold.suggest import suggest_rules_file

HOST = "quillmoor.example"


def _world(engine, tmp_path) -> list[str]:
    texts = Texts(11)
    articles = [f"https://{HOST}/news/{40000 + i}" for i in range(12)]
    variants = [f"{a}?src={'feed' if i % 2 else 'mail'}" for i, a in enumerate(articles[:8])]
    pages = [f"{a}?page=2" for a in articles[:4]]
    others = [f"https://{HOST}/tag/{w}" for w in ("bridge", "river", "mill", "storm", "pier", "ferry")]
    urls = articles + variants + pages + others + [f"https://{HOST}/"]
    load_urls(engine, urls, tmp_path)
    bodies = {a: " ".join(texts.article(300)) for a in articles}
    for a in articles:
        add_document(engine, a.split("//", 1)[1], bodies[a])
    for v in variants:
        add_document(engine, v.split("//", 1)[1], bodies[v.split("?")[0]])
    for p in pages:
        add_document(engine, p.split("//", 1)[1], " ".join(texts.article(250)))
    with engine.begin() as conn:
        ids = dict(conn.execute(sa.select(t.canonical_urls.c.url, t.canonical_urls.c.id)).all())
        conn.execute(t.documents.insert(), [
            {"canonical_id": ids[o], "page_id": None, "title": None, "text": None, "text_hash": None,
             "word_count": 4, "state": "no_text", "reason": "too_short", "extractor_version": "test",
             "source": "test", "record_sha256": None, "created_at": STAMP} for o in others])
    return urls


def _article_ids(engine, urls: list[str]) -> dict[str, str | None]:
    return {row["input"]: row["article_id"] for row in lookup(engine, urls)}


def test_applying_suggestions_keeps_article_ids(engine, tmp_path):
    urls = _world(engine, tmp_path)
    cfg = settings()
    run_dedupe(engine, settings=cfg)
    before = _article_ids(engine, urls)
    canon_before = {row["input"]: row["canonical"] for row in lookup(engine, urls)}
    assert sum(v is not None for v in before.values()) >= 12

    out = tmp_path / "suggested.toml"
    result = suggest_rules_file(engine, out=out, min_support=3)
    site = result.suggestions.sites[HOST]
    assert [v.name for v in site.drops] == ["src"] and [v.name for v in site.keeps] == ["page"]
    with engine.begin() as conn:
        store_ruleset(conn, load_rules(out))
    moved = recanonicalize(engine)
    assert moved.moved == 8  # the eight ?src= variants fold onto their articles
    assert moved.restated >= 12  # stored URLs get the new article patterns' verdict (store/recanon.py)
    run_dedupe(engine, settings=cfg)

    after = _article_ids(engine, urls)
    canon_after = {row["input"]: row["canonical"] for row in lookup(engine, urls)}
    for url in urls:
        if canon_before[url] == canon_after[url]:
            assert after[url] == before[url], url  # same canonical form: the same article ID
        else:
            assert "?src=" in url and canon_after[url] == url.split("?")[0]
            assert after[url] == before[url], url  # the retired form's article ID is the one it leads to
    with engine.connect() as conn:
        article = conn.execute(sa.select(t.canonical_urls.c.is_article)
                               .where(t.canonical_urls.c.url == f"https://{HOST}/news/40000")
                               .order_by(t.canonical_urls.c.id.desc())).scalars().first()
    assert article is True  # the stored URL now carries the suggested article pattern's verdict
