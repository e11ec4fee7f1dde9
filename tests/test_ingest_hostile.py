"""Hostile input, one line at a time: JSON the parser cannot hold, files in another encoding, empty files of
every format, and a gzip that inflates a thousandfold, on both backends.

Sources of the limits checked: Python's JSON reader recurses once per nesting level and stops at the
interpreter's recursion limit (``sys.getrecursionlimit()``, 1000 by default); Python refuses to turn more
than ``sys.get_int_max_str_digits()`` digits (4300 by default) into an int (the Python 3.11 documentation,
"Integer string conversion length limitation"). Byte order marks are the Unicode Standard's (§23.8, Table
23-5); reading UTF-16 without one by the position of its NUL bytes is RFC 4627 §3. Gzip is RFC 1952.
Everything else (which reason, which message) is linkfold's own behaviour.
"""

from __future__ import annotations

import gzip
import json
import subprocess
import sys
import textwrap
import zlib
from pathlib import Path

import pytest
import sqlalchemy as sa

from linkfold.errors import DumpFormatError
from linkfold.ingest import FileOutcome, ingest_dump
from linkfold.ingest import load as load_module
from linkfold.inputs import foreign_encoding, inspect_file
from linkfold.inputs.jsonlines import JsonLines
from linkfold.store import tables as t
from test_ingest_load import counts, rejects


def _deep(levels: int) -> str:
    return "[" * levels + "]" * levels


def _good(i: int) -> str:
    return json.dumps({"url": f"https://harbour-gazette.example/2031/05/story-{i}", "visit": f"v{i}"})


# Far past the recursion limit, and a number one digit past the conversion limit (both from memory of
# CPython's defaults; the test reads the live values).
DEEP = '{"url": "https://harbour-gazette.example/deep", "x": ' + _deep(sys.getrecursionlimit() * 5) + "}"
LONG_INT = ('{"url": "https://harbour-gazette.example/long", "n": ' + "7" * (sys.get_int_max_str_digits() + 1)
            + "}")


def _reject_details(engine) -> dict[int, tuple[str, str]]:
    with engine.connect() as conn:
        return {r.line_no: (r.reason, r.detail)
                for r in conn.execute(sa.select(t.rejects.c.line_no, t.rejects.c.reason, t.rejects.c.detail))}


@pytest.mark.parametrize("fast_lane", [True, False], ids=["block-lane", "line-lane"])
def test_json_past_the_readers_limits_is_a_reject_of_that_line(engine, tmp_path, monkeypatch, fast_lane):
    monkeypatch.setattr(JsonLines, "fast_lane", fast_lane)
    # Line 1 is read by the format check, lines 1203 and 1204 after it (the check looks at 1000 lines).
    lines = [DEEP] + [_good(i) for i in range(2, 1203)] + [DEEP, LONG_INT] + [_good(i) for i in range(1205, 1301)]
    path = tmp_path / "posts.jsonl"
    path.write_text("\n".join(lines) + "\n")
    summary = ingest_dump(engine, [path], dataset="posts", key_column="visit")
    assert summary.files[0].outcome is FileOutcome.LOADED
    assert summary.rows == 1300 and summary.sightings == 1297
    got = _reject_details(engine)
    bad = {n: v for n, v in got.items() if v[0] != "missing_key"}  # the bad lines have no "visit" either
    assert sorted(bad) == [1, 1203, 1204]
    assert bad[1][0] == bad[1203][0] == bad[1204][0] == "bad_json"
    assert "nested deeper than the reader can follow" in bad[1203][1]
    assert f"more than {sys.get_int_max_str_digits():,} digits" in bad[1204][1]
    with engine.connect() as conn:
        assert conn.execute(sa.select(t.dataset_files.c.state)).scalar_one() == "complete"


def test_a_file_of_only_unholdable_lines_is_still_json_lines(engine, tmp_path):
    path = tmp_path / "one.jsonl"
    path.write_text(LONG_INT + "\n" + DEEP + "\n")
    summary = ingest_dump(engine, [path], dataset="one")
    assert (summary.rows, summary.sightings) == (2, 0)
    assert [r[2] for r in rejects(engine)] == ["bad_json", "bad_json"]


