"""Dump readers without a database: formats, limits, bad input, and the recovery after a broken record.

CSV cases follow RFC 4180 §2 (rules 1-7, examples quoted from memory of the RFC's text); TSV follows the
IANA text/tab-separated-values registration (no quoting); JSON lines are RFC 8259 texts one per line.
"""

from __future__ import annotations

import gzip
import io
from pathlib import Path

import pytest

from linkfold.errors import DumpFormatError, InputError, MissingColumnError
from linkfold.inputs import (
    MISSING,
    DumpFormat,
    DumpReader,
    ReadOptions,
    Reason,
    guess_format,
    inspect_file,
    open_binary,
    parse_path,
    physical_lines,
    resolve,
)


def read(data: bytes | str, fmt: str, *, limit: int = 1 << 20, **opts) -> list:
    if isinstance(data, str):
        data = data.encode("utf-8")
    options = ReadOptions(fmt=DumpFormat(fmt), max_line_bytes=limit, **opts)
    reader = DumpReader(physical_lines(io.BytesIO(data), limit), options, name="dump")
    return list(reader)


def good(rows):
    return [(r.line_no, r.urls, r.key, r.time) for r in rows if r.reject is None]


def bad(rows):
    return [(r.line_no, r.reject.reason) for r in rows if r.reject is not None]


# --- format guessing and the byte layer -------------------------------------------------------------------
@pytest.mark.parametrize(("name", "fmt"), [
    ("panel.csv", "csv"), ("panel.CSV.gz", "csv"), ("a.tsv", "tsv"), ("a.tab.gz", "tsv"),
    ("posts.jsonl", "jsonl"), ("posts.ndjson.gz", "jsonl"), ("urls.txt", "lines"), ("x.list", "lines"),
])
def test_format_is_guessed_from_the_name(name, fmt):
    assert guess_format(Path(name)) is DumpFormat(fmt)


def test_unknown_name_asks_for_format():
    with pytest.raises(InputError, match="--format"):
        guess_format(Path("dump.json"))  # one JSON document, not JSON lines: never guessed


def test_gzip_is_detected_by_content_and_hashed_as_stored(tmp_path):
    import hashlib

    body = b"url\nhttps://a.example/1\n"
    path = tmp_path / "dump.csv"  # no .gz in the name: the RFC 1952 magic bytes decide
    path.write_bytes(gzip.compress(body))
    facts = inspect_file(path)
    assert facts.gzipped
    # Provenance is the file the lab holds: the digest of the compressed bytes (hashlib as reference).
    assert facts.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert facts.lines == 2
    stream = open_binary(path, facts.gzipped)
    try:
        assert stream.binary.read() == body
        assert stream.sha256() == facts.sha256
    finally:
        stream.close()


def test_concatenated_gzip_members_are_one_file(tmp_path):
    # RFC 1952 §2.2: a gzip file is a series of members; gzip.open reads them as one stream.
    path = tmp_path / "two.txt.gz"
    path.write_bytes(gzip.compress(b"https://a.example/1\n") + gzip.compress(b"https://a.example/2\n"))
    facts = inspect_file(path)
    assert facts.lines == 2
    stream = open_binary(path, True)
    try:
        rows = list(DumpReader(physical_lines(stream.binary, 1 << 20), ReadOptions(DumpFormat.LINES),
                               name="two"))
    finally:
        stream.close()
    assert [r.urls for r in rows] == [["https://a.example/1"], ["https://a.example/2"]]


def test_truncated_gzip_fails_before_loading(tmp_path):
    path = tmp_path / "cut.csv.gz"
    path.write_bytes(gzip.compress(b"url\n" + b"https://a.example/x\n" * 1000)[:-20])
    with pytest.raises(InputError, match="truncated"):
        inspect_file(path)


def test_line_counting_without_final_newline(tmp_path):
    path = tmp_path / "a.txt"
    path.write_bytes(b"https://a.example/1\nhttps://a.example/2")
    assert inspect_file(path).lines == 2


def test_over_long_line_is_cut_and_the_next_line_keeps_its_number():
    lines = list(physical_lines(io.BytesIO(b"ab\n" + b"x" * 100 + b"\ncd\n"), 10))
    assert [(pl.number, pl.data, pl.too_long) for pl in lines] == [
        (1, b"ab", False), (2, b"x" * 11, True), (3, b"cd", False)]  # only a prefix is held


