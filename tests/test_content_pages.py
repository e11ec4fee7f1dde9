"""Page readers: WARC (written here with warcio's own writer and read back), manifest directories, JSONL.

The WARC side is checked against warcio, the reference reader and writer of the format (ISO 28500 /
WARC 1.1): whatever its writer records must come back as the same page. Everything else is behaviour on
invented data: numbered problems, skips with counts, whole-file errors that keep what came before.
"""

from __future__ import annotations

import gzip
import io
import json
from datetime import UTC, datetime
from pathlib import Path

import pytest
from warcio.statusandheaders import StatusAndHeaders
from warcio.warcwriter import WARCWriter

from linkfold.content import (
    KEPT_HEADERS,
    MANIFEST_NAME,
    Page,
    PageProblem,
    ReadTally,
    detect_page_format,
    read_page_dir,
    read_page_jsonl,
    read_pages,
    read_warc,
)
from linkfold.errors import DumpFormatError, InputError, MissingColumnError

PAGES = Path(__file__).resolve().parent.parent / "service" / "linkfold" / "demo_data" / "pages"
BRIDGE = (PAGES / "lakeside-wire-old-mill-bridge.html").read_bytes()
BRIDGE_URL = "https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens"
LATIN1 = (PAGES / "harbourview-news-science-fair-latin1.html").read_bytes()
LATIN1_URL = "https://harbourview-news.example/article.php?id=103"


def _response(writer, url, body, *, status="200 OK", headers=(), date="2026-10-01T12:00:00Z"):
    http = StatusAndHeaders(status, list(headers), protocol="HTTP/1.1")
    # a length given up front spares warcio's writer a temporary file it would not close
    rec = writer.create_warc_record(url, "response", payload=io.BytesIO(body), length=len(body),
                                    http_headers=http, warc_headers_dict={"WARC-Date": date})
    writer.write_record(rec)


def _write_warc(path: Path, *, gz: bool) -> None:
    with path.open("wb") as fh:
        w = WARCWriter(fh, gzip=gz)
        # a request record: part of every crawl, not a page
        req = StatusAndHeaders("GET /wire/20260910/old-mill-bridge-reopens HTTP/1.1",
                               [("Host", "lakeside-wire.example")], is_http_request=True)
        w.write_record(w.create_warc_record(BRIDGE_URL, "request", payload=io.BytesIO(b""), length=0,
                                            http_headers=req))
        _response(w, BRIDGE_URL, BRIDGE, headers=[
            ("Content-Type", "text/html; charset=utf-8"), ("Set-Cookie", "panel_session=p-0028; Path=/"),
            ("ETag", '"b-1"'), ("Last-Modified", "Thu, 10 Sep 2026 09:30:00 GMT"), ("Server", "x")])
        # the body sent gzip'd with Content-Encoding: warcio undoes it
        _response(w, LATIN1_URL, gzip.compress(LATIN1), headers=[
            ("Content-Type", "text/html"), ("Content-Encoding", "gzip"), ("Content-Language", "en")])
        # an image and a redirect: fine records, not pages
        _response(w, "https://lakeside-wire.example/img/bridge.png", b"\x89PNG\r\n\x1a\n....",
                  headers=[("Content-Type", "image/png")])
        _response(w, "https://lakeside-wire.example/old-mill", b"", status="301 Moved Permanently",
                  headers=[("Location", BRIDGE_URL)])
        # a resource record: no HTTP head, the WARC Content-Type is the page's
        library = (PAGES / "riverton-daily-library-hours-broken.html").read_bytes()
        w.write_record(w.create_warc_record(
            "https://riverton-daily.test/story/library-extends-weekend-hours-105", "resource",
            payload=io.BytesIO(library), length=len(library),
            warc_content_type="text/html", warc_headers_dict={"WARC-Date": "2026-10-02T08:00:00Z"}))
        # a response of another scheme (dns:) describes no page
        dns = b"lakeside-wire.example. 300 IN A 192.0.2.1"
        w.write_record(w.create_warc_record("dns:lakeside-wire.example", "resource",
                                            payload=io.BytesIO(dns), length=len(dns),
                                            warc_content_type="text/dns"))