def test_a_deep_line_mid_file_does_not_strand_an_interrupted_load(engine, tmp_path, monkeypatch):
    # Before the fix the deep line ended every load with a traceback and the file stayed "loading":
    # each rerun resumed and died on it again. Here a load is interrupted before it, then rerun.
    lines = [_good(i) for i in range(1, 401)] + [DEEP] + [_good(i) for i in range(402, 501)]
    path = tmp_path / "posts.jsonl"
    path.write_text("\n".join(lines) + "\n")
    real = load_module.Canonicaliser

    class Dying(real):  # type: ignore[misc, valid-type]
        seen = 0

        def __call__(self, raw):
            Dying.seen += 1
            if Dying.seen == 250:
                raise KeyboardInterrupt("simulated interruption")
            return super().__call__(raw)

    monkeypatch.setattr(load_module, "Canonicaliser", Dying)
    with pytest.raises(KeyboardInterrupt):
        ingest_dump(engine, [path], dataset="posts", batch_size=100)
    monkeypatch.undo()
    with engine.connect() as conn:
        assert conn.execute(sa.select(t.dataset_files.c.state)).scalar_one() == "loading"
    summary = ingest_dump(engine, [path], dataset="posts", batch_size=100)
    assert summary.files[0].outcome is FileOutcome.RESUMED
    assert rejects(engine) == [(401, -1, "bad_json")]
    assert counts(engine)["sightings"] == 499
    with engine.connect() as conn:
        assert conn.execute(sa.select(t.dataset_files.c.state)).scalar_one() == "complete"
    assert ingest_dump(engine, [path], dataset="posts").files[0].outcome is FileOutcome.ALREADY_LOADED


def test_values_that_cannot_be_written_back_become_rejects(engine, tmp_path):
    # Deep but within the reader's reach from any stack (the limit's edge is rows.shown's own test below).
    near = sys.getrecursionlimit() // 2
    lines = [
        '{"url": "https://a.example/1", "k": ' + _deep(near) + ', "t": "2031-05-04T08:00:00Z"}',
        '{"url": "https://a.example/2", "k": "b", "t": ' + "9" * 400 + "}",  # past the float range
        '{"url": ' + _deep(near) + ', "k": "c", "t": "2031-05-04T08:00:00Z"}',
        '{"url": "https://a.example/4", "k": "d", "t": ' + _deep(near) + "}",
    ]
    path = tmp_path / "odd.jsonl"
    path.write_text("\n".join(lines) + "\n")
    summary = ingest_dump(engine, [path], dataset="odd", key_column="k", time_column="t")
    assert (summary.rows, summary.sightings) == (4, 3)
    assert rejects(engine) == [(1, -1, "bad_key"), (2, -2, "bad_time"), (3, 0, "not_text"), (4, -2, "bad_time")]
    assert "out of range" in _reject_details(engine)[2][1]


# --- encodings -------------------------------------------------------------------------------------------
CSV_TEXT = "visit,url\nv1,https://harbour-gazette.example/a\nv2,https://valley-courier.test/b\n"
ENCODED = {
    "utf-16 with BOM (LE)": ("\ufeff" + CSV_TEXT).encode("utf-16-le"),
    "utf-16 with BOM (BE)": ("\ufeff" + CSV_TEXT).encode("utf-16-be"),
    "utf-16-le without BOM": CSV_TEXT.encode("utf-16-le"),
    "utf-16-be without BOM": CSV_TEXT.encode("utf-16-be"),
    "utf-32 with BOM (LE)": ("\ufeff" + CSV_TEXT).encode("utf-32-le"),
}


@pytest.mark.parametrize("label", sorted(ENCODED))
@pytest.mark.parametrize("suffix", [".csv", ".jsonl", ".txt", ".csv.gz"])
def test_a_file_in_another_encoding_is_refused_naming_it(engine, tmp_path, label, suffix):
    data = ENCODED[label]
    if suffix.endswith(".gz"):
        data = gzip.compress(data)
    path = tmp_path / f"export{suffix}"
    path.write_bytes(data)
    expected = "UTF-32" if "32" in label else "UTF-16"
    with pytest.raises(DumpFormatError, match=rf"export{suffix.replace('.', '[.]')}:1: the file is {expected}"):
        ingest_dump(engine, [path], dataset="panel")
    assert all(n == 0 for n in counts(engine).values())


def test_encoding_sniffing_by_bom_and_nul_positions():
    # Unicode §23.8 Table 23-5 (byte order marks); RFC 4627 §3 (NUL positions of UTF-16/32 text).
    assert foreign_encoding(b"\xff\xfeu\x00r\x00l\x00") == "UTF-16 (little-endian) text (it starts with that byte order mark)"
    assert foreign_encoding(b"\xfe\xff\x00u\x00r").startswith("UTF-16 (big-endian)")
    assert foreign_encoding(b"\xff\xfe\x00\x00u\x00\x00\x00").startswith("UTF-32 (little-endian)")
    assert foreign_encoding(b"\x00\x00\xfe\xff\x00\x00\x00u").startswith("UTF-32 (big-endian)")
    assert foreign_encoding("url\n".encode("utf-16-le")).startswith("UTF-16 (little-endian) text without")
    assert foreign_encoding("url\n".encode("utf-16-be")).startswith("UTF-16 (big-endian) text without")
    assert foreign_encoding(b"\x00" * 100).startswith("binary data")
    assert foreign_encoding(b"\xef\xbb\xbfurl\n") is None  # the UTF-8 BOM is UTF-8
    assert foreign_encoding("url\nhttps://b\u00fccher.example/\n".encode()) is None
    assert foreign_encoding(b"url\n" + b"https://a.example/\x00\n" * 3) is None  # a stray NUL: a line's reject