def test_line_of_exactly_the_limit_is_fine():
    lines = list(physical_lines(io.BytesIO(b"x" * 10 + b"\n" + b"y" * 11 + b"\n"), 10))
    assert [(pl.number, pl.too_long) for pl in lines] == [(1, False), (2, True)]


def test_byte_order_mark_is_not_content():
    rows = read(b"\xef\xbb\xbfurl\nhttps://a.example/\n", "csv")
    assert good(rows) == [(2, ["https://a.example/"], MISSING, MISSING)]


# --- CSV: RFC 4180 §2 -------------------------------------------------------------------------------------
def test_rfc4180_rule1_crlf_records_and_rule2_no_final_break():
    rows = read("url,k\r\nhttps://a.example/1,aaa\r\nhttps://a.example/2,zzz", "csv", key_column="k")
    assert good(rows) == [(2, ["https://a.example/1"], "aaa", MISSING),
                          (3, ["https://a.example/2"], "zzz", MISSING)]


def test_rfc4180_rule5_quoted_fields():
    rows = read('"url","k"\n"https://a.example/1","aaa"\n', "csv", key_column="k")
    assert good(rows) == [(2, ["https://a.example/1"], "aaa", MISSING)]


def test_rfc4180_rule6_commas_and_line_breaks_inside_quotes():
    rows = read('url,k,note\n"https://a.example/?a=1,2","b\r\nbb",x\nhttps://a.example/3,c,y\n', "csv",
                key_column="k")
    # The quoted line break keeps the record whole; the row starts on line 2, the next one on line 4.
    assert good(rows) == [(2, ["https://a.example/?a=1,2"], "b\r\nbb", MISSING),
                          (4, ["https://a.example/3"], "c", MISSING)]
    assert rows[0].end_line == 3


def test_rfc4180_rule7_doubled_quote_inside_quotes():
    rows = read('url,k\n"https://a.example/","b""bb"\n', "csv", key_column="k")
    assert good(rows) == [(2, ["https://a.example/"], 'b"bb', MISSING)]


def test_only_the_named_columns_leave_the_reader():
    rows = read("visitor,url,secret\nv-17,https://a.example/,do-not-keep\n", "csv")
    row = rows[0]
    assert row.urls == ["https://a.example/"] and row.key is MISSING and row.time is MISSING
    assert "do-not-keep" not in repr(row) and "v-17" not in repr(row)


def test_several_url_columns_give_positions_in_order():
    rows = read("a,b\nhttps://a.example/1,https://a.example/2\n", "csv", url_columns=("b", "a"))
    assert good(rows)[0][1] == ["https://a.example/2", "https://a.example/1"]


def test_missing_url_column_names_the_columns_found():
    with pytest.raises(MissingColumnError) as err:
        read("id,link,when\n1,https://a.example/,x\n", "csv", url_columns=("url",))
    assert "'id', 'link', 'when'" in str(err.value)


def test_no_url_column_given_and_none_called_url():
    with pytest.raises(MissingColumnError, match="which column holds the URLs"):
        read("id,link\n1,https://a.example/\n", "csv")


def test_case_mismatch_gets_a_hint():
    with pytest.raises(MissingColumnError, match="did you mean 'URL'"):
        read("URL\nhttps://a.example/\n", "csv", url_columns=("url",))


def test_ambiguous_header_column():
    with pytest.raises(DumpFormatError, match="2 times"):
        read("url,url\na,b\n", "csv")


def test_empty_csv_needs_a_header():
    with pytest.raises(DumpFormatError, match="empty"):
        read("", "csv")


def test_unterminated_quote_costs_only_its_line():
    text = 'url,k\nhttps://a.example/1,"open\nhttps://a.example/2,b\nhttps://a.example/3,c\n'
    rows = read(text, "csv", key_column="k")
    assert bad(rows) == [(2, Reason.MALFORMED_CSV)]
    assert good(rows) == [(3, ["https://a.example/2"], "b", MISSING), (4, ["https://a.example/3"], "c", MISSING)]


def test_character_after_closing_quote_is_malformed():
    rows = read('url\n"https://a.example/"x\nhttps://a.example/ok\n', "csv")
    assert bad(rows) == [(2, Reason.MALFORMED_CSV)]
    assert good(rows) == [(3, ["https://a.example/ok"], MISSING, MISSING)]


