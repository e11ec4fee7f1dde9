"""Import, load and extract stages on both backends: what is stored, what reruns add, what is linked.

External references: warcio, the reference reader and writer of WARC (ISO 28500): a WARC its writer
produced is imported, and the stored fetch time, target URI and record offset are the ones warcio reports;
RFC 1950 (zlib, standard library) and FIPS 180-4 SHA-256 (hashlib) for the stored body and text hash;
RFC 3986 §5.4.1 for resolving a relative declared canonical (``../g`` against ``http://a/b/c/d;p?q`` is
``http://a/b/g``); RFC 6596 for what a canonical link declares; RFC 3339 §5.6 for the loaded
``published`` offset. Page texts are invented (the Northvale scenario) and serve behaviour checks only.
"""

from __future__ import annotations

import hashlib
import io
import json
import shutil
import zlib
from pathlib import Path

import pytest
import sqlalchemy as sa
from warcio.archiveiterator import ArchiveIterator
from warcio.statusandheaders import StatusAndHeaders
from warcio.warcwriter import WARCWriter

from linkfold.canon import canonicalize
from linkfold.content import MANIFEST_NAME, normalise_text
from linkfold.content import extract as extract_module
from linkfold.content.extracting import extract_pages
from linkfold.content.loading import load_documents
from linkfold.content.page_import import import_pages
from linkfold.content.stage import count_pending  # the per-stage counts by name, kept for one release
from linkfold.errors import ConfigError, InputError
from linkfold.store import pages as sp
from linkfold.store import tables as t

FIXTURES = Path(__file__).resolve().parent.parent / "service" / "linkfold" / "demo_data" / "pages"

BRIDGE_URL = "https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens"
AMP_URL = "https://amp.lakeside-wire.example/wire/20260910/old-mill-bridge-reopens"
SYNDICATED_URL = "https://northvale-herald.example/news/2026/09/old-mill-bridge-reopens"
PAYWALL_URL = "https://riverton-daily.test/story/mayor-outlines-budget-121"
CONSENT_URL = "https://lakeside-wire.example/wire/20261012/storm-damages-pier"
VIDEO_URL = "https://lakeside-wire.example/wire/20261029/park-run-record-set"
LATIN1_URL = "https://harbourview-news.example/article.php?id=103"
BROKEN_URL = "https://riverton-daily.test/story/library-extends-weekend-hours-105"

FIXTURE_FILES = {
    BRIDGE_URL: "lakeside-wire-old-mill-bridge.html",
    AMP_URL: "lakeside-wire-old-mill-bridge-amp.html",
    SYNDICATED_URL: "northvale-herald-old-mill-bridge-syndicated.html",
    PAYWALL_URL: "riverton-daily-mayor-budget-paywall.html",
    CONSENT_URL: "lakeside-wire-storm-pier-consent.html",
    VIDEO_URL: "lakeside-wire-park-run-video.html",
    LATIN1_URL: "harbourview-news-science-fair-latin1.html",
    BROKEN_URL: "riverton-daily-library-hours-broken.html",
}

# Invented text, long enough to be usable (over 150 words).
STORY = " ".join(
    f"Paragraph {i}: the Northvale ferry timetable changes on Monday, with an extra crossing at dawn, a later "
    "last boat on Fridays and a new stop at the harbour steps, the council's transport office said." for i in range(8))


def _page_dir(tmp_path: Path) -> Path:
    """The fixture pages with a manifest, as a lab would save them (fetched at a time after every date)."""
    d = tmp_path / "saved-pages"
    d.mkdir()
    lines = ["file\turl\tfetched_at"]
    for url, name in FIXTURE_FILES.items():
        shutil.copy(FIXTURES / name, d / name)
        lines.append(f"{name}\t{url}\t2026-11-01T12:00:00Z")
    (d / MANIFEST_NAME).write_text("\n".join(lines) + "\n", encoding="utf-8")
    return d


