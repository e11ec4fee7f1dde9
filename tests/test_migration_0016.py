"""Migration 0016 on data stored before it, on both backends: refused URLs get their reason from the text
of their latest attempt, and the excerpts that earlier loads kept for rejects of parsed records (and the
value an earlier bad-time detail repeated) are removed, while an unparsable line's excerpt stays."""

from __future__ import annotations

from datetime import UTC, datetime

import sqlalchemy as sa

from linkfold.store import make_engine
from linkfold.store import tables as t
from linkfold.store.migrate import downgrade, history, upgrade

NOW = datetime(2026, 11, 1, tzinfo=UTC)
SECRET = "jd-private-note"  # stands for a parsed record's other fields


def _before_0016() -> str:
    return next(down for rev, down, _doc in history() if rev == "0016")


def _seed(conn) -> None:
    conn.execute(sa.insert(t.datasets).values(id=1, name="panel", created_at=NOW))
    # The table as it was before 0022 renamed status to state: this runs at revision 0015.
    files = sa.table("dataset_files", *(sa.column(c) for c in ("id", "dataset_id", "file_name", "sha256",
                                                               "size_bytes", "format", "status")),
                     sa.column("started_at", t.dataset_files.c.started_at.type))
    conn.execute(sa.insert(files).values(
        id=1, dataset_id=1, file_name="panel.csv", sha256="0" * 64, size_bytes=1, format="csv", status="complete",
        started_at=NOW))
    rejects = [(2, -1, "field_count", "4 fields where the header has 3", f"1,https://a.example/,x,{SECRET}"),
               (3, -2, "bad_time", f"'{SECRET}' is not an ISO 8601 time (Invalid isoformat string)", SECRET),
               (4, -1, "bad_json", "the line is a JSON list, not an object", f'["{SECRET}"]'),
               (5, -1, "bad_json", "not valid JSON: Expecting value", "{broken"),
               (6, -1, "malformed_csv", "a quote never closed", '7,"https://a.example/open')]
    conn.execute(sa.insert(t.rejects), [
        {"dataset_id": 1, "file_id": 1, "line_no": n, "position": pos, "reason": r, "detail": d, "excerpt": e}
        for n, pos, r, d, e in rejects])
    urls = ["https://short.test/a", "https://short.test/b", "https://short.test/c"]
    conn.execute(sa.insert(t.canonical_urls), [
        {"id": i + 1, "url_key": f"k{i}", "url": u, "host": "short.test", "created_at": NOW}
        for i, u in enumerate(urls)])
    details = ["short.test -> 10.0.0.5 is private; refused by the request-forgery guard",
               "robots.txt disallows this URL for linkfold",
               "short.test -> ::ffff:127.0.0.1 is loopback (embedded in ::ffff:127.0.0.1); refused by the "
               "request-forgery guard"]
    failures = ["refused", "robots", "refused"]
    conn.execute(sa.insert(t.follow_results), [
        {"canonical_id": i + 1, "state": "refused", "failure": f, "via": "fetched", "attempts": 1,
         "first_attempt_at": NOW, "last_attempt_at": NOW} for i, f in enumerate(failures)])
    conn.execute(sa.insert(t.follow_attempts), [
        {"canonical_id": i + 1, "attempted_at": NOW, "state": "refused", "failure": f, "detail": d}
        for i, (f, d) in enumerate(zip(failures, details, strict=True))])


def test_0016_backfills_reasons_and_removes_kept_fields(empty_db_url):
    engine = make_engine(empty_db_url)
    try:
        upgrade(engine, _before_0016())
        with engine.begin() as conn:
            _seed(conn)
        upgrade(engine, "0016")
        with engine.connect() as conn:
            reasons = dict(conn.execute(sa.select(t.follow_results.c.canonical_id, t.follow_results.c.reason)).all())
            kept = {n: (d, e) for n, d, e in conn.execute(
                sa.select(t.rejects.c.line_no, t.rejects.c.detail, t.rejects.c.excerpt))}
        assert reasons == {1: "private", 2: "robots_file", 3: "loopback"}
        assert kept[2][1] is None and kept[3][1] is None and kept[4][1] is None
        assert SECRET not in kept[3][0]
        assert kept[5][1] == "{broken" and kept[6][1] == '7,"https://a.example/open'  # unparsable: kept
        downgrade(engine, _before_0016())
        upgrade(engine)
    finally:
        engine.dispose()