def test_stray_quote_spanning_lines_with_wrong_width_gives_the_lines_back():
    # Line 2 opens a quote that line 4 closes: one record of the wrong width, really three rows.
    text = 'url,k\nhttps://a.example/1,"x\nhttps://a.example/2,y\nhttps://a.example/3,z",w\n'
    rows = read(text, "csv", key_column="k")
    assert bad(rows)[0] == (2, Reason.MALFORMED_CSV)
    assert (3, ["https://a.example/2"], "y", MISSING) in good(rows)


def test_quoted_field_longer_than_the_limit_is_broken_off():
    text = 'url,k\nhttps://a.example/1,"open\n' + "filler\n" * 20 + "https://a.example/2,b\n"
    rows = read(text, "csv", key_column="k", limit=64)
    assert bad(rows)[0] == (2, Reason.MALFORMED_CSV)
    assert (23, ["https://a.example/2"], "b", MISSING) in good(rows)
    assert [r.line_no for r in rows] == sorted(r.line_no for r in rows)  # line order always holds


def test_too_few_fields_is_missing_column_too_many_is_field_count():
    rows = read("url,k,t\nhttps://a.example/1\nhttps://a.example/2,a,b,c\n", "csv")
    assert bad(rows) == [(2, Reason.MISSING_COLUMN), (3, Reason.FIELD_COUNT)]


def test_invalid_utf8_rejects_the_record_with_its_line():
    rows = read(b"url\nhttps://a.example/\xff\nhttps://a.example/ok\n", "csv")
    assert bad(rows) == [(2, Reason.INVALID_UTF8)]
    assert "0xff" in rows[0].reject.message
    assert good(rows) == [(3, ["https://a.example/ok"], MISSING, MISSING)]


def test_over_long_csv_line_is_rejected_and_reading_goes_on():
    rows = read("url\n" + "https://a.example/" + "x" * 200 + "\nhttps://a.example/ok\n", "csv", limit=100)
    assert bad(rows) == [(2, Reason.LINE_TOO_LONG)]
    assert good(rows) == [(3, ["https://a.example/ok"], MISSING, MISSING)]


def test_over_long_line_inside_a_quoted_record_keeps_line_order():
    text = 'url,k\nhttps://a.example/1,"open\nhttps://a.example/2,b\n' + "y" * 300 + "\nhttps://a.example/3,c\n"
    rows = read(text, "csv", key_column="k", limit=100)
    assert [r.line_no for r in rows] == [2, 3, 4, 5]
    assert bad(rows) == [(2, Reason.MALFORMED_CSV), (4, Reason.LINE_TOO_LONG)]


def test_blank_lines_are_counted_not_rows():
    options = ReadOptions(fmt=DumpFormat.CSV)
    reader = DumpReader(physical_lines(io.BytesIO(b"url\n\nhttps://a.example/\n  \n"), 1 << 20), options,
                        name="d")
    rows = list(reader)
    assert len(rows) == 1 and reader.blank_lines == 2


def test_nul_in_a_field_reaches_the_row_for_the_canonicaliser_to_refuse():
    rows = read(b"url\nhttps://a.example/\x00x\n", "csv")
    assert rows[0].urls == ["https://a.example/\x00x"]


# --- TSV: IANA text/tab-separated-values ------------------------------------------------------------------
def test_tsv_has_no_quoting():
    rows = read('url\tnote\nhttps://a.example/\t"quoted, not special\n', "tsv")
    assert good(rows) == [(2, ["https://a.example/"], MISSING, MISSING)]
    rows = read('url\tnote\n"https://a.example/"\tx\n', "tsv")
    assert good(rows)[0][1] == ['"https://a.example/"']  # the quotes are part of the value


# --- JSON lines and paths -------------------------------------------------------------------------------
def test_dotted_path_with_star_reads_every_link_of_a_post():
    line = '{"id": 7, "entities": {"links": [{"url": "https://a.example/1"}, {"title": "no url"}, ' \
           '{"url": "https://a.example/2"}]}}\n'
    rows = read(line, "jsonl", url_columns=("entities.links.*.url",), key_column="id")
    assert good(rows) == [(1, ["https://a.example/1", "https://a.example/2"], 7, MISSING)]