def _html(title: str, body: str, head: str = "") -> str:
    return (f"<!doctype html><html lang=en><head><title>{title}</title>{head}</head>"
            f"<body><article><h1>{title}</h1><p>{body}</p></article></body></html>")


def _jsonl(path: Path, records: list) -> Path:
    path.write_text("\n".join(r if isinstance(r, str) else json.dumps(r) for r in records) + "\n", encoding="utf-8")
    return path


def _cid(conn, url: str) -> int:
    key = canonicalize(url).url_key
    return conn.execute(sa.select(t.canonical_urls.c.id).where(t.canonical_urls.c.url_key == key)).scalar_one()


def _count(conn, table) -> int:
    return conn.execute(sa.select(sa.func.count()).select_from(table)).scalar_one()


# --- import ------------------------------------------------------------------------------------------------------
def _write_warc(path: Path, pages: list[tuple[str, bytes]]) -> list[int]:
    with path.open("wb") as fh:
        w = WARCWriter(fh, gzip=True)
        req = StatusAndHeaders("GET / HTTP/1.1", [("Host", "lakeside-wire.example"), ("Cookie", "panel=p-17")],
                               is_http_request=True)
        w.write_record(w.create_warc_record(BRIDGE_URL, "request", payload=io.BytesIO(b""), length=0,
                                            http_headers=req))
        for url, body in pages:
            http = StatusAndHeaders("200 OK", [("Content-Type", "text/html; charset=utf-8"),
                                               ("Set-Cookie", "visitor=v-0042; Path=/"), ("ETag", '"e1"')],
                                    protocol="HTTP/1.1")
            w.write_record(w.create_warc_record(url, "response", payload=io.BytesIO(body), length=len(body),
                                                http_headers=http,
                                                warc_headers_dict={"WARC-Date": "2026-10-01T12:00:00Z"}))
    # The reference reader's offsets of the response records.
    with path.open("rb") as fh:
        it = ArchiveIterator(fh)
        return [it.offset for rec in it if rec.rec_type == "response"]


def test_import_a_warc_written_by_warcio(engine, tmp_path):
    bridge = (FIXTURES / FIXTURE_FILES[BRIDGE_URL]).read_bytes()
    synd = (FIXTURES / FIXTURE_FILES[SYNDICATED_URL]).read_bytes()
    warc = tmp_path / "crawl-2026-10.warc.gz"
    offsets = _write_warc(warc, [(BRIDGE_URL, bridge), (SYNDICATED_URL, synd)])
    summary = import_pages(engine, [warc])
    assert (summary.read, summary.stored, summary.already_stored) == (2, 2, 0)
    assert summary.skipped == {"warc_request": 1}
    with engine.connect() as conn:
        page = sp.pages_of(conn, _cid(conn, BRIDGE_URL))[0]
        assert page["requested_url"] == page["final_url"] == BRIDGE_URL
        assert page["fetched_at"].isoformat() == "2026-10-01T12:00:00+00:00"  # WARC-Date
        assert page["status"] == 200 and page["truncated"] is False
        # The file name, not the machine's path; the record offset as warcio reports it.
        assert page["source"] == f"warc:crawl-2026-10.warc.gz#{offsets[0]}"
        # Cookies stay out (personal data); the validators stay in.
        assert page["headers"] == {"content-type": "text/html; charset=utf-8", "etag": '"e1"'}
        blob = conn.execute(sa.select(t.pages.c.body).where(t.pages.c.id == page["id"])).scalar_one()
        assert zlib.decompress(blob) == bridge and page["body_sha256"] == hashlib.sha256(bridge).hexdigest()
        run = conn.execute(sa.select(t.runs).where(t.runs.c.id == summary.run_id)).mappings().one()
        assert run["stage"] == "import_pages" and run["state"] == "ok" and run["counts"]["stored"] == 2
    again = import_pages(engine, [warc])
    assert (again.read, again.stored, again.already_stored) == (2, 0, 2)
    with engine.connect() as conn:
        assert _count(conn, t.pages) == 2