@pytest.mark.parametrize("gz", [True, False], ids=["warc.gz", "warc"])
def test_warc_written_by_warcio_reads_back(tmp_path, gz):
    path = tmp_path / ("crawl.warc.gz" if gz else "crawl.warc")
    _write_warc(path, gz=gz)
    tally = ReadTally()
    out = list(read_warc(path, tally=tally))
    assert all(isinstance(p, Page) for p in out)
    bridge, fair, library = out
    assert bridge.url == bridge.final_url == BRIDGE_URL
    assert bridge.body == BRIDGE
    assert bridge.status == 200
    assert bridge.fetched_at == datetime(2026, 10, 1, 12, 0, tzinfo=UTC)
    assert bridge.source.startswith(f"warc:{path}#")
    # only the headers that matter are kept; cookies never (they can identify a panel member)
    assert bridge.headers == {"content-type": "text/html; charset=utf-8", "etag": '"b-1"',
                              "last-modified": "Thu, 10 Sep 2026 09:30:00 GMT"}
    assert set(bridge.headers) <= set(KEPT_HEADERS)
    assert fair.body == LATIN1  # Content-Encoding: gzip undone
    assert fair.headers["content-language"] == "en"
    assert library.status is None and library.headers == {"content-type": "text/html"}
    assert tally.pages == 3
    assert tally.skipped == {"warc_request": 1, "not_html": 1, "http_status": 1, "not_http": 1}
    assert not tally.problems


def test_warc_offsets_point_at_their_records(tmp_path):
    # The source's offset is where warcio finds the record again (ArchiveIterator over a seeked file).
    from warcio.archiveiterator import ArchiveIterator

    path = tmp_path / "crawl.warc.gz"
    _write_warc(path, gz=True)
    for page in read_warc(path):
        offset = int(page.source.rsplit("#", 1)[1])
        with path.open("rb") as fh:
            fh.seek(offset)
            record = next(iter(ArchiveIterator(fh)))
            assert record.rec_headers.get_header("WARC-Target-URI") == page.url


def test_warc_body_over_the_cap_is_a_problem_and_reading_goes_on(tmp_path):
    path = tmp_path / "big.warc.gz"
    with path.open("wb") as fh:
        w = WARCWriter(fh, gzip=True)
        _response(w, "https://lakeside-wire.example/huge", b"<html><body>" + b"x" * 40_000 + b"</body></html>",
                  headers=[("Content-Type", "text/html")])
        _response(w, BRIDGE_URL, BRIDGE, headers=[("Content-Type", "text/html")])
    assert len(BRIDGE) < 20_000
    out = list(read_warc(path, max_bytes=20_000))
    assert isinstance(out[0], PageProblem) and out[0].reason == "too_large" and out[0].line == 1
    assert str(out[0]).startswith(f"{path}:1: too_large: body over the cap of 20,000 bytes")
    assert isinstance(out[1], Page) and out[1].url == BRIDGE_URL


def test_warc_record_with_bad_url_or_date_is_a_numbered_problem(tmp_path):
    path = tmp_path / "odd.warc"
    with path.open("wb") as fh:
        w = WARCWriter(fh, gzip=False)
        _response(w, "https://lake side.example/x", BRIDGE, headers=[("Content-Type", "text/html")])
        _response(w, BRIDGE_URL, BRIDGE, headers=[("Content-Type", "text/html")], date="last Tuesday")
        _response(w, BRIDGE_URL, BRIDGE, headers=[("Content-Type", "text/html")])
    out = list(read_warc(path))
    assert [(type(p).__name__, getattr(p, "reason", None), getattr(p, "line", None)) for p in out] == [
        ("LineProblem", "bad_url", 1), ("LineProblem", "bad_time", 2), ("Page", None, None)]


