"""The shared input layer on its own: whole-record reading, the opener, and the one problem shape.

Ingest's row readers (fast lanes, recovery after a broken record) are tested in test_ingest_readers.py;
this file tests what the other readers (redirect pairs, page manifest and JSON lines, documents) rely on.
"""

from __future__ import annotations

import gzip
import json
import tracemalloc

import pytest

from linkfold.errors import DumpFormatError, InputError, MissingColumnError
from linkfold.inputs import UNPARSED, DumpFormat, LineProblem, Reason, RecordProblem, open_input, read_records


def _records(path, fmt, **kw):
    return [(r.line, r.reason) if isinstance(r, LineProblem) else (r.line, r.values)
            for r in read_records(path, DumpFormat(fmt), **kw)]


def test_a_problem_keeps_an_excerpt_only_for_a_line_never_parsed():
    # Issue 15's rule: excerpts for malformed_csv, invalid_utf8, line_too_long and non-JSON bad_json only.
    assert {"malformed_csv", "invalid_utf8", "line_too_long", "bad_json"} == UNPARSED
    assert LineProblem("f.csv", 3, Reason.MALFORMED_CSV, "quote", excerpt='"a,b').excerpt == '"a,b'
    for reason in (Reason.BAD_TIME, Reason.FIELD_COUNT, Reason.MISSING_COLUMN, "missing_field"):
        with pytest.raises(ValueError, match="keeps no excerpt"):
            LineProblem("f.csv", 3, reason, "x", excerpt="panel-person-0042")
    assert str(LineProblem("f.csv", 3, "bad_time", "empty")) == "f.csv:3: bad_time: empty"
    assert str(RecordProblem("bad_url", "not a URL").at("f.jsonl", 9)) == "f.jsonl:9: bad_url: not a URL"


def test_csv_records_span_lines_and_bad_ones_cost_one_line(tmp_path):
    path = tmp_path / "pairs.csv"
    # RFC 4180 §2 (6): a field holding a line break is enclosed in double quotes; (7) a quote inside one
    # is doubled.
    path.write_bytes(b'short,expanded\n'
                     b'"https://s.test/a","https://n.example/a\n(two lines)"\n'
                     b'https://s.test/b,https://n.example/b,extra\n'
                     b'https://s.test/c\n'
                     b'"https://s.test/""d""",https://n.example/d\n')
    assert _records(path, "csv", required=(("short", "--short-column"),)) == [
        (2, {"short": "https://s.test/a", "expanded": "https://n.example/a\n(two lines)"}),
        (4, "field_count"), (5, "missing_column"),
        (6, {"short": 'https://s.test/"d"', "expanded": "https://n.example/d"})]


def test_whole_records_trim_the_header_names(tmp_path):
    path = tmp_path / "pairs.csv"
    path.write_text("short, expanded \nhttps://s.test/a,https://n.example/a\n")
    assert _records(path, "csv", required=(("expanded", "--expanded-column"),)) == [
        (2, {"short": "https://s.test/a", "expanded": "https://n.example/a"})]


def test_a_missing_required_column_names_its_option(tmp_path):
    path = tmp_path / "pairs.tsv"
    path.write_text("from\tto\nhttps://s.test/a\thttps://n.example/a\n")
    with pytest.raises(MissingColumnError, match=r"no column 'short' for --short-column; columns found: 'from', 'to'"):
        list(read_records(path, DumpFormat.TSV, required=(("short", "--short-column"),)))
    jsonl = tmp_path / "pairs.jsonl"
    jsonl.write_text(json.dumps({"from": "https://s.test/a"}) + "\n")
    with pytest.raises(MissingColumnError, match=r"no record among the first 1 has 'short' for --short-column"):
        list(read_records(jsonl, DumpFormat.JSONL, required=(("short", "--short-column"),)))


def test_json_lines_records_are_whole_objects_and_non_objects_are_bad_json(tmp_path):
    path = tmp_path / "docs.jsonl.gz"
    lines = [json.dumps({"url": "https://n.example/a", "nested": {"k": [1, 2]}}), "[1, 2]", "{broken", "",
             json.dumps({"url": "https://n.example/b"})]
    path.write_bytes(gzip.compress("\n".join(lines).encode()))
    got = list(read_records(path, DumpFormat.JSONL))
    assert got[0].values == {"url": "https://n.example/a", "nested": {"k": [1, 2]}}
    # A parsed line that is not an object keeps no excerpt; text that is not JSON does (RFC 8259 §2).
    assert (got[1].reason, got[1].excerpt) == ("bad_json", None)
    assert (got[2].reason, got[2].excerpt) == ("bad_json", "{broken")
    assert got[3].line == 5


def test_comment_lines_are_skipped_only_when_asked(tmp_path):
    path = tmp_path / "pages.tsv"
    path.write_text("# saved by hand\nfile\turl\n# a note\na.html\thttps://n.example/a\n")
    assert _records(path, "tsv", comments=True) == [(4, {"file": "a.html", "url": "https://n.example/a"})]
    assert _records(path, "tsv")[0] == (2, "field_count")  # the header is the comment line then


