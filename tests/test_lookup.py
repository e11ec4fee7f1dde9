"""lookup on both backends: by url key, by known raw text, by canonicalising on the fly; the answer's
fields are a promise to other projects, so they are pinned here."""

from __future__ import annotations

import base64
import hashlib
import io
import json

import pytest

from linkfold.cli import main
from linkfold.ingest import LOOKUP_FIELDS, ingest_dump, is_url_key, lookup
from linkfold.store.lookup import OLD_FIELDS


def reference_key(canonical_url: str) -> str:
    # The url key definition, recomputed with the reference libraries: SHA-256 (hashlib), first 15 bytes,
    # RFC 4648 §6 base32 (base64.b32encode), lower case, no padding (15 bytes = 24 characters exactly).
    return base64.b32encode(hashlib.sha256(canonical_url.encode("utf-8")).digest()[:15]).decode().lower()


@pytest.fixture
def loaded(engine, tmp_path):
    a = tmp_path / "panel.csv"
    a.write_text("id,url\n"
                 "1,https://www.daily-harbour.example/2031/05/bridge?utm_source=feed\n"
                 "2,https://daily-harbour.example/2031/05/bridge\n"
                 "3,not a link at all\n")
    b = tmp_path / "posts.txt"
    b.write_text("https://daily-harbour.example/2031/05/bridge\n")
    ingest_dump(engine, [a], dataset="panel", key_column="id")
    ingest_dump(engine, [b], dataset="posts")
    return engine


def test_answer_has_the_promised_fields(loaded):
    (answer,) = lookup(loaded, ["https://daily-harbour.example/2031/05/bridge"])
    # The old names canonical and error come last, for one release (docs/vocabulary.md).
    assert tuple(answer) == (*LOOKUP_FIELDS, *OLD_FIELDS)
    assert {"input", "canonical_url", "url_key", "domain", "seen", "article_id", "story_id"} <= set(answer)
    assert answer["canonical"] == answer["canonical_url"] and answer["error"] == answer["reason"]


def test_known_url_by_raw_text_and_by_canonical_form(loaded):
    raw, variant = lookup(loaded, ["https://www.daily-harbour.example/2031/05/bridge?utm_source=feed",
                                   "HTTPS://DAILY-HARBOUR.EXAMPLE/2031/05/bridge#top"])
    assert raw["matched_by"] == "raw_url" and raw["seen"] is True
    assert variant["matched_by"] == "canonical_url" and variant["seen"] is True
    assert raw["canonical"] == variant["canonical"]
    assert raw["url_key"] == reference_key(raw["canonical"])
    # Three sightings through two raw URLs, in two datasets.
    assert (raw["sightings"], raw["datasets"]) == (3, 2)
    assert raw["domain"] == "daily-harbour.example"
    assert raw["article_id"] is None and raw["story_id"] is None


def test_lookup_by_url_key(loaded):
    (first,) = lookup(loaded, ["https://daily-harbour.example/2031/05/bridge"])
    key = first["url_key"]
    assert is_url_key(key)
    by_key, upper = lookup(loaded, [key, key.upper()])
    assert by_key["matched_by"] == "url_key" and by_key["canonical"] == first["canonical"]
    assert upper["canonical"] == first["canonical"]


def test_unknown_key_and_never_loaded_url(loaded):
    unknown_key = reference_key("https://nowhere.example/")
    never, missing = lookup(loaded, ["https://valley-post.test/story/9?utm_medium=x", unknown_key])
    assert never["seen"] is False and never["canonical"] == "https://valley-post.test/story/9"
    assert never["url_key"] == reference_key(never["canonical"]) and never["sightings"] == 0
    assert missing["seen"] is False and missing["canonical"] is None and missing["matched_by"] == "url_key"


def test_unparsable_input(loaded):
    loaded_bad, fresh_bad = lookup(loaded, ["not a link at all", "javascript:void(0)"])
    assert loaded_bad["reason"] == "no_scheme" and loaded_bad["seen"] is True and loaded_bad["sightings"] == 1
    assert fresh_bad["error"] == "not_http" and fresh_bad["seen"] is False and fresh_bad["canonical"] is None


def test_streams_in_order_over_many_chunks(loaded):
    items = (f"https://a.example/{i}" for i in range(1234))
    answers = list(lookup(loaded, items))
    assert [a["input"] for a in answers] == [f"https://a.example/{i}" for i in range(1234)]


def test_key_shape_is_the_rfc4648_base32_alphabet():
    assert is_url_key(reference_key("https://a.example/"))
    assert not is_url_key("0" * 24)  # 0, 1, 8, 9 are not in the RFC 4648 §6 alphabet
    assert not is_url_key("a" * 23)


def test_lookup_on_an_empty_registry_writes_nothing(engine):
    from linkfold.store import tables as t

    list(lookup(engine, ["https://a.example/"]))
    with engine.connect() as conn:
        assert conn.execute(t.rulesets.select()).first() is None


def test_cli_lookup_arguments_and_stdin(loaded, db_url, capsys, monkeypatch):
    assert main(["--db", db_url, "lookup", "https://daily-harbour.example/2031/05/bridge"]) == 0
    (line,) = capsys.readouterr().out.splitlines()
    assert json.loads(line)["seen"] is True
    monkeypatch.setattr("sys.stdin", io.StringIO("https://a.example/1\n\nnot a url\r\n"))
    assert main(["--db", db_url, "lookup"]) == 0
    answers = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert [a["input"] for a in answers] == ["https://a.example/1", "not a url"]
