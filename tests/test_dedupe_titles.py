"""Short texts: the title-and-date rule of docs/dedupe.md §6, from documents loaded to one story ID.

Two briefs of a few dozen words, rewritten by two outlets, share almost no shingles, so band keys never
make them a candidate pair; and the content stage marks a text under 50 words ``too_short``. Title keys
(§4a) and the signing of short documents make the rule work as written: a short or missing text on
either side, titles at least 90 similar (rapidfuzz ratio), both dates known and at most three days
apart, different outlets → one story. Negatives: dates far apart, one outlet, titles of a few words,
no date, two long texts.

Invented world on reserved names (RFC 2606); the texts are generated syllable strings.
"""

from __future__ import annotations

import hashlib
import json
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa
from rapidfuzz import fuzz

from dedupe_world import Texts, add_document, ids_of, load_urls, settings
from linkfold.content.loading import load_documents
from linkfold.dedupe import MIN_TITLE_WORDS, normalise_words, title_keys
from linkfold.dedupe.stage import count_pending, run_dedupe
from linkfold.dedupe.stage.signing import TITLES
from linkfold.store import tables as t

TITLE = "Crane topples onto the Varn quay overnight"
NOON = datetime(2024, 6, 2, 11, 30, tzinfo=UTC)   # loaded dates may not lie in the future


# --- the keys (pure) ------------------------------------------------------------------------------------
def test_a_key_is_blake2b_of_the_normalised_words():
    # RFC 7693 BLAKE2b, digest_size 8, of "lft1" and the words, little-endian signed: computed here with
    # the standard library, independently of the module.
    words = normalise_words(TITLE)
    expected = int.from_bytes(hashlib.blake2b(("lft1 " + " ".join(words)).encode(), digest_size=8).digest(),
                              "little", signed=True)
    assert expected in title_keys(TITLE)
    assert len(title_keys(TITLE)) == 1 + len(words)          # all words, and each one left out
    assert all(-(2**63) <= k < 2**63 for k in title_keys(TITLE))


@pytest.mark.parametrize("other", [
    "CRANE TOPPLES onto the Varn quay, overnight!",           # case and punctuation (§1 normalisation)
    "Crane topples onto the Varn quay",                       # one word dropped
    "Crane topples onto the old Varn quay overnight",         # one word added
    "Crane falls onto the Varn quay overnight",               # one word replaced
])
def test_titles_one_word_apart_share_a_key(other):
    assert set(title_keys(TITLE)) & set(title_keys(other))
    # and the rule they are candidates for would accept them (rapidfuzz ratio on normalised titles)
    norm = " ".join
    assert fuzz.ratio(norm(normalise_words(TITLE)), norm(normalise_words(other))) >= 85


def test_unrelated_and_short_titles_have_no_common_key():
    assert not set(title_keys(TITLE)) & set(title_keys("Orchard festival opens in the valley"))
    assert title_keys("Weather") == [] and title_keys("Live updates today") == []   # under MIN_TITLE_WORDS
    assert len(normalise_words("Letters to the editor")) == MIN_TITLE_WORDS
    assert len(title_keys("Letters to the editor")) == 1                          # no deletion keys
    assert title_keys(None) == [] and title_keys("") == []


# --- the stage -------------------------------------------------------------------------------------------
def _jsonl(path, records):
    path.write_text("".join(json.dumps(r) + "\n" for r in records), encoding="utf-8")
    return path


def _brief(url, words, *, title=TITLE, at=NOON):
    return {"url": url, "title": title, "text": " ".join(words).capitalize() + ".",
            "published": at.isoformat().replace("+00:00", "Z") if at else None}


@pytest.mark.parametrize("n_words", [20, 33, 45])
def test_two_briefs_with_one_title_become_one_story(engine, tmp_path, n_words):
    texts = Texts(seed=n_words)
    a, b = "https://herald.example/brief/crane", "https://courier.test/n/crane-quay"
    path = _jsonl(tmp_path / "briefs.jsonl", [
        _brief(a, texts.article(n_words)),
        # the other outlet's own wording, two hours later
        _brief(b, texts.article(n_words), title=TITLE + ".", at=NOON + timedelta(hours=2)),
    ])
    loaded = load_documents(engine, path, settings=settings())
    assert loaded.no_text == {"too_short": 2}        # the content stage's label: under 50 words
    summary = run_dedupe(engine, settings=settings())
    assert summary.signing.signed == 2 and summary.matching.title_candidates == 1
    stories, arts = ids_of(engine, "story"), ids_of(engine, "article")
    assert stories[a] == stories[b] and arts[a] != arts[b]
    with engine.connect() as conn:
        [detail] = conn.execute(sa.select(t.links.c.detail).where(t.links.c.kind == "similar_text")).scalars()
    assert detail["reason"] == "title_and_date" and detail["title_ratio"] == 100.0
    assert detail["date_gap_days"] == 0
    assert count_pending(engine, settings=settings()) == 0