# --- empty files -----------------------------------------------------------------------------------------
EMPTIES = {
    "empty.csv": b"",
    "empty.tsv": b"\n\n",
    "empty.jsonl": b"",
    "empty.txt": b"",
    "bom-only.jsonl": b"\xef\xbb\xbf",
    "blank.txt": b"  \r\n\t\n",
    "empty.jsonl.gz": gzip.compress(b""),
    "empty.csv.gz": gzip.compress(b"\n"),
}


def test_an_empty_file_is_one_outcome_in_every_format(engine, tmp_path):
    lines = []
    for i, (name, data) in enumerate(sorted(EMPTIES.items())):
        path = tmp_path / name
        path.write_bytes(data)
        # A dataset each: two empty files have one digest, and a dataset holds a file once.
        summary = ingest_dump(engine, [path], dataset=f"d{i}")
        (f,) = summary.files
        assert f.outcome is FileOutcome.EMPTY, name
        assert (f.rows, f.sightings, f.reject_count) == (0, 0, 0)
        lines.append(summary.lines()[1].replace(name, "NAME"))
        assert ingest_dump(engine, [path], dataset=f"d{i}").files[0].outcome is FileOutcome.ALREADY_LOADED
    assert set(lines) == {"  NAME: empty (no content once decompressed); nothing to load"}
    with engine.connect() as conn:
        assert set(conn.execute(sa.select(t.dataset_files.c.state)).scalars()) == {"complete"}
    assert counts(engine)["sightings"] == 0


# --- a gzip that inflates a thousandfold -----------------------------------------------------------------
_PEAK = textwrap.dedent("""
    import json, sys
    from linkfold.ingest import ingest_dump
    from linkfold.store import ensure_schema, make_engine
    engine = make_engine(sys.argv[1])
    ensure_schema(engine)
    summary = ingest_dump(engine, [sys.argv[2]], dataset="bomb")
    # VmHWM: this process's own peak since exec (proc(5)). getrusage's ru_maxrss is not: on Linux it
    # carries over the peak of the process that forked it (pytest's, here).
    peak = next(int(line.split()[1]) for line in open("/proc/self/status") if line.startswith("VmHWM:"))
    print(json.dumps({"rows": summary.rows, "rejects": dict(summary.rejects), "peak_kib": peak}))
""")


