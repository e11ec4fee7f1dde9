"""Importing (short, expanded) pairs instead of fetching, on both backends."""

from __future__ import annotations

import gzip
import json

import pytest
import sqlalchemy as sa

from linkfold.canon import canonicalize
from linkfold.errors import DumpFormatError, InputError, MissingColumnError
from linkfold.follow import follow_links, import_redirects
from linkfold.settings import load_settings
from linkfold.store import evidence as ev
from linkfold.store import tables as t

PAIRS = [
    ("https://short.test/a1", "https://northvale-herald.example/news/2026/03/bridge-reopens"),
    ("https://short.test/b2", "https://riverton-daily.test/story/council-vote?utm_source=feed"),
    ("http://short.test/c3", "https://lakeside-wire.example/wire/harbour-plan"),
]


def cid(conn, url):
    key = canonicalize(url).url_key
    return conn.execute(sa.select(t.canonical_urls.c.id).where(t.canonical_urls.c.url_key == key)).scalar_one()


def count(conn, table, *where):
    return conn.execute(sa.select(sa.func.count()).select_from(table).where(*where)).scalar_one()


def write_csv(path, rows, header="short,expanded", sep=","):
    path.write_text(header + "\n" + "".join(f"{a}{sep}{b}\n" for a, b in rows), encoding="utf-8")
    return path


def test_csv_pairs_become_redirect_links_and_settle_the_short_urls(engine, tmp_path):
    path = write_csv(tmp_path / "pairs.csv", PAIRS)
    summary = import_redirects(engine, path)
    assert (summary.pairs, summary.links, summary.settled) == (3, 3, 3)
    assert not summary.problems
    with engine.connect() as conn:
        short = cid(conn, PAIRS[1][0])
        expanded = cid(conn, PAIRS[1][1])  # canonicalised: the analytics parameter is gone
        links = ev.links_of(conn, short)
        assert [(x["kind"], x["src_id"], x["dst_id"], x["source"], x["hop"]) for x in links] == \
            [("redirect", short, expanded, "import:pairs.csv", 1)]
        assert links[0]["detail"] == {"line": 3}
        result = ev.follow_result(conn, short)
        assert result["state"] == "resolved" and result["via"] == "imported" and result["final_id"] == expanded
        assert count(conn, t.runs, t.runs.c.stage == "follow_import") == 1
    # Nothing left to fetch for those short links.
    settings = load_settings({"contact": "mailto:lab@university.example"}, environ={})
    assert follow_links(engine, settings=settings, hosts=["short.test"]).selected == 0


def test_importing_twice_adds_nothing(engine, tmp_path):
    path = write_csv(tmp_path / "pairs.csv", PAIRS)
    import_redirects(engine, path)
    again = import_redirects(engine, path)
    assert again.links == 0 and again.already_linked == 3
    with engine.connect() as conn:
        assert count(conn, t.links) == 3


def test_bad_lines_are_reported_with_numbers_and_skipped(engine, tmp_path):
    path = tmp_path / "mixed.csv"
    path.write_bytes(
        b"short,expanded\n"
        + f"{PAIRS[0][0]},{PAIRS[0][1]}\n".encode()          # 2: good
        + b"https://short.test/x,\n"                           # 3: no expanded URL
        + b"https://short.test/\xff\xfe,https://news.test/a\n"  # 4: not UTF-8
        + b'"https://short.test/q,https://news.test/b\n'      # 5: open quote
        + b"javascript:alert(1),https://news.test/c\n"        # 6: not an http(s) URL
        + b"\n"                                                # 7: blank, ignored
        + f"{PAIRS[2][0]},{PAIRS[2][1]}\n".encode()          # 8: good
        + b"https://short.test/same,https://short.test/same\n"  # 9: one URL, nothing to link
    )
    summary = import_redirects(engine, path)
    assert summary.links == 2 and summary.same_url == 1 and summary.lines_read == 9
    assert [(p.line, p.reason) for p in summary.problems] == [
        (3, "missing_value"), (4, "invalid_utf8"), (5, "malformed_csv"), (6, "short_not_http")]
    assert sum(summary.problem_counts.values()) == 4


