"""The documents JSON-lines format: validation with numbered problems, UTC dates, shared normalisation.

References: RFC 3339 §5.6 / ISO 8601 for timestamps and offsets, RFC 5646 §2.2.1 for primary language
subtags. Record contents are invented.
"""

from __future__ import annotations

import gzip
import json
from datetime import UTC, datetime
from pathlib import Path

import pytest

from linkfold.content import (
    DOCUMENT_FIELDS,
    Page,
    ReadTally,
    Status,
    Unusable,
    extract_document,
    read_documents,
    text_hash,
)
from linkfold.errors import InputError

NOW = datetime(2026, 11, 1, tzinfo=UTC)
TEXT = ("Riverton Central Library will open until eight in the evening on Saturdays and from ten until four "
        "on Sundays from next month, after a trial over the summer drew more than two thousand extra "
        "visitors. The council's culture committee approved the change on Monday without a vote against. "
        "The longer hours will be covered by two new part-time posts and by volunteers.")


def _write(tmp_path: Path, records: list, *, gz: bool = False, name: str = "docs.jsonl") -> Path:
    lines = [r if isinstance(r, str) else json.dumps(r) for r in records]
    data = ("\n".join(lines) + "\n").encode("utf-8")
    path = tmp_path / name
    path.write_bytes(gzip.compress(data) if gz else data)
    return path


def rec(**over):
    base = {"url": "https://riverton-daily.test/story/library-extends-weekend-hours-105",
            "title": "Library extends weekend opening hours", "text": TEXT}
    base.update(over)
    return {k: v for k, v in base.items() if v is not ...}


def test_the_field_names_other_projects_use():
    assert DOCUMENT_FIELDS == ("url", "title", "text", "published", "author", "language")


@pytest.mark.parametrize("gz", [False, True], ids=["jsonl", "jsonl.gz"])
def test_good_records(tmp_path, gz):
    path = _write(tmp_path, [
        rec(published="2026-09-15T08:30:00+02:00", author=["Agnes Throstle", " Staff reporter "],
            language="en_GB", extra_field="ignored"),
        rec(published="2026-09-15", language="en"),
        rec(published="2026-09-15T08:30:00"),
    ], gz=gz)
    tally = ReadTally()
    a, b, c = read_documents(path, now=NOW, tally=tally)
    # RFC 3339 §4.2: +02:00 is two hours ahead of UTC
    assert a.published == datetime(2026, 9, 15, 6, 30, tzinfo=UTC) and a.published_source == "loaded"
    assert a.author == "Agnes Throstle; Staff reporter"
    assert a.language == "en"  # RFC 5646 §2.2.1 primary subtag of en-GB (POSIX spelling en_GB)
    assert a.status is Status.USABLE and a.text_hash == text_hash(a.text)
    assert a.extractor_version.startswith("loaded/content ")
    assert b.published == datetime(2026, 9, 15, tzinfo=UTC)    # a bare date: midnight UTC (our rule)
    assert c.published == datetime(2026, 9, 15, 8, 30, tzinfo=UTC)  # no offset: taken as UTC (our rule)
    assert tally.pages == 3 and not tally.problems


def test_loaded_and_extracted_text_hash_alike(tmp_path):
    # The same words with other whitespace and a decomposed é: the same normalised text, the same hash.
    html = ("<html><head><title>Library</title></head><body><article><h1>Library extends weekend opening "
            f"hours</h1><p>{TEXT}</p></article></body></html>").encode()
    page = Page(url="https://riverton-daily.test/a", final_url="https://riverton-daily.test/a", status=200,
                headers={"content-type": "text/html"}, body=html, fetched_at=NOW, source="test")
    extracted = extract_document(page)
    loaded_text = extracted.text.replace(" ", "  \t").replace("\n", "\r\n\r\n")
    (doc,) = read_documents(_write(tmp_path, [rec(text=loaded_text)]), now=NOW)
    assert doc.text == extracted.text and doc.text_hash == extracted.text_hash is not None


def test_bad_records_are_numbered_problems(tmp_path):
    path = _write(tmp_path, [
        rec(),
        "",
        '{"url": "https://riverton-daily.test/x", "title": "unterminated',
        "[1, 2]",
        rec(url=...),
        rec(text=...),
        rec(title=None),
        rec(text=17),
        rec(url="ftp://riverton-daily.test/x"),
        rec(published="15/09/2026"),
        rec(published="2027-01-01T00:00:00Z"),
        rec(author={"name": "x"}),
        rec(language="not a language"),
        rec(text="Short teaser."),
    ])
    tally = ReadTally()
    out = list(read_documents(path, now=NOW, tally=tally))
    problems = [(p.line, p.reason) for p in out if not hasattr(p, "status")]
    assert problems == [(3, "bad_json"), (4, "bad_json"), (5, "missing_field"), (6, "missing_field"),
                        (7, "missing_field"), (8, "bad_field"), (9, "bad_url"), (10, "bad_time"),
                        (11, "bad_time"), (12, "bad_field"), (13, "bad_field")]
    assert str(out[1]).startswith(f"{path}:3: bad_json: ")
    docs = [d for d in out if hasattr(d, "status")]
    assert len(docs) == 2 and docs[1].unusable_reason is Unusable.TOO_SHORT and docs[1].text_hash is None
    assert tally.pages == 2 and sum(tally.problems.values()) == 11


def test_a_file_that_is_not_jsonl(tmp_path):
    path = tmp_path / "docs.jsonl"
    path.write_text("url,title,text\nhttps://riverton-daily.test/x,T,body\n")
    with pytest.raises(InputError, match=r"docs\.jsonl: none of the first 2 non-blank lines is a JSON object"):
        list(read_documents(path))
    with pytest.raises(InputError, match="no such file"):
        list(read_documents(tmp_path / "missing.jsonl"))


def test_a_lone_surrogate_escape_becomes_a_replacement_character(tmp_path):
    # RFC 8259 §8.2: JSON may carry "\ud800" alone, which is no Unicode scalar value and cannot be
    # encoded as UTF-8 (RFC 3629 §3); like a decoder meeting a broken sequence we use U+FFFD.
    path = tmp_path / "docs.jsonl"
    body = " ".join(["word"] * 80)
    path.write_text('{"url": "https://daily.example/a", "title": "T", "text": "' + body + ' \\ud800 end"}\n',
                    encoding="utf-8")
    tally = ReadTally()
    (doc,) = read_documents(path, now=NOW, tally=tally)
    assert "\ufffd" in doc.text and doc.text_hash == text_hash(doc.text)
    assert not tally.problems