def test_a_broken_archive_keeps_what_was_read_before_it(engine, tmp_path):
    bridge = (FIXTURES / FIXTURE_FILES[BRIDGE_URL]).read_bytes()
    warc = tmp_path / "cut.warc.gz"
    _write_warc(warc, [(BRIDGE_URL, bridge), (SYNDICATED_URL, bridge * 3)])
    data = warc.read_bytes()
    warc.write_bytes(data[:len(data) - 400])  # cut inside the last record
    with pytest.raises(InputError, match=r"cut\.warc\.gz"):
        import_pages(engine, [warc], batch_size=10)
    with engine.connect() as conn:
        assert [p["requested_url"] for p in sp.pages_of(conn, _cid(conn, BRIDGE_URL))] == [BRIDGE_URL]
        assert _count(conn, t.pages) == 1
        run = conn.execute(sa.select(t.runs).where(t.runs.c.stage == "import_pages")).mappings().one()
        assert run["state"] == "failed" and "cut.warc.gz" in run["detail"]


def test_import_reports_problems_with_file_and_line(engine, tmp_path):
    d = tmp_path / "dir"
    d.mkdir()
    (d / "a.html").write_text(_html("Ferry timetable", STORY), encoding="utf-8")
    long_url = "https://lakeside-wire.example/" + "a" * 9000  # over the canonicaliser's MAX_URL_LENGTH
    (d / MANIFEST_NAME).write_text(
        "file\turl\n"
        "a.html\thttps://lakeside-wire.example/wire/20261101/ferry-timetable\n"
        "missing.html\thttps://lakeside-wire.example/wire/20261101/gone\n"
        f"a.html\t{long_url}\n", encoding="utf-8")
    pages = _jsonl(tmp_path / "pages.jsonl", [
        {"url": "https://northvale-herald.example/news/2026/11/ferry-timetable", "html": _html("Ferry", STORY)},
        "{not json",
        {"url": "ftp://northvale-herald.example/x", "html": "<p>x</p>"},
    ])
    summary = import_pages(engine, [d, pages])
    assert summary.stored == 2 and summary.files == 2
    found = {(Path(p.file).name, p.line, p.reason) for p in summary.problems.kept}
    assert found == {("dir", 3, "missing_file"), ("dir", 4, "url_too_long"), ("pages.jsonl", 2, "bad_json"),
                     ("pages.jsonl", 3, "bad_url")}
    assert str(next(p for p in summary.problems.kept if p.line == 4 and p.file.endswith("dir"))).startswith(
        f"{d}:4: url_too_long")
    with engine.connect() as conn:
        sources = set(conn.execute(sa.select(t.pages.c.source)).scalars())
    assert sources == {"dir:dir/pages.tsv:2", "jsonl:pages.jsonl:1"}


def test_import_needs_existing_inputs(engine, tmp_path):
    with pytest.raises(InputError, match="no such file"):
        import_pages(engine, [tmp_path / "nope.warc"])
    with pytest.raises(ConfigError):
        import_pages(engine, [])


