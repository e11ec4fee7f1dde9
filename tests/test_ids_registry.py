"""Stable IDs in the registry: manual decisions, merges and splits, lookup of any ID ever issued, export.

Behaviour on invented data (tests/dedupe_world.py), both backends. The rules under test are DESIGN.md's
("Stable IDs"): minted once from the founder, the older ID survives a merge, the part with the founder
keeps the ID on a split, every change recorded with run and reason, every ID ever issued resolves.
The ID format is checked against RFC 4648 §6 base32 of SHA-256 computed here with the standard library.
"""

from __future__ import annotations

import base64
import csv
import hashlib
import json

import pytest
import sqlalchemy as sa

from dedupe_world import Texts, add_document, ids_of, load_redirects, load_urls, settings
from linkfold.cli import main
from linkfold.dedupe.stage import list_decisions, record_decision, run_dedupe
from linkfold.errors import InputError, NotFound
from linkfold.ingest import export_dataset, lookup
from linkfold.store import tables as t

A = "https://herald.example/news/flood-warning"
A_PRINT = "https://herald.example/print/flood-warning"
B = "https://courier.test/region/flood-warning"
C = "https://gazette.example/flood"
SHORT = "https://short.test/f1"


@pytest.fixture
def world(engine, tmp_path):
    texts = Texts(seed=3)
    load_urls(engine, [A, A_PRINT, B, C, SHORT], tmp_path)
    flood = texts.article(300)
    add_document(engine, "herald.example/news/flood-warning", " ".join(flood))
    add_document(engine, "herald.example/print/flood-warning", " ".join(texts.copy(flood, 0.003)))
    add_document(engine, "courier.test/region/flood-warning", " ".join(texts.copy(flood, 0.03)))
    add_document(engine, "gazette.example/flood", " ".join(texts.copy(flood, 0.06)))
    run_dedupe(engine, settings=settings())
    return texts


def _url_key(conn, url):
    return conn.execute(sa.select(t.canonical_urls.c.url_key).where(t.canonical_urls.c.url == url)).scalar_one()


def test_ids_have_the_documented_form(engine, world):
    with engine.connect() as conn:
        rows = conn.execute(sa.select(t.cluster_ids.c.id, t.cluster_ids.c.level, t.canonical_urls.c.url_key)
                            .select_from(t.cluster_ids.join(t.canonical_urls))).all()
    for cid, level, founder_key in rows:
        digest = hashlib.sha256(founder_key.encode("utf-8")).digest()
        # RFC 4648 §6: base32; docs/dedupe.md §8: prefix + first 12 characters, lower case
        assert cid == {"article": "a", "story": "s"}[level] + base64.b32encode(digest).decode()[:12].lower()


def test_decide_different_splits_the_story_and_the_founder_keeps_its_id(engine, world):
    story = ids_of(engine, "story")
    sid = story[A]
    assert story[B] == story[C] == sid
    result = record_decision(engine, "different", sid, C, decided_by="tester", note="local follow-up, not a copy")
    assert result.decision.level == "story"
    run_dedupe(engine, settings=settings())
    after = ids_of(engine, "story")
    assert after[A] == after[B] == sid        # the part with the founder keeps the ID
    assert after[C] != sid
    with engine.connect() as conn:
        events = conn.execute(sa.select(t.id_events.c.cluster_id, t.id_events.c.event, t.id_events.c.other_id,
                                        t.id_events.c.reason).where(t.id_events.c.cluster_id == after[C])).all()
    assert sorted(tuple(e) for e in events) == sorted([(after[C], "minted", None, "split"),
                                                       (after[C], "split_from", sid, "split")])
    # Kept forever: a full rerun obeys it too, and changes nothing.
    run_dedupe(engine, settings=settings(), full=True)
    assert ids_of(engine, "story") == after