def test_path_syntax():
    assert parse_path("a.*.b").segments[1] is not "*"  # noqa: F632 - the STAR marker, not the text
    assert parse_path(r"a\.b.c").segments == ("a.b", "c")
    assert parse_path(r"x.\*").segments == ("x", "*")
    assert resolve(parse_path("links.1"), {"links": ["u0", "u1"]}).values == ["u1"]
    for broken in ("", "a..b", ".a", "a.", "a\\"):
        with pytest.raises(InputError):
            parse_path(broken)


def test_the_quick_walk_of_a_path_gives_what_the_full_walk_gives():
    # Behaviour test: resolve() walks plain member paths on its own; on any record and path it must give
    # what the general walk (_resolve) gives — values, missing reason and dropped count.
    from hypothesis import given, settings
    from hypothesis import strategies as st

    from linkfold.inputs import paths

    names = st.sampled_from(["a", "b", "0", "1", "*"])
    leaf = st.one_of(st.none(), st.booleans(), st.integers(), st.text(max_size=3))
    json_value = st.recursive(leaf, lambda inner: st.lists(inner, max_size=3) | st.dictionaries(names, inner,
                                                                                               max_size=3),
                              max_leaves=12)
    path_text = st.lists(st.sampled_from(["a", "b", "0", "1", "*", "\\*"]), min_size=1, max_size=4).map(".".join)

    @settings(max_examples=500, deadline=None)
    @given(json_value, path_text)
    def check(record, text):
        path = parse_path(text)
        assert paths.resolve(path, record) == paths._resolve(path, record)

    check()


def test_path_that_meets_an_array_says_to_use_star():
    got = resolve(parse_path("links.url"), {"links": [{"url": "u"}]})
    assert got.values == [] and "use *" in got.missing


def test_jsonl_record_without_the_path_is_a_row_without_urls():
    # A post without links often lacks the member altogether; that is not a defect of the record.
    text = '{"url": "https://a.example/1"}\n{"other": 1}\n'
    rows = read(text, "jsonl")
    assert bad(rows) == [] and [r.urls for r in rows] == [["https://a.example/1"], []]


def test_jsonl_bad_lines():
    text = b'{"url": "https://a.example/1"}\n{not json}\n[1, 2]\n{"url": "https://a.example/\xff"}\n'
    rows = read(text, "jsonl")
    assert bad(rows) == [(2, Reason.BAD_JSON), (3, Reason.BAD_JSON), (4, Reason.INVALID_UTF8)]


def test_jsonl_missing_path_in_every_record_fails_before_reading():
    with pytest.raises(MissingColumnError) as err:
        read('{"id": 1, "link": "https://a.example/"}\n', "jsonl", url_columns=("url",))
    assert "'id', 'link'" in str(err.value)


def test_jsonl_typo_deep_in_a_star_path_fails_before_reading():
    with pytest.raises(MissingColumnError):
        read('{"links": [{"url": "https://a.example/"}]}\n', "jsonl", url_columns=("links.*.href",))


def test_jsonl_posts_without_links_are_not_a_missing_column():
    rows = read('{"links": []}\n{"links": [{"url": "https://a.example/"}]}\n', "jsonl",
                url_columns=("links.*.url",))
    assert [r.urls for r in rows] == [[], ["https://a.example/"]]


def test_not_json_lines_at_all():
    with pytest.raises(DumpFormatError, match="JSON object"):
        read("url,k\nhttps://a.example/,1\n", "jsonl")


def test_key_and_time_paths_cannot_spread():
    with pytest.raises(InputError, match="one value"):
        read('{"url": "u"}\n', "jsonl", key_column="ids.*")


def test_jsonl_over_long_line():
    rows = read('{"url": "https://a.example/' + "x" * 300 + '"}\n{"url": "https://a.example/"}\n', "jsonl",
                limit=100)
    assert bad(rows) == [(1, Reason.LINE_TOO_LONG)]


# --- plain lists --------------------------------------------------------------------------------------
def test_lines_format_keeps_text_verbatim_and_skips_blank_lines():
    rows = read(" https://a.example/1 \r\n\nhttps://a.example/2", "lines")
    assert [(r.line_no, r.urls) for r in rows] == [(1, [" https://a.example/1 "]), (3, ["https://a.example/2"])]


def test_lines_format_refuses_column_options():
    with pytest.raises(InputError, match="do not apply"):
        read("https://a.example/\n", "lines", key_column="id")