# --- extract ---------------------------------------------------------------------------------------------------
def test_fixture_pages_import_and_extract(engine, tmp_path):
    """What the demo does: import a saved-page directory, then extract, never touching the network."""
    imported = import_pages(engine, [_page_dir(tmp_path)])
    assert imported.stored == 8 and imported.problems.total == 0
    assert count_pending(engine)["extract"] == 8
    summary = extract_pages(engine)
    assert summary.selected == 8 and summary.stored == 8
    assert dict(summary.no_text) == {"paywall": 1, "consent_wall": 1, "video": 1}
    assert summary.usable == 5
    assert count_pending(engine) == {"fetch": 0, "extract": 0, "reextract": 0}
    with engine.connect() as conn:
        rows = {r["source"]: r for r in conn.execute(sa.select(t.documents)).mappings()}
        assert len(rows) == 8
        for url, reason in [(PAYWALL_URL, "paywall"), (CONSENT_URL, "consent_wall"), (VIDEO_URL, "video")]:
            doc = sp.documents_of(conn, _cid(conn, url))[0]
            # Marked with the reason, not dropped; no text hash, so duplicate detection leaves it out.
            assert doc["state"] == "no_text" and doc["reason"] == reason and doc["text_hash"] is None
        bridge = sp.current_document(conn, _cid(conn, BRIDGE_URL))
        assert bridge["extractor_version"] == extract_module.extractor_version()
        # FIPS 180-4 SHA-256 of the stored (normalised) text.
        assert bridge["text_hash"] == hashlib.sha256(bridge["text"].encode("utf-8")).hexdigest()
        assert normalise_text(bridge["text"]) == bridge["text"]
        assert bridge["published"].isoformat() == "2026-09-10T07:00:00+00:00"
        # The syndicated copy names the origin on another outlet: recorded, not trusted.
        synd, origin = _cid(conn, SYNDICATED_URL), _cid(conn, BRIDGE_URL)
        links = conn.execute(sa.select(t.links)).mappings().all()
        assert [(lk["kind"], lk["src_id"], lk["dst_id"]) for lk in links] == [("declared_cross", synd, origin)]
        detail = links[0]["detail"]
        assert detail["trusted"] is False and detail["via"] == "rel_canonical"
        assert (detail["page_outlet"], detail["target_outlet"]) == ("northvale-herald.example", "lakeside-wire.example")
        run = conn.execute(sa.select(t.runs).where(t.runs.c.id == summary.run_id)).mappings().one()
        assert run["stage"] == "extract" and run["counts"]["no_text"]["paywall"] == 1


def _import_jsonl(engine, tmp_path, records, name="p.jsonl"):
    return import_pages(engine, [_jsonl(tmp_path / name, records)])


def test_same_outlet_declared_canonical_becomes_a_declared_link(engine, tmp_path):
    # RFC 3986 §5.4.1: "../g" against "http://a/b/c/d;p?q" is "http://a/b/g" (here on an invented host).
    page_url = "https://lakeside-wire.example/b/c/d;p?q"
    og_only = "https://lakeside-wire.example/print/ferry-timetable"
    _import_jsonl(engine, tmp_path, [
        {"url": page_url, "html": _html("Ferry timetable", STORY, '<link rel="canonical" href="../g">')},
        {"url": og_only, "html": _html("Ferry timetable (print)", STORY,
                                       '<meta property="og:url" content="/wire/20261101/ferry-timetable">')},
    ])
    summary = extract_pages(engine)
    assert summary.links == 2 and summary.cross_links == 0
    assert dict(summary.declared) == {"same_outlet": 2}
    with engine.connect() as conn:
        links = {lk["src_id"]: lk for lk in conn.execute(sa.select(t.links)).mappings()}
        first = links[_cid(conn, page_url)]
        assert first["kind"] == "declared" and first["dst_id"] == _cid(conn, "https://lakeside-wire.example/b/g")
        assert first["detail"]["declared_url"] == "https://lakeside-wire.example/b/g"
        assert first["detail"]["via"] == "rel_canonical" and "trusted" not in first["detail"]
        second = links[_cid(conn, og_only)]
        assert second["detail"]["via"] == "og_url"
        assert second["dst_id"] == _cid(conn, "https://lakeside-wire.example/wire/20261101/ferry-timetable")
        # The declared URL is stored as a raw URL of its own, so a later stage can fetch it.
        assert "https://lakeside-wire.example/b/g" in set(conn.execute(sa.select(t.raw_urls.c.raw)).scalars())


