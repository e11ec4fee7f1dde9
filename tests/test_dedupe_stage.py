"""The dedupe stage over a real registry, on both backends.

Reference checks (outside the project): stored signatures equal ``datasketch.MinHash`` given our shingle
hashes (docs/dedupe.md §3; datasketch 2.x, ``scheme="affine32"``, ``hashfunc=int``); the Jaccard stored on
a link is |A∩B| / |A∪B| of the two shingle sets computed with Python sets (Broder 1997, definition of
resemblance); candidates from the band-key join equal every pair that shares a band, counted by brute
force (Leskovec, Rajaraman & Ullman, MMDS §3.4.1: a candidate pair is one hashed to the same bucket in at
least one band). Everything else is behaviour on invented data (tests/dedupe_world.py).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import sqlalchemy as sa
from datasketch import MinHash

from dedupe_world import (
    Texts,
    add_document,
    ids_of,
    load_redirects,
    load_urls,
    partition,
    registry_snapshot,
    settings,
)
from linkfold.dedupe import SignatureParams, shingle_hashes, signature_from_bytes
from linkfold.dedupe.stage import count_pending, list_clusters, run_dedupe, show_cluster
from linkfold.store import tables as t

URLS = [
    "https://herald.example/news/bridge-opens?utm_source=feed",   # utm_source: a real tracking parameter name
    "https://herald.example/print/bridge-opens",
    "https://courier.test/wire/bridge-opens",
    "https://gazette.example/city/bridge-opens-at-last",
    "https://ledger.test/other/harbour-plan",
    "https://short.test/x1",
]


def _world(engine, tmp_path, texts: Texts | None = None):
    texts = texts or Texts()
    load_urls(engine, URLS, tmp_path)
    load_redirects(engine, [("https://short.test/x1", "https://herald.example/news/bridge-opens")], tmp_path)
    bridge = texts.article(320)
    harbour = texts.article(280)
    docs = {
        "herald.example/news/bridge-opens": (bridge, "Bridge opens"),
        "herald.example/print/bridge-opens": (texts.copy(bridge, 0.004), "Bridge opens"),
        "courier.test/wire/bridge-opens": (texts.copy(bridge, 0.03), "Bridge opens at last"),
        "gazette.example/city/bridge-opens-at-last": (texts.copy(bridge, 0.05), "At last, the bridge"),
        "ledger.test/other/harbour-plan": (harbour, "Harbour plan"),
    }
    return docs


def _add_all(engine, docs, only=None):
    for part, (words, title) in docs.items():
        if only is None or part in only:
            add_document(engine, part, " ".join(words), title=title)


def test_articles_and_stories_on_the_world(engine, tmp_path):
    docs = _world(engine, tmp_path)
    _add_all(engine, docs)
    summary = run_dedupe(engine, settings=settings())
    assert summary.signing.signed == 5
    arts = partition(engine, "article")
    # The short link, the tracked URL's canonical form and the print view are one article; the rest alone.
    assert frozenset({"https://short.test/x1", "https://herald.example/news/bridge-opens",
                      "https://herald.example/print/bridge-opens"}) in arts
    assert len(arts) == 4
    stories = partition(engine, "story")
    assert frozenset({"https://short.test/x1", "https://herald.example/news/bridge-opens",
                      "https://herald.example/print/bridge-opens", "https://courier.test/wire/bridge-opens",
                      "https://gazette.example/city/bridge-opens-at-last"}) in stories
    assert frozenset({"https://ledger.test/other/harbour-plan"}) in stories
    # A URL without text (the short link) holds an article ID from URL-level evidence alone.
    assert ids_of(engine, "article")["https://short.test/x1"].startswith("a")
    listed = list(list_clusters(engine, level="story", min_size=2))
    assert [r.size for r in listed] == [5]
    # Outlets are the members' final outlets (docs/ingest.md): the short link counts for the outlet its
    # imported expansion is on, so herald, courier and gazette, not the shortener as a fourth.
    assert listed[0].outlets == 3 and 0.5 <= listed[0].min_score <= listed[0].max_score <= 1.0


def test_rerun_with_no_new_data_changes_nothing(engine, tmp_path):
    _add_all(engine, _world(engine, tmp_path))
    run_dedupe(engine, settings=settings())
    before = registry_snapshot(engine)
    assert count_pending(engine, settings=settings()) == 0
    again = run_dedupe(engine, settings=settings())
    assert again.articles.members == 0 and again.matching.matched == 0
    full = run_dedupe(engine, settings=settings(), full=True)
    assert full.matching.links_written == 0 and full.articles.minted == 0 and full.stories.merged == 0
    assert registry_snapshot(engine) == before


@pytest.fixture
def second_engine(request, backend, tmp_path):
    """A second fresh, migrated registry on the same backend."""
    from conftest import PG_ADMIN_URL, _with_database
    from linkfold.store import make_engine, upgrade

    if backend == "sqlite":
        url = f"sqlite:///{tmp_path / 'second.db'}"
        eng = make_engine(url)
        upgrade(eng)
        yield eng
        eng.dispose()
        return
    server = request.getfixturevalue("pg_server")
    name = server.create(template=server.migrated_template())
    eng = make_engine(_with_database(PG_ADMIN_URL, name))
    yield eng
    eng.dispose()
    server.drop(name)


def test_one_batch_or_two_gives_the_same_clusters_and_ids(engine, second_engine, tmp_path):
    (tmp_path / "one").mkdir()
    (tmp_path / "two").mkdir()
    docs = _world(engine, tmp_path / "one")
    _add_all(engine, docs)
    run_dedupe(engine, settings=settings())

    docs2 = _world(second_engine, tmp_path / "two")
    assert docs2 == docs
    first = ["herald.example/print/bridge-opens", "gazette.example/city/bridge-opens-at-last"]
    _add_all(second_engine, docs2, only=first)
    run_dedupe(second_engine, settings=settings())
    _add_all(second_engine, docs2, only=[p for p in docs2 if p not in first])
    run_dedupe(second_engine, settings=settings())
    for level in ("article", "story"):
        assert partition(engine, level) == partition(second_engine, level)
        assert ids_of(engine, level) == ids_of(second_engine, level)


def test_stored_signatures_match_datasketch(engine, tmp_path):
    _add_all(engine, _world(engine, tmp_path))
    run_dedupe(engine, settings=settings())
    params = SignatureParams()
    with engine.connect() as conn:
        rows = conn.execute(sa.select(t.signatures.c.params, t.signatures.c.signature, t.documents.c.text)
                            .select_from(t.signatures.join(t.documents))).all()
    assert rows
    for token, blob, text in rows:
        assert token == params.band_token == "lfsig1:hash=lfw1:shingle=5:scheme=affine32:perm=128:seed=1:bands=32x3"
        ours = signature_from_bytes(blob, params)
        # docs/dedupe.md §3, "To reproduce one of our signatures with datasketch"
        ref = MinHash(num_perm=128, seed=1, scheme="affine32", hashfunc=int)
        ref.update_batch(shingle_hashes(text, 5).tolist())
        assert np.array_equal(ours, ref.hashvalues)


def test_link_scores_are_the_jaccard_of_the_shingle_sets(engine, tmp_path):
    _add_all(engine, _world(engine, tmp_path))
    run_dedupe(engine, settings=settings())
    with engine.connect() as conn:
        links = conn.execute(sa.select(t.links.c.detail).where(t.links.c.kind == "similar_text")).scalars().all()
        texts = dict(conn.execute(sa.select(t.documents.c.id, t.documents.c.text)).all())
    assert len(links) == 6  # 4 bridge texts pairwise
    for detail in links:
        a, b = (set(shingle_hashes(texts[d], 5).tolist()) for d in detail["documents"])
        assert detail["exact_jaccard"] == pytest.approx(len(a & b) / len(a | b))   # Broder 1997
        level = "article" if detail["same_outlet"] else "story"
        assert detail["level"] == level


def test_band_key_join_finds_every_pair_sharing_a_band(engine, tmp_path):
    texts = Texts(seed=11)
    urls = [f"https://outlet{i % 4}.example/a/{i}" for i in range(40)]
    load_urls(engine, urls, tmp_path)
    base = [texts.article(200) for _ in range(8)]
    for i, url in enumerate(urls):
        add_document(engine, url.split("//")[1], " ".join(texts.copy(base[i % 8], 0.15)))
    s = settings(story_threshold=0.0, article_threshold=0.0)   # accept every candidate as a link
    run_dedupe(engine, settings=s)
    with engine.connect() as conn:
        keys = conn.execute(sa.select(t.band_keys.c.document_id, t.band_keys.c.band, t.band_keys.c.key)).all()
        found = {tuple(sorted(d["documents"])) for d in conn.execute(
            sa.select(t.links.c.detail).where(t.links.c.source == "dedupe")).scalars()}
    by_doc: dict[int, dict[int, int]] = {}
    for doc, band, key in keys:
        by_doc.setdefault(doc, {})[band] = key
    expected = {(a, b) for a, b in itertools.combinations(sorted(by_doc), 2)
                if any(by_doc[a][k] == by_doc[b][k] for k in by_doc[a])}   # MMDS §3.4.1
    assert expected and found == expected


def test_banding_change_rebuilds_band_keys_without_resigning(engine, tmp_path):
    _add_all(engine, _world(engine, tmp_path))
    run_dedupe(engine, settings=settings())
    before = partition(engine, "story")
    changed = settings(lsh_bands=42)
    assert count_pending(engine, settings=changed) > 0
    summary = run_dedupe(engine, settings=changed)
    assert summary.signing.rebanded == 5 and summary.signing.resigned == 0
    with engine.connect() as conn:
        assert set(conn.execute(sa.select(t.signatures.c.params)).scalars()) == {
            SignatureParams(bands=42).band_token}
        per_doc = conn.execute(sa.select(sa.func.count()).select_from(t.band_keys)).scalar_one()
    assert per_doc == 5 * 42
    assert partition(engine, "story") == before


def test_superseded_document_leaves_the_band_table(engine, tmp_path):
    docs = _world(engine, tmp_path)
    _add_all(engine, docs)
    run_dedupe(engine, settings=settings())
    texts = Texts(seed=99)
    # The gazette page is extracted again and now carries an unrelated text: it leaves the story.
    add_document(engine, "gazette.example/city/bridge-opens-at-last", " ".join(texts.article(300)))
    run_dedupe(engine, settings=settings())
    with engine.connect() as conn:
        docs_with_keys = set(conn.execute(sa.select(t.band_keys.c.document_id).distinct()).scalars())
    assert len(docs_with_keys) == 5
    # Evidence is never deleted: the old similarity links stay, so the story still holds the page; a
    # person who disagrees records a decision (tests/test_ids_registry.py).
    story = ids_of(engine, "story")
    assert story["https://gazette.example/city/bridge-opens-at-last"] == story["https://courier.test/wire/bridge-opens"]


def test_show_cluster_gives_members_links_and_differing_passages(engine, tmp_path):
    _add_all(engine, _world(engine, tmp_path))
    run_dedupe(engine, settings=settings())
    sid = ids_of(engine, "story")["https://courier.test/wire/bridge-opens"]
    d = show_cluster(engine, sid)
    assert d.id == sid and d.level == "story" and len(d.members) == 5
    assert sum(m["founder"] for m in d.members) == 1
    assert {link["kind"] for link in d.links} == {"redirect", "similar_text"}
    assert d.differences and all(p for diff in d.differences for p in diff["passages"])
    left, right = d.differences[0]["passages"][0]
    assert "[" in left and "[" in right and left != right


def test_clusters_outlet_filter_takes_an_outlet_name_or_a_domain(engine, tmp_path):
    # Issue 15, item 9: `clusters --outlet` matched the outlet column only, so a domain found nothing for
    # an outlet the site rules name.
    from linkfold.canon import parse_rules
    from linkfold.store.rulesets import store_ruleset

    with engine.begin() as conn:
        store_ruleset(conn, parse_rules('[site."courier.test"]\noutlet = "Valley Courier"\n', source="lab"))
    _add_all(engine, _world(engine, tmp_path))
    run_dedupe(engine, settings=settings())
    [story] = [r.id for r in list_clusters(engine, level="story", min_size=2)]
    for given in ("Valley Courier", "valley courier", "courier.test", "www.courier.test", "COURIER.test.",
                  "herald.example", "m.herald.example"):
        assert [r.id for r in list_clusters(engine, level="story", outlet=given)] == [story], given
    for given in ("Valley", "other.test", "courier", "herald.example.test"):
        assert list(list_clusters(engine, level="story", outlet=given)) == [], given