def test_other_encodings_are_refused_as_a_whole_for_text_only(tmp_path):
    path = tmp_path / "pairs.csv"
    path.write_bytes(("\ufeffshort,expanded\nhttps://s.test/a,https://n.example/a\n").encode("utf-16-le"))
    with pytest.raises(DumpFormatError, match=r"pairs\.csv:1: the file is UTF-16 \(little-endian\) text"):
        list(read_records(path, DumpFormat.CSV))
    with open_input(path, text=False) as fh:  # a page body: its charset is the page's business
        assert fh.read(2) == b"\xff\xfe"


def test_a_truncated_gzip_hands_on_every_whole_line_then_raises(tmp_path):
    # RFC 1952 §2.2: a member ends with CRC32 and ISIZE; a stream cut before them is truncated.
    lines = [json.dumps({"url": f"https://n.example/{i}"}) for i in range(5000)]
    data = gzip.compress(("\n".join(lines) + "\n").encode())
    path = tmp_path / "cut.jsonl.gz"
    path.write_bytes(data[: len(data) // 2])
    seen = []
    with pytest.raises(InputError, match=r"cut\.jsonl\.gz: the gzip stream is truncated"):
        seen.extend(read_records(path, DumpFormat.JSONL))
    assert len(seen) > 100 and all(not isinstance(r, LineProblem) for r in seen)
    assert [r.values["url"] for r in seen] == [f"https://n.example/{i}" for i in range(len(seen))]
    tiny = tmp_path / "tiny.csv.gz"
    tiny.write_bytes(gzip.compress(b"short,expanded\nhttps://s.test/a,https://n.example/a\n")[:20])
    with pytest.raises(InputError, match=r"tiny\.csv\.gz: the gzip stream is truncated before its first whole line"):
        list(read_records(tiny, DumpFormat.CSV))


def test_a_gzip_bomb_costs_a_piece_and_a_line_not_what_it_inflates_to(tmp_path):
    path = tmp_path / "bomb.jsonl.gz"
    with gzip.open(path, "wb", compresslevel=9) as fh:
        fh.write(json.dumps({"url": "https://n.example/a"}).encode() + b"\n")
        for _ in range(128):
            fh.write(b"\x20" * (1 << 20))  # 128 MiB of spaces without a line end
        fh.write(b"\n" + json.dumps({"url": "https://n.example/b"}).encode() + b"\n")
    assert path.stat().st_size < 1 << 20
    tracemalloc.start()
    try:
        got = _records(path, "jsonl", max_line_bytes=1 << 20)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert got == [(1, {"url": "https://n.example/a"}), (2, "line_too_long"), (3, {"url": "https://n.example/b"})]
    assert peak < 32 << 20, f"peak {peak / 2**20:.0f} MiB"


def test_the_four_commands_report_one_broken_line_alike(engine, tmp_path):
    # One reject style (issue 17): the same bytes that are not UTF-8 (RFC 3629 §3: 0xFF never appears in
    # UTF-8) give the same reason, line and excerpt rule in ingest, redirect import, page manifest and
    # documents load.
    import sqlalchemy as sa

    from linkfold import load_documents  # public: survives the split of content/stage.py
    from linkfold.content.pages import read_page_dir
    from linkfold.follow import import_redirects
    from linkfold.ingest import ingest_dump
    from linkfold.store import tables as t

    bad = b"https://s.test/\xff"
    dump = tmp_path / "visits.csv"
    dump.write_bytes(b"url\nhttps://n.example/a\n" + bad + b"\n")
    ingest_dump(engine, [dump], dataset="panel")
    with engine.connect() as conn:
        (row,) = conn.execute(sa.select(t.rejects.c.line_no, t.rejects.c.reason)).all()
    pairs = tmp_path / "pairs.csv"
    pairs.write_bytes(b"short,expanded\n" + bad + b",https://n.example/a\n")
    imported = import_redirects(engine, pairs)
    docs = tmp_path / "docs.jsonl"
    docs.write_bytes(json.dumps({"url": "https://n.example/a", "title": "T", "text": "x " * 80}).encode()
                     + b"\n{\"url\": \"" + bad + b"\"}\n")
    loaded = load_documents(engine, docs)
    pages = tmp_path / "pages"
    pages.mkdir()
    (pages / "pages.tsv").write_bytes(b"file\turl\nx.html\t" + bad + b"\n")
    (from_manifest,) = list(read_page_dir(pages))
    got = [tuple(row), (imported.problems[0].line, imported.problems[0].reason),
           (loaded.problems.kept[0].line, loaded.problems.kept[0].reason), (from_manifest.line, from_manifest.reason)]
    assert got == [(3, "invalid_utf8"), (2, "invalid_utf8"), (2, "invalid_utf8"), (2, "invalid_utf8")]
    assert all("0xff" in p.message for p in (imported.problems[0], loaded.problems.kept[0], from_manifest))


def test_the_input_layer_looks_only_down():
    # DESIGN.md "Layout": shared layers sit below the stages; reading files needs no database either.
    import ast
    from pathlib import Path

    import linkfold

    package = Path(linkfold.__file__).parent
    allowed = {"linkfold._json", "linkfold.errors"}
    for path in sorted((package / "inputs").glob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and node.level == 2:
                assert f"linkfold.{node.module}" in allowed, f"inputs/{path.name} imports linkfold.{node.module}"
            if isinstance(node, ast.Import):
                assert not any(a.name.startswith("linkfold") for a in node.names), path.name
        assert len(path.read_text(encoding="utf-8").splitlines()) <= 500, path.name
