"""What a load keeps of the rows it rejects: reason, line and position, and an excerpt only of a line
that could not be parsed at all (docs/ingest.md, "What is stored" and "Rejects").

Every other field of a parsed record is someone's personal data (a panellist's e-mail address, a post's
text). Each record below carries a unique marker in such a field, and is rejected for a reason that
has nothing to do with that field; the marker must not be anywhere in the registry afterwards: not in the
bytes of the SQLite file (and its WAL), not in any table on PostgreSQL. A second marker sits in lines
that cannot be parsed, whose excerpt is kept on purpose, to show that the scan finds what is there.
All data is invented.
"""

from __future__ import annotations

import json
from pathlib import Path

import sqlalchemy as sa

from linkfold.canon import MAX_URL_LENGTH
from linkfold.ingest import ingest_dump
from linkfold.store import tables as t
from linkfold.store.datasets import get_dataset

MARKER = "zq7MARKERxv4"  # in fields of parsed records: must never be stored
KEPT = "kp3UNPARSEDmw8"  # in lines that cannot be parsed: their excerpt is kept

LONG_URL = "https://a.example/" + "p" * MAX_URL_LENGTH  # over the canonicaliser's limit: a too_long reject


def _csv(tmp_path: Path) -> Path:
    lines = [
        "id,url,t,email,note",
        f"1,https://a.example/ok,2031-05-04T08:00:00Z,{MARKER}@mail.example,{MARKER}",  # fine, others dropped
        f"2,https://a.example/t,{MARKER},x@mail.example,{MARKER}",  # bad time: the time field holds it
        f"3,{LONG_URL},2031-05-04T08:00:00Z,{MARKER}@mail.example,{MARKER}",  # URL too long
        f"4,https://a.example/f,2031-05-04T08:00:00Z,{MARKER}@mail.example,{MARKER},{MARKER}",  # field_count
        f"5,https://a.example/m,2031-05-04T08:00:00Z,{MARKER}@mail.example",  # missing_column
        f"6,,2031-05-04T08:00:00Z,{MARKER}@mail.example,{MARKER}",  # no URL: counted, not rejected
        f"7,javascript:void(0),{MARKER},{MARKER}@mail.example,{MARKER}",  # not_http and bad time
        f'8,"https://a.example/q{KEPT},2031-05-04T08:00:00Z,x,y',  # a quote never closed: malformed_csv
    ]
    path = tmp_path / "panel.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _jsonl(tmp_path: Path) -> Path:
    records = [
        {"id": "p1", "text": MARKER, "links": [{"url": "https://a.example/j"}]},  # fine
        {"id": "p2", "text": MARKER},  # a post without links: counted, not rejected
        {"id": "p3", "text": MARKER, "links": []},  # the same, links present but empty
        {"id": {"handle": MARKER}, "text": MARKER, "links": [{"url": "https://a.example/k"}]},  # bad_key
        {"id": "p5", "text": MARKER, "links": [{"url": {"nested": MARKER}}]},  # not_text
        {"id": "p6", "created": MARKER, "text": MARKER, "links": [{"url": "https://a.example/c"}]},  # bad_time
    ]
    lines = [json.dumps(r) for r in records]
    lines.append(json.dumps([MARKER, "https://a.example/list"]))  # JSON, but not an object
    lines.append('{"id": "p8", "text": "' + KEPT + '", "links": [')  # broken JSON: excerpt kept
    path = tmp_path / "posts.jsonl"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _load(engine, tmp_path: Path) -> tuple:
    panel = ingest_dump(engine, [_csv(tmp_path)], dataset="panel", key_column="id", time_column="t")
    posts = ingest_dump(engine, [_jsonl(tmp_path)], dataset="posts", url_column="links.*.url", key_column="id",
                        time_column="created")
    return panel, posts


def _rejects(engine) -> list[dict]:
    with engine.connect() as conn:
        return [dict(r) for r in conn.execute(sa.select(t.rejects).order_by(t.rejects.c.id)).mappings()]


def _every_stored_value(engine) -> str:
    parts = []
    with engine.connect() as conn:
        for table in t.metadata.sorted_tables:
            for row in conn.execute(sa.select(table)):
                parts.append(json.dumps([str(v) for v in row], ensure_ascii=False))
    return "\n".join(parts)


def test_rejected_records_leave_no_field_behind(engine, backend, db_url, tmp_path):
    panel, posts = _load(engine, tmp_path)
    found = {(r["dataset_id"], r["line_no"], r["position"], r["reason"]) for r in _rejects(engine)}
    with engine.connect() as conn:
        p = get_dataset(conn, "panel")["id"]
        q = get_dataset(conn, "posts")["id"]
    assert found == {
        (p, 3, -2, "bad_time"),
        (p, 4, 0, "too_long"), (p, 5, -1, "field_count"), (p, 6, -1, "missing_column"),
        (p, 8, 0, "not_http"), (p, 8, -2, "bad_time"), (p, 9, -1, "malformed_csv"),
        (q, 4, -1, "bad_key"), (q, 5, 0, "not_text"), (q, 6, -2, "bad_time"), (q, 7, -1, "bad_json"),
        (q, 8, -1, "bad_json"),
        # every post here but p6 has no "created": its time is missing (a reject with no value to keep)
        (q, 1, -2, "missing_time"), (q, 4, -2, "missing_time"), (q, 5, -2, "missing_time"),
    }
    # Rows without a URL are counted in the summary, not rejected.
    assert (panel.rows_without_url, posts.rows_without_url) == (1, 2)
    rows = _rejects(engine)
    # Only the two lines that could not be parsed keep an excerpt, and it is theirs.
    assert sorted((r["reason"], KEPT in (r["excerpt"] or "")) for r in rows if r["excerpt"]) == \
        [("bad_json", True), ("malformed_csv", True)]
    assert all(MARKER not in (r["detail"] or "") for r in rows)
    stored = _every_stored_value(engine)
    assert KEPT in stored  # the scan sees what is stored ...
    assert MARKER not in stored  # ... and no field of a parsed record is
    engine.dispose()
    if backend == "sqlite":
        # The file itself, WAL included: no free page, index or journal holds the marker either.
        db = Path(db_url.removeprefix("sqlite:///"))
        files = [f for f in db.parent.iterdir() if f.name.startswith(db.name)]
        data = b"".join(f.read_bytes() for f in files)
        assert KEPT.encode() in data
        assert MARKER.encode() not in data