# --- the CSV/TSV fast lane against the csv-module lane -----------------------------------------------------
_PIECES = ["https://a.example/p", "k1", "2031-05-04T08:00:00Z", ",", ",", "\t", '"', '""', "\r", "\r\n", "\n",
           "\n", " ", "\x00", "é", "\u2028", "x"]


def _both_lanes(data: bytes, fmt: str, monkeypatch, chunk: int = 1 << 20, keyed: bool = True) -> tuple[list, list]:
    from linkfold.inputs import delimited

    def rows(fast: bool) -> list:
        monkeypatch.setattr(delimited.Delimited, "fast_lane", fast)
        # The unit reads the time column a second time (readers do not mind; the loader refuses it): the
        # lanes must hand it on beside the others.
        options = ReadOptions(fmt=DumpFormat(fmt), key_column="key" if keyed else None,
                              time_column="t" if keyed else None, unit_column="t" if keyed else None,
                              max_line_bytes=40)
        # The fast lane reads pieces of ``chunk`` bytes, so that runs of plain lines start and end anywhere.
        reader = DumpReader(physical_lines(io.BytesIO(data), 40, chunk), options, name="dump")
        out = [(r.line_no, r.end_line, r.urls, r.key, r.time, r.unit,
                None if r.reject is None else (r.reject.reason, r.reject.message, r.reject.excerpt)) for r in reader]
        return [*out, ("blank lines", reader.blank_lines)]

    return rows(True), rows(False)


@pytest.mark.parametrize("fmt", ["csv", "tsv"])
def test_fast_lane_reads_every_line_as_the_csv_module_lane_does(fmt, monkeypatch):
    # Behaviour test: the fast lane (str.split for lines csv would split the same way) must never change
    # what a row becomes; the slow lane is the one checked against RFC 4180 above. Random lines from
    # pieces that matter to a CSV parser: quotes, doubled quotes, CR, LF, CRLF, NUL, delimiters, blanks,
    # non-ASCII, invalid UTF-8 and lines over the 40-byte limit.
    from hypothesis import given, settings
    from hypothesis import strategies as st

    sep = "," if fmt == "csv" else "\t"
    header = f"url{sep}key{sep}t\n".encode()
    piece = st.one_of(st.sampled_from(_PIECES).map(str.encode), st.just(b"\xff"), st.just(b"y" * 45))
    field = st.lists(piece, max_size=3).map(b"".join)
    # Mostly lines of the header's width (the fast lane's candidates), some of any shape.
    line = st.one_of(st.tuples(field, field, field).map(sep.encode().join), st.lists(piece, max_size=8).map(b"".join))

    # Fields quoted at their ends only, the pattern the block lane unquotes itself (spreadsheet and R exports
    # quote every text field), next to ones it must leave to csv.
    quoted = st.one_of(field, field.map(lambda f: b'"' + f + b'"'))
    line = st.one_of(line, st.tuples(quoted, quoted, quoted).map(sep.encode().join))

    @settings(max_examples=400, deadline=None)
    @given(st.lists(line, max_size=8), st.integers(1, 200), st.sampled_from([b"", b"\n"]))
    def check(lines, chunk, end):
        fast, slow = _both_lanes(header + b"\n".join(lines) + end, fmt, monkeypatch, chunk)
        assert fast == slow

    check()

    # One column: a URL list saved as CSV, where a stray delimiter or a quoted blank must still be seen.
    # Mostly lines without the pieces that keep a whole piece off the block lane (quote, CR, NUL, bad UTF-8).
    plain = st.lists(st.sampled_from(["https://a.example/p", "k1", ",", ",", " ", "é", "\t", "x"]), max_size=3)
    one = st.one_of(plain.map(lambda ps: "".join(ps).encode()), quoted, st.lists(piece, max_size=3).map(b"".join))

    @settings(max_examples=300, deadline=None)
    @given(st.lists(one, max_size=8), st.integers(1, 200))
    def check_one_column(lines, chunk):
        fast, slow = _both_lanes(b"url\n" + b"\n".join(lines) + b"\n", fmt, monkeypatch, chunk, keyed=False)
        assert fast == slow

    check_one_column()


