"""The corpus (docs/corpus.md): one record per story or article seen, over a generated registry whose right
answer is known (tests/corpus_world.py), on both backends.

Outside references: the counts are recomputed in plain Python from the generator's own lists (never from
the registry); stop words come from the ``stop-words`` package's lists; Parquet is read back by pyarrow,
JSON lines by the standard library's json.
"""

from __future__ import annotations

import json
import re

import pytest

import corpus_world as cw
from linkfold.cli import main
from linkfold.corpus import Preparation, corpus_records, prepare, read_corpus, tokens_of, write_corpus
from linkfold.errors import ConfigError

DATASETS = ["panel", "posts"]


def _story_number(record) -> int:
    found = re.match(r"Story (\d+) about", record["title"])
    assert found, record["title"]
    return int(found.group(1))


def _world(engine, tmp_path):
    world = cw.generate()
    cw.load(engine, tmp_path, world)
    return world


def test_copies_collapse_and_counts_match_the_inputs(engine, tmp_path):
    world = _world(engine, tmp_path)
    for datasets in (DATASETS, ["posts"]):
        corpus = corpus_records(engine, datasets=datasets, level="story", min_units=1)
        got = {_story_number(r): r for r in corpus.records}
        want = cw.expected(world, datasets)
        # Syndicated copies appear once: one record per story, never one per outlet.
        assert sorted(got) == sorted(want)
        assert corpus.tally.written == len(want)
        for n, rec in got.items():
            w = want[n]
            assert rec["text"] == world.stories[n].text  # normalised text of invented words is the text
            for key in ("sightings", "units", "first_seen", "last_seen", "outlets", "published", "url",
                        "members", "articles"):
                assert rec[key] == w[key], (n, key, rec[key], w[key])
            assert rec["datasets"] == w["datasets"], n
        # The article seen without any document is left out and counted.
        assert corpus.tally.no_text == (1 if "panel" in datasets else 0)
        assert corpus.tally.seen == len(want) + corpus.tally.no_text


def test_article_level_gives_one_record_per_outlet_copy(engine, tmp_path):
    world = _world(engine, tmp_path)
    records = list(corpus_records(engine, datasets=DATASETS, level="article", min_units=1).records)
    want = cw.expected(world, DATASETS)
    assert sum(1 for _ in records) == sum(w["articles"] for w in want.values())
    assert all("article_id" in r and "articles" not in r for r in records)
    by_story: dict[int, int] = {}
    for r in records:
        by_story[_story_number(r)] = by_story.get(_story_number(r), 0) + r["sightings"]
    assert by_story == {n: w["sightings"] for n, w in want.items()}  # the story's sightings, split by copy


def test_the_small_group_floor_nulls_unit_counts(engine, tmp_path):
    world = _world(engine, tmp_path)
    corpus = corpus_records(engine, datasets=DATASETS)  # the default floor: 10 units, as exposure's aggregate
    want = cw.expected(world, DATASETS, min_units=10)
    records = {_story_number(r): r for r in corpus.records}
    for n, rec in records.items():
        assert rec["units"] == want[n]["units"]
        assert [d["units"] for d in rec["datasets"]] == [d["units"] for d in want[n]["datasets"]]
    # posts has four people: every posts entry is suppressed, and counted.
    assert all(d["units"] is None for r in records.values() for d in r["datasets"] if d["dataset"] == "posts")
    assert corpus.tally.units_suppressed > 0


def test_language_and_length_filters(engine, tmp_path):
    world = _world(engine, tmp_path)
    # BCP 47: "de" asks for "de-AT" as well; a full tag only for itself.
    german = list(corpus_records(engine, datasets=DATASETS, language="de").records)
    assert german and {r["language"] for r in german} == {"de-AT"}
    assert len(german) == len([n for n in cw.expected(world, DATASETS) if world.stories[n].language == "de-AT"])
    assert list(corpus_records(engine, datasets=DATASETS, language="de-CH").records) == []
    assert list(corpus_records(engine, datasets=DATASETS, min_words=151).records) == []  # every text has 150
    assert len(list(corpus_records(engine, datasets=DATASETS, min_words=150).records)) == len(
        cw.expected(world, DATASETS))


@pytest.mark.parametrize("fmt", ["jsonl", "parquet"])
def test_parquet_and_json_lines_read_back_equal(engine, tmp_path, fmt):
    _world(engine, tmp_path)
    how = Preparation(lowercase=True, stop_words=True, ngrams=2)
    want = list(corpus_records(engine, datasets=DATASETS, preparation=how).records)
    out = tmp_path / f"corpus.{fmt}"
    summary = write_corpus(engine, datasets=DATASETS, preparation=how, fmt=fmt, out=out)
    assert summary.counts["written"] == len(want) > 0
    got = list(read_corpus(out))
    assert got == want
    # The other format gives the same records too.
    other = tmp_path / "corpus.other"
    write_corpus(engine, datasets=DATASETS, preparation=how, fmt="parquet" if fmt == "jsonl" else "jsonl", out=other)
    assert list(read_corpus(other)) == got