def test_extract_resumes_and_reruns_add_nothing(engine, tmp_path):
    import_pages(engine, [_page_dir(tmp_path)])
    first = extract_pages(engine, limit=3, batch_size=2)
    assert first.selected == 3
    assert count_pending(engine)["extract"] == 5
    rest = extract_pages(engine)
    assert rest.selected == 5
    assert extract_pages(engine).selected == 0
    with engine.connect() as conn:
        assert _count(conn, t.documents) == 8 and _count(conn, t.links) == 1


def test_reextract_after_a_version_change_is_one_command_and_keeps_old_documents(engine, tmp_path, monkeypatch):
    import_pages(engine, [_page_dir(tmp_path)])
    old = extract_pages(engine)
    old_version = old.extractor_version
    # What an upgrade does: the extractor version changes (here CONTENT_VERSION, as a rules change would).
    monkeypatch.setattr(extract_module, "CONTENT_VERSION", "test-next")
    new_version = extract_module.extractor_version()
    assert new_version != old_version
    assert count_pending(engine) == {"fetch": 0, "extract": 0, "reextract": 8}
    assert extract_pages(engine).selected == 0  # a plain run does not redo documents behind the lab's back
    redo = extract_pages(engine, reextract=True)
    assert redo.selected == 8 and redo.stored == 8 and redo.extractor_version == new_version
    assert redo.links == 0 and redo.cross_links == 0  # the same evidence is not stored twice
    assert extract_pages(engine, reextract=True).selected == 0
    with engine.connect() as conn:
        versions = sorted(conn.execute(sa.select(t.documents.c.extractor_version)).scalars())
        assert versions == sorted([old_version] * 8 + [new_version] * 8)
        # The current document is the newest usable one: the new version's.
        assert sp.current_document(conn, _cid(conn, LATIN1_URL))["extractor_version"] == new_version
        assert [d["extractor_version"] for d in sp.documents_of(conn, _cid(conn, LATIN1_URL))] == \
            [old_version, new_version]


def test_document_belongs_to_the_url_the_page_was_served_from(engine, tmp_path):
    final = "https://lakeside-wire.example/wire/20261101/ferry-timetable"
    _import_jsonl(engine, tmp_path, [{"url": "https://lakeside-wire.example/ferry", "final_url": final,
                                      "html": _html("Ferry timetable", STORY)}])
    extract_pages(engine)
    with engine.connect() as conn:
        doc = sp.current_document(conn, _cid(conn, final))
        assert doc is not None and doc["page_id"] is not None
        assert sp.current_document(conn, _cid(conn, "https://lakeside-wire.example/ferry")) is None


# --- documents load ------------------------------------------------------------------------------------------------
def test_load_documents(engine, tmp_path):
    path = _jsonl(tmp_path / "texts.jsonl", [
        {"url": "https://northvale-herald.example/news/2026/11/ferry-timetable?utm_source=feed",
         "title": "Ferry timetable changes", "text": STORY, "published": "2026-11-01T09:00:00+02:00",
         "author": ["A. Writer", "B. Writer"], "language": "en-GB"},
        {"url": "https://northvale-herald.example/news/2026/11/short", "title": "Brief", "text": "Too short."},
        {"url": "https://northvale-herald.example/news/2026/11/x", "title": "X", "text": STORY,
         "published": "not a date"},
        "",
        {"url": "https://northvale-herald.example/news/2026/11/y", "title": "Y"},
    ])
    summary = load_documents(engine, path)
    assert (summary.read, summary.stored, summary.usable) == (2, 2, 1)
    assert dict(summary.no_text) == {"too_short": 1}
    assert [(p.line, p.reason) for p in summary.problems.kept] == [(3, "bad_time"), (5, "missing_field")]
    with engine.connect() as conn:
        # utm_source is a literal analytics parameter the canonicaliser drops (common practice).
        cid = _cid(conn, "https://northvale-herald.example/news/2026/11/ferry-timetable")
        doc = sp.current_document(conn, cid)
        assert doc["page_id"] is None and doc["source"] == "load:texts.jsonl:1"
        # RFC 3339 §5.6: +02:00 means two hours ahead of UTC.
        assert doc["published"].isoformat() == "2026-11-01T07:00:00+00:00" and doc["published_source"] == "loaded"
        assert doc["author"] == "A. Writer; B. Writer" and doc["language"] == "en"
        assert doc["text_hash"] == hashlib.sha256(normalise_text(STORY).encode("utf-8")).hexdigest()
        short = sp.documents_of(conn, _cid(conn, "https://northvale-herald.example/news/2026/11/short"))[0]
        assert short["state"] == "no_text" and short["reason"] == "too_short"
        run = conn.execute(sa.select(t.runs).where(t.runs.c.id == summary.run_id)).mappings().one()
        assert run["stage"] == "load_documents" and run["counts"]["problems"] == {"bad_time": 1, "missing_field": 1}
    again = load_documents(engine, path)
    assert (again.read, again.stored, again.already_stored) == (2, 0, 2)
    with engine.connect() as conn:
        assert _count(conn, t.documents) == 2