def test_decide_same_joins_and_a_later_decision_supersedes(engine, world, tmp_path):
    texts = world
    load_urls(engine, ["https://ledger.test/weather/storm-notes"], tmp_path, dataset="extra")
    add_document(engine, "ledger.test/weather/storm-notes", " ".join(texts.article(250)))
    run_dedupe(engine, settings=settings())
    lone = ids_of(engine, "story")["https://ledger.test/weather/storm-notes"]
    big = ids_of(engine, "story")[A]
    assert lone != big
    first = record_decision(engine, "same", lone, A, decided_by="tester", note="same event, rewritten")
    assert first.effect == "changes" and first.decision.level == "story"
    run_dedupe(engine, settings=settings())
    joined = ids_of(engine, "story")
    assert joined["https://ledger.test/weather/storm-notes"] == joined[A]
    survivor = joined[A]
    retired = ({lone, big} - {survivor}).pop()
    [answer] = lookup(engine, [retired])
    assert answer["story_id"] == survivor and answer["matched_by"] == "story_id"
    assert [e["event"] for e in answer["id_history"]][-1] == "merged_into"
    # A later "different" on the same pair supersedes the "same"; both stay on record. Two URLs on
    # different outlets state a story-level fact, so it is the same pair at the same level.
    second = record_decision(engine, "different", "https://ledger.test/weather/storm-notes", A, decided_by="tester")
    assert second.decision.level == "story" and "different outlets" in second.level_reason
    assert second.supersedes == [first.decision.id] and second.effect == "changes"
    run_dedupe(engine, settings=settings())
    final = ids_of(engine, "story")
    assert final["https://ledger.test/weather/storm-notes"] != final[A]
    in_force = {d["id"]: d["in_force"] for d in list_decisions(engine)}
    assert in_force == {first.decision.id: False, second.decision.id: True}


def test_new_redirect_evidence_merges_articles_and_the_older_id_survives(engine, world, tmp_path):
    before = ids_of(engine, "article")
    assert before[SHORT] != before[A]
    older = min((before[SHORT], before[A]), key=lambda i: _order(engine, i))
    load_redirects(engine, [(SHORT, A)], tmp_path)
    summary = run_dedupe(engine, settings=settings())
    assert summary.articles.merged == 1
    after = ids_of(engine, "article")
    assert after[SHORT] == after[A] == after[A_PRINT] == older
    retired = ({before[SHORT], before[A]} - {older}).pop()
    [answer] = lookup(engine, [retired])
    assert answer["article_id"] == older
    assert answer["id_history"][-1] | {"at": None, "run_id": None} == {
        "id": retired, "event": "merged_into", "other_id": older, "reason": "merge", "at": None, "run_id": None}
    # Stories follow the article: the short link is in the flood story now.
    assert ids_of(engine, "story")[SHORT] == ids_of(engine, "story")[A]


def _order(engine, cid):
    with engine.connect() as conn:
        return conn.execute(sa.select(t.cluster_ids.c.mint_order).where(t.cluster_ids.c.id == cid)).scalar_one()


def test_every_issued_id_resolves_to_a_live_one(engine, world, tmp_path):
    load_redirects(engine, [(SHORT, A)], tmp_path)
    run_dedupe(engine, settings=settings())
    sid = ids_of(engine, "story")[A]
    record_decision(engine, "different", sid, C, decided_by="tester")
    run_dedupe(engine, settings=settings())
    with engine.connect() as conn:
        issued = conn.execute(sa.select(t.cluster_ids.c.id, t.cluster_ids.c.level)).all()
        live = set(conn.execute(sa.select(t.cluster_members.c.cluster_id)).scalars())
    answers = list(lookup(engine, [i for i, _ in issued]))
    for (cid, level), ans in zip(issued, answers, strict=True):
        assert ans[f"{level}_id"] in live, cid
    [unknown] = lookup(engine, ["aaaaaaaaaaaaa"])
    assert unknown["error"] == "unknown_id" and unknown["seen"] is False


def test_lookup_and_export_carry_article_and_story_ids(engine, world, tmp_path):
    arts, stories = ids_of(engine, "article"), ids_of(engine, "story")
    [ans] = lookup(engine, [A + "?utm_source=feed"])   # utm_source: a real tracking parameter, dropped
    assert ans["article_id"] == arts[A] and ans["story_id"] == stories[A]
    [short] = lookup(engine, [SHORT])
    assert short["article_id"] == arts[SHORT]          # no text: an article ID from URL evidence alone
    out = tmp_path / "panel.csv"
    export_dataset(engine, "panel", fmt="csv", out=out)
    with out.open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["canonical_url"]: (r["article_id"], r["story_id"]) for r in rows} == {
        u: (arts[u], stories[u]) for u in (A, A_PRINT, B, C, SHORT)}
    with engine.connect() as conn:
        view = dict(conn.execute(sa.text("SELECT canonical_url, article_id FROM sighting_links")).all())
    assert view == {u: arts[u] for u in (A, A_PRINT, B, C, SHORT)}


