"""``documents show`` finds what ``lookup`` finds (issue 17): the ruleset in force, the raw URL as loaded,
a url key, an article or story ID; both backends. Invented outlets on reserved names."""

from __future__ import annotations

import json

import pytest

from linkfold.canon import canonicalize, parse_rules
from linkfold.cli import main
from linkfold.content.loading import load_documents
from linkfold.errors import NotFound
from linkfold.ingest import ingest_dump, lookup
from linkfold.store.pages import documents_for
from linkfold.store.rulesets import store_ruleset

STORY = " ".join(f"Sentence {i} of a report on the new tram depot, its budget and the works timetable, as the "
                 "transport committee heard it on Tuesday evening." for i in range(12))
# The lab's site rule keeps only ?story= on this outlet: "edition" is no tracking parameter the built-in
# rules know, so under them the variant below is another URL.
RULES = '[site."tramway-post.example"]\nkeep_params = ["story"]\ndrop_unlisted_params = true\n'
URL = "https://tramway-post.example/read?story=4471"
VARIANT = URL + "&edition=evening"


@pytest.fixture
def stored(engine, tmp_path):
    with engine.begin() as conn:
        store_ruleset(conn, parse_rules(RULES, source="lab"))
    dump = tmp_path / "panel.txt"
    dump.write_text(f"{VARIANT}\n", encoding="utf-8")
    ingest_dump(engine, [dump], dataset="panel")
    docs = tmp_path / "texts.jsonl"
    docs.write_text(json.dumps({"url": URL, "title": "Tram depot", "text": STORY}) + "\n", encoding="utf-8")
    load_documents(engine, docs)
    return engine


def test_a_variant_lookup_finds_is_found(stored):
    # The bug: the built-in rules give the variant another url key, so documents show said "not found".
    assert canonicalize(VARIANT).url_key != canonicalize(URL).url_key
    [answer] = list(lookup(stored, [VARIANT]))
    assert answer["seen"] and answer["canonical"] == URL
    found = documents_for(stored, VARIANT)
    assert found.located.url == URL and [d["title"] for d in found.documents] == ["Tram depot"]
    # The raw URL as loaded, its url key, and the canonical URL itself all name the same document.
    for ref in (VARIANT, answer["url_key"], URL, f"  {URL}  "):
        assert documents_for(stored, ref).located.canonical_id == found.located.canonical_id, ref


def test_the_command_is_a_shell_over_it(stored, db_url, monkeypatch, capsys):
    monkeypatch.setenv("LINKFOLD_DATABASE_URL", db_url)
    assert main(["documents", "show", VARIANT, "--no-text"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["title"] == "Tram depot" and "text" not in doc
    assert main(["documents", "show", "https://tramway-post.example/read?story=9"]) == NotFound("x").exit_code
    assert "no canonical URL stored" in capsys.readouterr().err


def test_nothing_stored_is_not_found(stored):
    with pytest.raises(NotFound, match="no canonical URL stored"):
        documents_for(stored, "https://elsewhere.test/a")
    with pytest.raises(NotFound, match="not a URL linkfold can store"):
        documents_for(stored, "not a url at all")
    with pytest.raises(NotFound, match="no such article or story ID"):
        documents_for(stored, "a" + "b" * 12)


def test_an_article_or_story_id_shows_its_founders_documents(stored):
    from dedupe_world import ids_of, settings
    from linkfold.dedupe.stage import run_dedupe

    run_dedupe(stored, settings=settings())
    for level in ("article", "story"):
        cluster_id = ids_of(stored, level)[URL]
        found = documents_for(stored, cluster_id, all_documents=True)
        assert found.located.cluster == cluster_id and found.located.level == level
        assert found.located.url == URL and [d["title"] for d in found.documents] == ["Tram depot"]