def test_load_refuses_a_file_that_is_not_json_lines(engine, tmp_path):
    path = tmp_path / "texts.csv"
    path.write_text("url,title,text\nhttps://a.example/,T,x\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"texts\.csv"):
        load_documents(engine, path)
    with engine.connect() as conn:
        assert _count(conn, t.documents) == 0


def test_loaded_text_the_database_cannot_hold_is_stored_replaced(engine, tmp_path):
    # PostgreSQL text refuses NUL and lone surrogates; both are valid escapes in a JSON string (RFC 8259 §7).
    line = ('{"url": "https://northvale-herald.example/news/2026/11/odd", "title": "Odd\\u0000title", '
            '"text": "' + STORY + ' \\ud800 end"}')
    summary = load_documents(engine, _jsonl(tmp_path / "odd.jsonl", [line]))
    assert summary.stored == 1
    with engine.connect() as conn:
        doc = sp.current_document(conn, _cid(conn, "https://northvale-herald.example/news/2026/11/odd"))
        assert doc["title"] == "Odd\ufffdtitle" and doc["text"].endswith("\ufffd end")
        assert doc["text_hash"] == hashlib.sha256(doc["text"].encode("utf-8")).hexdigest()


def test_an_interrupted_extract_keeps_its_batches_and_resumes(engine, tmp_path, monkeypatch):
    # The extraction runs in process here (eight pages are too little work for a pool), through the
    # executor's batch task: Ctrl-C there reaches the stage the same way it does from a pool's result.
    from linkfold.content import batch as stage

    import_pages(engine, [_page_dir(tmp_path)])
    real = stage.extract_document
    calls = []

    def interrupted_on_the_fifth(page, **kw):
        calls.append(page.url)
        if len(calls) == 5:
            raise KeyboardInterrupt  # Ctrl-C in the middle of the third batch
        return real(page, **kw)

    monkeypatch.setattr(stage, "extract_document", interrupted_on_the_fifth)
    with pytest.raises(KeyboardInterrupt):
        extract_pages(engine, batch_size=2)
    with engine.connect() as conn:
        assert _count(conn, t.documents) == 4  # the two batches committed before it
        run = conn.execute(sa.select(t.runs).where(t.runs.c.stage == "extract")).mappings().one()
        assert run["state"] == "interrupted" and run["counts"]["selected"] == 4
    monkeypatch.setattr(stage, "extract_document", real)
    rest = extract_pages(engine)
    assert rest.selected == 4
    with engine.connect() as conn:
        assert _count(conn, t.documents) == 8
        assert conn.execute(sa.select(sa.func.count(sa.distinct(t.documents.c.page_id)))).scalar_one() == 8