def test_preparation_keeps_the_raw_text_beside():
    text = "The Ferry's crossing was well-known, and THE ferry crossed; it was the 3rd crossing."
    # tokens: letter/digit runs with an inner apostrophe or hyphen kept (common practice, not a standard)
    assert tokens_of(text) == ["The", "Ferry's", "crossing", "was", "well-known", "and", "THE", "ferry",
                               "crossed", "it", "was", "the", "3rd", "crossing"]
    out = prepare(text, "en-GB", Preparation(lowercase=True, stop_words=True, ngrams=3))
    # "the", "was", "and", "it" are on the stop-words package's English list.
    from stop_words import get_stop_words

    english = set(get_stop_words("en"))
    assert {"the", "was", "and", "it"} <= english
    assert out["stop_word_list"] == "en"
    assert not set(out["tokens"]) & english
    assert out["tokens"][:3] == ["ferry's", "crossing", "well-known"]
    assert out["ngrams"][0] == "ferry's_crossing" and "ferry's_crossing_well-known" in out["ngrams"]
    assert prepare(text, "xx", Preparation(stop_words=True))["stop_word_list"] is None  # no list: kept
    assert prepare(text, None, Preparation()) == {}
    with pytest.raises(ValueError):
        Preparation(ngrams=9)


def test_the_command_writes_atomically_and_summarises(db_url, tmp_path, capsys):
    from linkfold.store import make_engine

    engine = make_engine(db_url)
    try:
        world = _world(engine, tmp_path)
    finally:
        engine.dispose()
    out = tmp_path / "stories.parquet"
    assert main(["--db", db_url, "corpus", "--level", "story", "--dataset", "panel", "--dataset", "posts",
                 "--format", "parquet", "--out", str(out), "--drop-stop-words", "--ngrams", "2"]) == 0
    err = capsys.readouterr().err
    want = cw.expected(world, DATASETS)
    assert f"{len(want):,} records of {len(want) + 1:,} story IDs seen" in err
    assert "1 without a usable text" in err
    records = list(read_corpus(out))
    assert len(records) == len(want) and all("ngrams" in r and "tokens" in r for r in records)
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".part")]
    # JSON lines on stdout; -q says nothing on stderr.
    assert main(["--db", db_url, "corpus", "--dataset", "posts", "-q"]) == 0
    captured = capsys.readouterr()
    assert captured.err == ""
    lines = [json.loads(line) for line in captured.out.splitlines()]
    assert len(lines) == len(cw.expected(world, ["posts"]))
    # Errors: an unknown dataset (7, not found), Parquet without a file (3, configuration).
    assert main(["--db", db_url, "corpus", "--dataset", "nope", "--out", str(tmp_path / "x.jsonl")]) == 7
    assert not (tmp_path / "x.jsonl").exists()
    assert main(["--db", db_url, "corpus", "--format", "parquet"]) == 3


def test_bad_arguments_are_refused(engine):
    with pytest.raises(ConfigError):
        corpus_records(engine, datasets=["x"], level="outlet")
    with pytest.raises(ConfigError):
        write_corpus(engine, datasets=["x"], fmt="csv")


# --- over HTTP and from the Python client -------------------------------------------------------------------
def test_the_client_reads_the_corpus_and_the_comparison(db_url, engine, tmp_path):
    from linkfold.client import ApiError, Client
    from linkfold.compare import compare_datasets
    from linkfold.store.tokens import create_token
    from test_api_support import LiveServer

    _world(engine, tmp_path)
    read = create_token(engine, scope="read", note="corpus tests").secret
    want = list(corpus_records(engine, datasets=DATASETS, preparation=Preparation(tokens=True)).records)
    with LiveServer(db_url, cwd=tmp_path) as server, Client(server.url, token=read) as lf:
        got = list(lf.corpus(DATASETS, tokens=True))
        frame = lf.corpus_frame("posts", level="article")
        comparison = lf.compare(DATASETS, top=3)
        with pytest.raises(ApiError) as below:
            list(lf.corpus(DATASETS, min_units=2))  # never below the documented minimum over HTTP
        assert below.value.status == 422
        with pytest.raises(ApiError) as unknown:
            lf.compare(["panel", "no-such-dataset"])
        assert unknown.value.status == 404
    assert got == want
    assert len(frame) == len(list(corpus_records(engine, datasets=["posts"], level="article").records))
    assert "article_id" in frame.columns and "text" in frame.columns
    lib = json.loads(json.dumps(compare_datasets(engine, datasets=DATASETS, top=3).as_dict()))
    assert comparison == lib