def test_missing_column_fails_before_writing(engine, tmp_path):
    path = write_csv(tmp_path / "pairs.csv", PAIRS, header="from,to")
    with pytest.raises(MissingColumnError, match=r"pairs\.csv: no column 'short' for --short-column; columns found: 'from', 'to'"):
        import_redirects(engine, path)
    with engine.connect() as conn:
        assert count(conn, t.runs) == 0 and count(conn, t.links) == 0


def test_column_names_can_be_given(engine, tmp_path):
    path = write_csv(tmp_path / "pairs.tsv", PAIRS, header="link\ttarget", sep="\t")
    summary = import_redirects(engine, path, short_column="link", expanded_column="target")
    assert summary.links == 3


def test_jsonl_and_gzip(engine, tmp_path):
    lines = [json.dumps({"short": a, "expanded": b, "post": i}) for i, (a, b) in enumerate(PAIRS)]
    lines.insert(1, "[1, 2]")
    lines.insert(2, "{not json")
    lines.insert(3, json.dumps({"short": "https://short.test/z", "expanded": 7}))
    path = tmp_path / "posts.jsonl.gz"
    with gzip.open(path, "wt", encoding="utf-8") as fh:
        fh.write("\n".join(lines) + "\n")
    summary = import_redirects(engine, path)
    assert summary.links == 3
    assert [(p.line, p.reason) for p in summary.problems] == [
        (2, "bad_json"), (3, "bad_json"), (4, "missing_value")]
    with engine.connect() as conn:
        assert ev.links_of(conn, cid(conn, PAIRS[0][0]))[0]["source"] == "import:posts.jsonl.gz"


def test_a_failed_short_link_is_settled_but_a_resolved_one_is_kept(engine, tmp_path):
    from datetime import UTC, datetime

    with engine.begin() as conn:
        ids = ev.register_urls(conn, [(PAIRS[0][0], canonicalize(PAIRS[0][0])),
                                      (PAIRS[1][0], canonicalize(PAIRS[1][0]))], ruleset_id=None)
        now = datetime.now(UTC)
        ev.record_outcomes(conn, [
            ev.Outcome(ids[PAIRS[0][0]].canonical_id, "failed", "fetched", now, failure="http_4xx"),
            ev.Outcome(ids[PAIRS[1][0]].canonical_id, "resolved", "fetched", now, hops=0)], run_id=None)
    import_redirects(engine, write_csv(tmp_path / "pairs.csv", PAIRS[:2]))
    with engine.connect() as conn:
        assert ev.follow_result(conn, ids[PAIRS[0][0]].canonical_id)["via"] == "imported"
        kept = ev.follow_result(conn, ids[PAIRS[1][0]].canonical_id)
        assert kept["via"] == "fetched" and kept["hops"] == 0
        # The history keeps both the failure and the import.
        assert [a["state"] for a in ev.follow_attempts_of(conn, ids[PAIRS[0][0]].canonical_id)] == \
            ["failed", "resolved"]


@pytest.mark.parametrize(("name", "content", "error"), [
    ("pairs.json", "{}", DumpFormatError),
    ("empty.csv", "", DumpFormatError),
    ("missing.csv", None, InputError),
])
def test_whole_file_problems(engine, tmp_path, name, content, error):
    path = tmp_path / name
    if content is not None:
        path.write_text(content, encoding="utf-8")
    with pytest.raises(error, match=name.replace(".", r"\.")):
        import_redirects(engine, path)


def test_jsonl_columns_are_paths_as_in_ingest(engine, tmp_path):
    # The shared readers' paths (docs/ingest.md, "Paths into JSON records") name the pair's two URLs.
    lines = [json.dumps({"link": {"short": a, "long": b}}) for a, b in PAIRS]
    path = tmp_path / "posts.jsonl"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    summary = import_redirects(engine, path, short_column="link.short", expanded_column="link.long")
    assert summary.links == 3 and not summary.problems