@pytest.mark.parametrize("header, line", [
    (b"url,key,t", b'"https://a.example/p""q",k1,t'),  # an escaped quote: csv gives one quote
    (b"url,key,t", b'"https://a.example/p,q",k1'),  # a delimiter inside quotes, two fields to csv
    (b"url,key,t", b'"https://a.example/p"x,k1,t'),  # text after the closing quote
    (b"url,key,t", b'x"https://a.example/p",k1,t'),  # a quote inside an unquoted field
    (b"url,key,t", b'"",k1,t'), (b"url,key,t", b'" ",k1,t'),
    (b"url", b'""'), (b"url", b'" "'), (b"url", b"https://a.example/p,q"), (b"url", b'"https://a.example/p,q"'),
])
def test_quoted_and_awkward_lines_read_alike_on_both_lanes(header, line, monkeypatch):
    # Behaviour test, the cases the random one may miss: each awkward line between two ordinary ones.
    keyed = header != b"url"
    ordinary = b"https://a.example/o,k0,t0" if keyed else b"https://a.example/o"
    data = header + b"\n" + ordinary + b"\n" + line + b"\n" + ordinary + b"\n"
    fast, slow = _both_lanes(data, "csv", monkeypatch, keyed=keyed)
    assert fast == slow


def test_fast_lane_takes_the_usual_lines():
    from linkfold.inputs import delimited

    calls = {"csv": 0}
    real = delimited._Feed.__next__

    def counting(self):
        calls["csv"] += 1
        return real(self)

    data = b"url,key\n" + b"".join(b"https://a.example/%d,k%d\n" % (i, i) for i in range(50))
    options = ReadOptions(fmt=DumpFormat.CSV, key_column="key")
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(delimited._Feed, "__next__", counting)
        rows = list(DumpReader(physical_lines(io.BytesIO(data), 1 << 20), options, name="d"))
    assert len(rows) == 50 and rows[-1].key == "k49"
    assert calls["csv"] == 1  # the header only
    pieces = list(DumpReader(physical_lines(io.BytesIO(data), 1 << 20), options, name="d").pieces())
    # Blocks only (no row objects at all), consecutive; they grow while every line passes (16, 32, …).
    assert {type(p).__name__ for p in pieces} == {"RowBlock"}
    assert [p.first for p in pieces] == [2, 18, 50] and sum(map(len, pieces)) == 50
    assert pieces[0].urls[0] == "https://a.example/0" and pieces[-1].keys[-1] == "k49"


# --- the line source: pieces against one line at a time -----------------------------------------------------
def _one_line_at_a_time(stream: io.BytesIO, limit: int) -> list[tuple]:
    """The oracle: how lines were read before the line source read pieces (readline with the limit),
    except that a byte order mark is dropped before the limit applies, not after."""
    out, number = [], 0
    if stream.read(3) != b"\xef\xbb\xbf":
        stream.seek(0)
    while data := stream.readline(limit + 1):
        number += 1
        if data.endswith(b"\r\n"):
            out.append((number, data[:-2], b"\r\n", False))
        elif data.endswith(b"\n"):
            out.append((number, data[:-1], b"\n", False))
        elif len(data) <= limit:
            out.append((number, data, b"", False))
            break
        else:
            while (rest := stream.readline(1 << 20)) and not rest.endswith(b"\n"):
                pass
            out.append((number, data[:512], b"", True))
    return out


_LINE_PIECES = [b"a", b"bc", b"\n", b"\n", b"\r\n", b"\r", b"\x00", b'"', b"\xff", "é".encode(), b"x" * 30]