def test_decision_errors_name_the_reference(engine, world):
    with pytest.raises(NotFound, match="aaaaaaaaaaaaa"):
        record_decision(engine, "same", "aaaaaaaaaaaaa", A, decided_by="tester")
    with pytest.raises(NotFound, match=r"never\.example"):
        record_decision(engine, "same", "https://never.example/x", A, decided_by="tester")
    with pytest.raises(InputError, match="cannot be separated from itself"):
        record_decision(engine, "different", A, A + "?utm_source=x", decided_by="tester")
    with pytest.raises(InputError, match="who decided"):
        record_decision(engine, "same", A, B, decided_by=" ")
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(t.decisions)).scalar_one() == 0


def test_cli_decide_clusters_and_thresholds(db_url, engine, world, capsys):
    sid = ids_of(engine, "story")[A]
    assert main(["--db", db_url, "decide", "different", sid, C, "--by", "tester", "--note", "follow-up"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["level"] == "story" and out["decided_by"] == "tester"
    assert main(["--db", db_url, "-q", "dedupe"]) == 0
    capsys.readouterr()
    assert main(["--db", db_url, "clusters", "--level", "story", "--format", "jsonl"]) == 0
    rows = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    assert [r["size"] for r in rows] == [3]   # A, A_PRINT, B; C was split off, SHORT has no link yet
    assert main(["--db", db_url, "clusters", "show", sid]) == 0
    shown = capsys.readouterr().out
    assert A in shown and "decisions (1)" in shown and " | " in shown
    assert main(["--db", db_url, "thresholds"]) == 0
    text = capsys.readouterr().out
    assert "32 bands × 3 rows" in text and "story threshold" in text and "verified cross-outlet" in text
    assert main(["--db", db_url, "clusters", "show", "szzzzzzzzzzzz"]) == 7
    assert "was ever issued" in capsys.readouterr().err


def test_lookup_of_an_id_answers_with_its_cluster(engine, world):
    # Issue 15, item 9: an ID looked up gave canonical null and nothing else about the cluster.
    article_ids, story_ids = ids_of(engine, "article"), ids_of(engine, "story")
    aid, sid = article_ids[A], story_ids[A]
    by_article, by_story, unknown, url = lookup(engine, [aid, sid, "a" + "b" * 12, A])
    assert by_article["matched_by"] == "article_id" and by_article["article_id"] == aid
    assert by_article["canonical"] is None and by_article["id_history"]  # kept as it was
    cluster = by_article["cluster"]
    members = {m["url"] for m in cluster["members"]}
    assert members == {u for u, i in article_ids.items() if i == aid} and cluster["size"] == len(members)
    assert cluster["id"] == aid and cluster["level"] == "article"
    assert cluster["founder"] in members
    assert [m["founder"] for m in cluster["members"]].count(True) == 1 and cluster["members"][0]["founder"]
    assert cluster["outlets"] == ["herald.example"] and not cluster["members_truncated"]
    story = by_story["cluster"]
    assert story["level"] == "story" and story["id"] == sid
    assert {m["url"] for m in story["members"]} == {u for u, i in story_ids.items() if i == sid}
    assert story["outlets"] == sorted({"herald.example", "courier.test", "gazette.example"} & {
        m["outlet"] for m in story["members"]})
    assert len(story["outlets"]) >= 2
    assert unknown["error"] == "unknown_id" and unknown["cluster"] is None
    assert url["cluster"] is None and url["article_id"] == aid  # a URL's answer is unchanged


def test_lookup_cluster_title_is_the_founders(engine, world):
    aid = ids_of(engine, "article")[A]
    with engine.begin() as conn:
        founder = conn.execute(sa.select(t.canonical_urls.c.url).select_from(
            t.cluster_ids.join(t.canonical_urls, t.canonical_urls.c.id == t.cluster_ids.c.founder_id))
            .where(t.cluster_ids.c.id == aid)).scalar_one()
        conn.execute(t.documents.update().where(t.documents.c.canonical_id == sa.select(t.canonical_urls.c.id)
                                                .where(t.canonical_urls.c.url == founder).scalar_subquery())
                     .values(title="Flood warning for the lower valley"))
    [answer] = lookup(engine, [aid])
    assert answer["cluster"]["title"] == "Flood warning for the lower valley"
    assert answer["cluster"]["founder"] == founder