@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="needs Linux's /proc/self/status (VmHWM)")
def test_decompression_is_bounded_in_memory(tmp_path):
    # 512 MiB of one byte without a line end: about half a megabyte of gzip. Unbounded inflation held all of
    # it at once (measured before the fix: a 4 MB gzip of zeros drove a load past 2 GB).
    inflated = 512 << 20
    path = tmp_path / "bomb.txt.gz"
    deflate = zlib.compressobj(9, zlib.DEFLATED, 16 + zlib.MAX_WBITS)
    block = b"x" * (1 << 24)
    with path.open("wb") as fh:
        for _ in range(inflated // len(block)):
            fh.write(deflate.compress(block))
        fh.write(deflate.flush())
    assert path.stat().st_size < inflated // 500
    facts = inspect_file(path)
    assert (facts.lines, facts.empty) == (1, False)
    done = subprocess.run([sys.executable, "-c", _PEAK, f"sqlite:///{tmp_path / 'r.db'}", str(path)],
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    got = json.loads(done.stdout)
    assert (got["rows"], got["rejects"]) == (1, {"line_too_long": 1})
    peak_kib = got["peak_kib"]  # VmHWM is in kB (proc(5))
    # A generous bound, not a measurement: the interpreter, the package and one read piece (MiB each).
    assert peak_kib < 200 * 1024, f"peak RSS {peak_kib // 1024} MiB while reading a 512 MiB stream"


# --- the other readers of JSON lines: redirect pairs and documents ---------------------------------------
def test_redirect_pairs_past_the_json_limits_are_problems_of_their_lines(engine, tmp_path):
    from linkfold.follow import import_redirects
    from linkfold.follow import imports as imports_module

    pair = json.dumps({"short": "https://short.test/a1", "expanded": "https://harbour-gazette.example/a"})
    path = tmp_path / "pairs.jsonl.gz"
    long_line = '{"short": "https://short.test/b", "expanded": "' + "x" * (imports_module.MAX_LINE_BYTES + 10) + '"}'
    path.write_bytes(gzip.compress("\n".join([DEEP, LONG_INT, long_line, pair]).encode() + b"\n"))
    summary = import_redirects(engine, path)
    assert summary.links == 1
    problems = [(p.line, p.reason) for p in summary.problems]
    assert problems == [(1, "bad_json"), (2, "bad_json"), (3, "line_too_long")]
    assert "nested deeper" in summary.problems[0].message and "digits" in summary.problems[1].message


def test_documents_past_the_json_limits_are_problems_of_their_lines(tmp_path):
    from linkfold.content import read_documents

    text = "Harbour works " * 60
    good = json.dumps({"url": "https://harbour-gazette.example/a", "title": "Works", "text": text})
    path = tmp_path / "docs.jsonl"
    path.write_text("\n".join([good, DEEP, LONG_INT]) + "\n")
    out = list(read_documents(path))
    problems = [(p.line, p.reason, p.message) for p in out if not hasattr(p, "status")]
    assert [(n, r) for n, r, _ in problems] == [(2, "bad_json"), (3, "bad_json")]
    assert "nested deeper" in problems[0][2] and "digits" in problems[1][2]


# --- through the command line ----------------------------------------------------------------------------
def test_the_cli_names_the_encoding_file_and_line_and_loads_empty_files_alike(db_url, tmp_path, capsys):
    from linkfold.cli import main
    from linkfold.errors import DumpFormatError as Refused

    utf16 = tmp_path / "export.csv"
    utf16.write_bytes(("\ufeff" + CSV_TEXT).encode("utf-16-le"))
    assert main(["--db", db_url, "datasets", "load", str(utf16), "--dataset", "panel"]) == Refused.exit_code
    err = capsys.readouterr().err
    assert f"{utf16}:1: the file is UTF-16 (little-endian) text" in err and "iconv" in err
    empty_csv, empty_gz = tmp_path / "none.csv", tmp_path / "none.jsonl.gz"
    empty_csv.write_bytes(b"")
    empty_gz.write_bytes(gzip.compress(b""))
    assert main(["--db", db_url, "datasets", "load", str(empty_csv), str(empty_gz), "--dataset", "panel",
                 "--format", "json"]) == 0
    captured = capsys.readouterr()
    summary = json.loads(captured.out)
    assert [f["outcome"] for f in summary["files"]] == ["empty", "empty"]
    assert "none.csv: empty (no content once decompressed)" in captured.err


def test_gzip_members_and_zero_padding_read_as_gzip_open_reads_them(tmp_path):
    # RFC 1952 §2.2: a gzip file is a series of members; gzip.open (the reference here) also skips zero
    # bytes after a member. The pre-pass must count the same lines the reader then reads.
    first, second = b"url\nhttps://a.example/1\n", b"https://a.example/2\n"
    path = tmp_path / "members.txt.gz"
    path.write_bytes(gzip.compress(first) + b"\x00" * 8 + gzip.compress(second) + b"\x00" * ((1 << 20) + 5))
    with gzip.open(path) as fh:
        assert fh.read() == first + second
    facts = inspect_file(path)
    assert (facts.lines, facts.empty, facts.gzipped) == (3, False, True)
    truncated = tmp_path / "cut.txt.gz"
    truncated.write_bytes(gzip.compress(first)[:-6])
    with pytest.raises(Exception, match="truncated"):
        inspect_file(truncated)


def test_the_line_reader_never_holds_more_than_a_piece_and_the_line_limit(tmp_path):
    # The reading side on its own: whatever a gzip'd line inflates to, no read returns more than a piece
    # plus the line limit (inputs.PhysicalLines' documented bound).
    from linkfold.inputs import open_binary, physical_lines

    path = tmp_path / "long.txt.gz"
    path.write_bytes(gzip.compress(b"x" * (64 << 20) + b"\nhttps://a.example/\n" + b"y" * (3 << 20)))
    stream = open_binary(path, gzipped=True)
    largest = 0
    real_read, real_readline = stream.binary.read, stream.binary.readline

    def read(n=-1):
        nonlocal largest
        data = real_read(n)
        largest = max(largest, len(data))
        return data

    def readline(n=-1):
        nonlocal largest
        data = real_readline(n)
        largest = max(largest, len(data))
        return data

    stream.binary.read, stream.binary.readline = read, readline  # type: ignore[method-assign]
    try:
        lines = list(physical_lines(stream.binary, 1 << 20, chunk_bytes=1 << 20))
    finally:
        stream.close()
    assert [(line.number, line.too_long) for line in lines] == [(1, True), (2, False), (3, True)]
    assert lines[1].data == b"https://a.example/"
    assert largest <= (1 << 20) + (1 << 20) + 1