@pytest.mark.parametrize("gz", [True, False], ids=["warc.gz", "warc"])
def test_truncated_warc_raises_after_the_whole_records(tmp_path, gz):
    path = tmp_path / "cut.warc"
    with path.open("wb") as fh:
        w = WARCWriter(fh, gzip=gz)
        _response(w, BRIDGE_URL, BRIDGE, headers=[("Content-Type", "text/html")])
        _response(w, LATIN1_URL, LATIN1, headers=[("Content-Type", "text/html")])
    data = path.read_bytes()
    path.write_bytes(data[: len(data) - len(LATIN1) // 2])
    seen: list[Page | PageProblem] = []
    with pytest.raises(InputError, match=r"cut\.warc"):
        seen.extend(read_warc(path))
    assert [p.url for p in seen if isinstance(p, Page)] == [BRIDGE_URL]


def test_not_a_warc_is_an_input_error(tmp_path):
    path = tmp_path / "notes.warc"
    path.write_text("these are my notes, not an archive\n")
    with pytest.raises(InputError, match=r"notes\.warc: record 1 \(offset 0\) is not a WARC record"):
        list(read_warc(path))
    with pytest.raises(InputError, match="no such file"):
        list(read_warc(tmp_path / "missing.warc"))


# --- directory + manifest ----------------------------------------------------------------------------

def _page_dir(tmp_path: Path, manifest: str) -> Path:
    d = tmp_path / "pages"
    d.mkdir()
    (d / "bridge.html").write_bytes(BRIDGE)
    (d / "fair.html.gz").write_bytes(gzip.compress(LATIN1))
    (d / "sub").mkdir()
    (d / "sub" / "library.htm").write_bytes((PAGES / "riverton-daily-library-hours-broken.html").read_bytes())
    (d / "logo.png").write_bytes(b"\x89PNG\r\n\x1a\n")
    (d / MANIFEST_NAME).write_text(manifest, encoding="utf-8")
    return d


def test_manifest_directory(tmp_path):
    d = _page_dir(tmp_path, (
        "# pages saved by hand for the demo\n"
        "file\turl\tfetched_at\tstatus\n"
        f"bridge.html\t{BRIDGE_URL}\t2026-10-01T12:00:00+02:00\t200\n"
        "\n"
        f"fair.html.gz\t{LATIN1_URL}\t\t\n"
        "sub/library.htm\thttps://riverton-daily.test/story/library-extends-weekend-hours-105\t\t\n"
        "logo.png\thttps://riverton-daily.test/logo.png\t\t\n"
        "missing.html\thttps://riverton-daily.test/missing\t\t\n"
        "../outside.html\thttps://riverton-daily.test/outside\t\t\n"
        f"bridge.html\t{BRIDGE_URL}\tyesterday\t\n"
        f"bridge.html\t{BRIDGE_URL}\t\t999\n"
        "bridge.html\tnot a url\t\t\n"
        "only-two-fields\tx\n"
    ))
    tally = ReadTally()
    out = list(read_page_dir(d, tally=tally))
    pages = [p for p in out if isinstance(p, Page)]
    problems = [(p.line, p.reason) for p in out if isinstance(p, PageProblem)]
    assert [p.url for p in pages] == [BRIDGE_URL, LATIN1_URL,
                                      "https://riverton-daily.test/story/library-extends-weekend-hours-105"]
    assert pages[0].fetched_at == datetime(2026, 10, 1, 10, 0, tzinfo=UTC)
    assert pages[0].source == f"dir:{d / MANIFEST_NAME}:3"
    assert pages[0].headers == {"content-type": "text/html"}  # from the suffix; charset left to sniffing
    assert pages[1].body == LATIN1  # gzip'd file decompressed
    # The shared readers' reason codes (docs/ingest.md): bad_time, and missing_column for a short line.
    assert problems == [(8, "missing_file"), (9, "outside_dir"), (10, "bad_time"), (11, "bad_status"),
                        (12, "bad_url"), (13, "missing_column")]
    assert tally.skipped == {"not_html": 1}
    assert tally.pages == 3


def test_manifest_can_be_named_directly_and_gives_content_type(tmp_path):
    d = _page_dir(tmp_path, f"url\tfile\tcontent_type\n{LATIN1_URL}\tfair.html.gz\ttext/html; charset=windows-1252\n")
    (page,) = read_page_dir(d / MANIFEST_NAME)
    assert page.headers == {"content-type": "text/html; charset=windows-1252"}


@pytest.mark.parametrize("manifest,error,match", [
    ("", DumpFormatError, "the file is empty; a TSV file needs a header line"),
    ("# only a comment\n", DumpFormatError, "the file is empty; a TSV file needs a header line"),
    ("file\n", MissingColumnError, r":1: manifest header lacks url"),
    ("file\turl\tpublished\n", InputError, r":1: unknown manifest column\(s\): published"),
    ("file\turl\turl\n", InputError, r":1: repeated manifest column\(s\): url"),
])
def test_bad_manifest_header_is_an_error_with_its_line(tmp_path, manifest, error, match):
    d = _page_dir(tmp_path, manifest)
    with pytest.raises(error, match=match):
        list(read_page_dir(d))


def test_manifest_line_not_utf8_is_a_problem_of_its_line(tmp_path):
    d = _page_dir(tmp_path, "")
    (d / MANIFEST_NAME).write_bytes(b"file\turl\nbridge.html\thttps://x.example/caf\xe9\n")
    (problem,) = list(read_page_dir(d))
    assert (problem.line, problem.reason) == (2, "invalid_utf8") and "0xe9" in problem.message
    (d / MANIFEST_NAME).write_bytes(b"file\turl\xe9\n")
    with pytest.raises(InputError, match=r"pages\.tsv: the header is not UTF-8"):
        list(read_page_dir(d))


def test_directory_without_manifest(tmp_path):
    with pytest.raises(InputError, match="no such manifest"):
        list(read_page_dir(tmp_path))


# --- JSONL ---------------------------------------------------------------------------------------------

def _jsonl(path: Path, lines: list[str], *, gz: bool = False) -> Path:
    data = ("\n".join(lines) + "\n").encode("utf-8")
    path.write_bytes(gzip.compress(data) if gz else data)
    return path


@pytest.mark.parametrize("gz", [False, True], ids=["jsonl", "jsonl.gz"])
def test_jsonl_pages(tmp_path, gz):
    html = LATIN1.decode("cp1252")
    path = _jsonl(tmp_path / "pages.jsonl", [
        json.dumps({"url": LATIN1_URL, "html": html, "status": 200, "fetched_at": "2026-10-01T12:00:00Z",
                    "headers": {"Content-Type": "text/html; charset=windows-1252", "Set-Cookie": "a=b"},
                    "panel_id": "p-0006"}),
        "",
        '{"url": "https://riverton-daily.test/story/x", "html": "<p>unfinished',
        '["a", "list"]',
        json.dumps({"url": LATIN1_URL}),
        json.dumps({"url": LATIN1_URL, "html": 42}),
        json.dumps({"url": LATIN1_URL, "html": "<p>x</p>", "headers": {"content-type": 5}}),
        json.dumps({"url": "javascript:alert(1)", "html": "<p>x</p>"}),
        json.dumps({"url": LATIN1_URL, "html": "<html><body>gone</body></html>", "status": 404}),
        json.dumps({"url": LATIN1_URL, "html": "<p>x</p>", "final_url": "ftp://x.example/"}),
    ], gz=gz)
    tally = ReadTally()
    out = list(read_page_jsonl(path, tally=tally))
    page = out[0]
    assert isinstance(page, Page)
    # the html was already text: stored as UTF-8 and said so, whatever the original header claimed
    assert page.body == html.encode("utf-8")
    assert page.headers == {"content-type": "text/html; charset=utf-8"}
    assert page.source == f"jsonl:{path}:1"
    assert [(p.line, p.reason) for p in out[1:]] == [
        (3, "bad_json"), (4, "bad_json"), (5, "missing_field"), (6, "bad_field"), (7, "bad_field"),
        (8, "bad_url"), (10, "bad_url")]
    assert tally.skipped == {"http_status": 1}


def test_jsonl_that_is_not_jsonl_at_all(tmp_path):
    path = tmp_path / "visits.jsonl"
    path.write_text("visit_id,panelist,url\nv1,p-1,https://riverton-daily.test/\n")
    with pytest.raises(DumpFormatError, match=r"visits\.jsonl: none of the first 2 non-blank lines is a JSON object"):
        list(read_page_jsonl(path))


def test_jsonl_runaway_line_is_skipped_without_reading_it_whole(tmp_path):
    path = _jsonl(tmp_path / "p.jsonl", [
        json.dumps({"url": LATIN1_URL, "html": "<p>" + "x" * 200_000 + "</p>"}),
        json.dumps({"url": LATIN1_URL, "html": "<html><body><p>small</p></body></html>"}),
    ])
    out = list(read_page_jsonl(path, max_bytes=1000))
    assert isinstance(out[0], PageProblem) and out[0].reason == "line_too_long" and out[0].line == 1
    assert out[0].excerpt is not None and len(out[0].excerpt) <= 200
    assert isinstance(out[1], Page)


def test_jsonl_truncated_gzip_raises_after_whole_lines(tmp_path):
    lines = [json.dumps({"url": f"{LATIN1_URL}&n={i}", "html": f"<html><body>{i}</body></html>"})
             for i in range(2000)]
    data = gzip.compress(("\n".join(lines) + "\n").encode())
    path = tmp_path / "p.jsonl.gz"
    path.write_bytes(data[: len(data) // 2])
    seen = []
    with pytest.raises(InputError, match=r"compressed data ends or breaks after line \d+"):
        seen.extend(read_page_jsonl(path))
    assert len(seen) > 100 and all(isinstance(p, Page) for p in seen)


# --- format detection ----------------------------------------------------------------------------------

def test_detect_and_read_any(tmp_path):
    warc = tmp_path / "a.warc.gz"
    _write_warc(warc, gz=True)
    jsonl = _jsonl(tmp_path / "b.data", [json.dumps({"url": BRIDGE_URL, "html": BRIDGE.decode()})], gz=True)
    d = _page_dir(tmp_path, f"file\turl\nbridge.html\t{BRIDGE_URL}\n")
    assert detect_page_format(warc) == "warc"
    assert detect_page_format(jsonl) == "jsonl"
    assert detect_page_format(d) == "dir"
    assert detect_page_format(d / MANIFEST_NAME) == "dir"
    tally = ReadTally()
    for path in (warc, jsonl, d):
        list(read_pages(path, tally=tally))
    assert tally.pages == 3 + 1 + 1
    odd = tmp_path / "odd.txt"
    odd.write_text("hello\n")
    with pytest.raises(InputError, match="neither a WARC file"):
        read_pages(odd)
    with pytest.raises(InputError, match="no such file"):
        read_pages(tmp_path / "nothing-here")