def test_pieces_give_the_lines_one_line_at_a_time_gives():
    # Behaviour test: whatever the piece size and the line limit, and however a reader mixes taking
    # plain runs with taking single lines, the lines (numbers, bytes, ends, over-long flags) are the same.
    from hypothesis import given, settings
    from hypothesis import strategies as st

    @settings(max_examples=500, deadline=None)
    @given(parts=st.lists(st.sampled_from(_LINE_PIECES), max_size=40), bom=st.booleans(),
           limit=st.integers(1, 40), chunk=st.integers(1, 64), takes=st.lists(st.integers(0, 5), max_size=30))
    def check(parts, bom, limit, chunk, takes):
        data = (b"\xef\xbb\xbf" if bom else b"") + b"".join(parts)
        want = _one_line_at_a_time(io.BytesIO(data), limit)
        source = physical_lines(io.BytesIO(data), limit, chunk)
        got: list[tuple] = []
        moves = iter(takes)
        while True:
            take = next(moves, 0)
            run = source.plain_run(b'"') if take else None
            if run is not None:
                texts, start = run
                used = texts[start:start + take]
                # A plain run is what the lines would be, decoded: no quote, NUL or stray CR, valid UTF-8.
                for k, text in enumerate(used):
                    got.append((source.number + 1 + k, text, "plain"))
                source.skip(len(used))
                continue
            line = next(source, None)
            if line is None:
                break
            got.append((line.number, line.data, line.terminator, line.too_long))
        expect = []
        for number, line_data, end, too_long in want:
            match = next((g for g in got if g[0] == number), None)
            if match is not None and match[-1] == "plain":
                assert not too_long and end in (b"\n", b"\r\n")
                assert b'"' not in line_data and b"\x00" not in line_data and b"\r" not in line_data
                assert match[1] == line_data.decode("utf-8")
                expect.append(match)
            else:
                expect.append((number, line_data, end, too_long))
        assert got == expect

    check()


def test_a_file_of_ordinary_lines_comes_as_one_plain_run_per_piece():
    data = b"".join(b"https://a.example/%d,k%d\r\n" % (i, i) for i in range(100))
    source = physical_lines(io.BytesIO(data), 1 << 20)
    texts, start = source.plain_run(b'"')
    assert start == 0 and len(texts) == 100 and texts[-1] == "https://a.example/99,k99"  # CRLF ends are not content
    source.skip(100)
    assert source.number == 100 and next(source, None) is None


def test_json_lines_blocks_give_what_reading_line_by_line_gives(monkeypatch):
    # Behaviour test: the JSON-lines block lane (runs of records with one URL value) must never change
    # what a row becomes. Random lines from objects with and without the path, one or several links,
    # non-text values, arrays, bad JSON, blank and over-long lines, CRLF, invalid UTF-8; random pieces.
    from hypothesis import given, settings
    from hypothesis import strategies as st

    from linkfold.inputs import jsonlines

    value = st.one_of(st.sampled_from(['"https://a.example/p"', '"k1"', '"2031-05-04T08:00:00Z"', "7", "null",
                                       '""', '" "', "[]", "{}", '"\\u00e9"']))
    links = st.lists(value.map(lambda v: '{"url": ' + v + "}"), max_size=3).map(lambda xs: "[" + ",".join(xs) + "]")
    record = st.builds(lambda ls, k, t, u: '{"id": ' + k + ', "post": {"links": ' + ls + '}, "at": ' + t
                       + ', "who": {"panel": ' + u + "}}", links, value, value, value)
    line = st.one_of(record, record, st.sampled_from(["", " ", "{", "[1]", '{"other": 1}', "\u00a0", "x" * 45]))
    ending = st.sampled_from(["\n", "\r\n"])

    @settings(max_examples=400, deadline=None)
    @given(st.lists(st.tuples(line, ending), max_size=10), st.integers(1, 300), st.booleans())
    def check(lines, chunk, bad_byte):
        data = "".join(text + end for text, end in lines).encode()
        if bad_byte and data:
            data = data[:len(data) // 2] + b"\xff" + data[len(data) // 2:]
        # The reader's check holds the first lines and they are read line by line; with one line held
        # (a record that has the path), everything after it can reach the block lane.
        data = b'{"id": 0, "post": {"links": [{"url": "https://a.example/0"}]}}\n' + data
        monkeypatch.setattr(jsonlines, "JSONL_PEEK_LINES", 1)

        def rows(fast: bool) -> list:
            monkeypatch.setattr(jsonlines.JsonLines, "fast_lane", fast)
            options = ReadOptions(fmt=DumpFormat.JSONL, url_columns=("post.links.*.url",), key_column="id",
                                  time_column="at", unit_column="who.panel", max_line_bytes=150)
            reader = DumpReader(physical_lines(io.BytesIO(data), 150, chunk), options, name="dump")
            try:
                out = [(r.line_no, r.end_line, r.urls, r.key, r.time, r.unit,
                        None if r.reject is None else (r.reject.reason, r.reject.excerpt)) for r in reader]
            except InputError as exc:  # no line has the path: refused before reading, on either lane
                return [str(exc)]
            return [*out, ("blank lines", reader.blank_lines)]

        assert rows(True) == rows(False)

    check()