def test_a_brief_and_a_long_text_with_one_title(engine, tmp_path):
    texts = Texts(seed=60)
    a, b, c = ("https://herald.example/brief/crane", "https://courier.test/n/crane-quay",
               "https://gazette.example/crane")
    path = _jsonl(tmp_path / "mixed.jsonl", [
        _brief(a, texts.article(33)),
        _brief(b, texts.article(60), at=NOON + timedelta(hours=5)),
        # two long texts (60 words) with one title but their own words: the text decides, not the title
        _brief(c, texts.article(60), at=NOON + timedelta(hours=7)),
    ])
    load_documents(engine, path, settings=settings())
    run_dedupe(engine, settings=settings())
    stories = ids_of(engine, "story")
    # a–b and a–c are joined on the title (a is short); b–c alone would not be, but a joins all three
    assert stories[a] == stories[b] == stories[c]
    with engine.connect() as conn:
        pairs = conn.execute(sa.select(t.links.c.src_id, t.links.c.dst_id).where(t.links.c.kind == "similar_text")).all()
    assert len(pairs) == 2


def test_no_story_without_the_rule(engine, tmp_path):
    texts = Texts(seed=8)
    urls = {
        "far": "https://courier.test/n/crane-again",                 # same title, ten days later
        "same_outlet": "https://herald.example/late/crane",          # same title, same outlet
        "undated": "https://gazette.example/crane-undated",          # same title, no date
        "short_title": "https://ledger.test/weather",                # a title of one word
        "short_title_too": "https://gazette.example/weather",
    }
    base = "https://herald.example/brief/crane"
    path = _jsonl(tmp_path / "negatives.jsonl", [
        _brief(base, texts.article(30)),
        _brief(urls["far"], texts.article(30), at=NOON + timedelta(days=10)),
        _brief(urls["same_outlet"], texts.article(30), at=NOON + timedelta(hours=1)),
        _brief(urls["undated"], texts.article(30), at=None),
        _brief(urls["short_title"], texts.article(30), title="Weather"),
        _brief(urls["short_title_too"], texts.article(30), title="Weather"),
    ])
    load_documents(engine, path, settings=settings())
    run_dedupe(engine, settings=settings())
    stories = ids_of(engine, "story")
    assert len({stories[u] for u in [base, *urls.values()]}) == 6
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(t.links)
                            .where(t.links.c.kind == "similar_text")).scalar_one() == 0


def test_briefs_in_two_runs_meet_once(engine, tmp_path):
    # docs/dedupe.md §10: each pair is examined once whatever the batch boundaries; the second brief,
    # loaded a night later, finds the first through the title-key index.
    texts = Texts(seed=9)
    a, b = "https://herald.example/brief/crane", "https://courier.test/n/crane-quay"
    load_documents(engine, _jsonl(tmp_path / "one.jsonl", [_brief(a, texts.article(30))]), settings=settings())
    run_dedupe(engine, settings=settings())
    load_documents(engine, _jsonl(tmp_path / "two.jsonl", [_brief(b, texts.article(30), at=NOON + timedelta(hours=2))]),
                   settings=settings())
    second = run_dedupe(engine, settings=settings())
    assert second.matching.matched == 1 and second.matching.title_candidates == 1
    stories = ids_of(engine, "story")
    assert stories[a] == stories[b]
    again = run_dedupe(engine, settings=settings())
    assert again.matching.candidates == 0


def test_a_usable_text_is_not_replaced_by_a_later_stub(engine, tmp_path):
    texts = Texts(seed=10)
    url = "https://herald.example/news/crane"
    load_urls(engine, [url], tmp_path)
    full = add_document(engine, "herald.example/news/crane", " ".join(texts.article(200)), title=TITLE,
                        published=NOON)
    run_dedupe(engine, settings=settings())
    stub = add_document(engine, "herald.example/news/crane", " ".join(texts.article(20)), title=TITLE,
                        published=NOON)
    with engine.begin() as conn:   # as the content stage stores a text under 50 words
        conn.execute(t.documents.update().where(t.documents.c.id == stub)
                     .values(state="no_text", reason="too_short", text_hash=None))
    summary = run_dedupe(engine, settings=settings())
    assert summary.signing.signed == 0
    with engine.connect() as conn:
        keyed = set(conn.execute(sa.select(t.band_keys.c.document_id).distinct()).scalars())
    assert keyed == {full}


def test_documents_signed_before_title_keys_get_theirs(engine, tmp_path):
    texts = Texts(seed=12)
    a, b = "https://herald.example/brief/crane", "https://courier.test/n/crane-quay"
    load_documents(engine, _jsonl(tmp_path / "one.jsonl", [_brief(a, texts.article(30))]), settings=settings())
    run_dedupe(engine, settings=settings())
    with engine.begin() as conn:   # a registry from before title keys: none stored, no mark
        conn.execute(t.title_keys.delete())
        conn.execute(t.stage_marks.delete().where(t.stage_marks.c.name == TITLES))
    assert count_pending(engine, settings=settings()) == 1
    load_documents(engine, _jsonl(tmp_path / "two.jsonl", [_brief(b, texts.article(30), at=NOON + timedelta(hours=2))]),
                   settings=settings())
    summary = run_dedupe(engine, settings=settings())
    assert summary.signing.titled == 2 * len(title_keys(TITLE))
    stories = ids_of(engine, "story")
    assert stories[a] == stories[b]
    assert count_pending(engine, settings=settings()) == 0
