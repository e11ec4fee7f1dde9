"""Rows encoded for PostgreSQL's binary COPY away from the connection (bulk.BinaryRows), then sent as bytes.

Checked against the published format (PostgreSQL documentation, COPY, "Binary Format") for the header and
trailer, and against the server itself: what it reads from the encoded bytes is the rows, and the bytes are
exactly what the server writes for the same rows in ``COPY … TO STDOUT (FORMAT BINARY)``. A load with the
encoding and a load without it leave the same registry.
"""

from __future__ import annotations

from datetime import UTC, datetime

import pytest
import sqlalchemy as sa

from linkfold.store import bulk, loads
from linkfold.store import tables as t
from linkfold.store.clock import utc
from linkfold.store.loads import SIGHTING_COLUMNS, insert_tuples, raw_encoder, sends_utf8, sighting_encoder

# The last field is the unit's pseudonym (text) or NULL.
ROWS = [(1, 2, 3, 0, "v1", datetime(2031, 5, 4, 8, 0, tzinfo=UTC), 7, "hs256:" + "a" * 52),
        (1, 2, 4, 1, "ключ é \u2028", None, 2_000_000_000, None),  # non-ASCII text, NULL time, a large int4
        (1, 2, 9_000_000_000, 0, "", datetime(1999, 12, 31, 23, 59, 59, 999999, tzinfo=UTC), 1, "u")]  # int8


def _count_encoded_rows(monkeypatch) -> list[int]:
    """Spy on the writer's inserts: the row counts of every batch sent as rows encoded ahead."""
    sent: list[int] = []
    real = insert_tuples

    def spy(conn, table, columns, rows, **kw):
        if kw.get("ready") is not None:
            sent.append(kw["ready"].count)
        return real(conn, table, columns, rows, **kw)

    monkeypatch.setattr(loads, "insert_tuples", spy)
    return sent


def test_header_and_trailer_are_the_documented_ones():
    # PostgreSQL documentation, COPY, "Binary Format": signature "PGCOPY\n\377\r\n\0" (11 bytes), a 32-bit
    # flags field (bit 16 says OIDs follow; 0 here), a 32-bit header extension length (0); the trailer is
    # a 16-bit integer -1.
    assert bulk.BINARY_HEADER == b"PGCOPY\n\xff\r\n\x00" + b"\x00\x00\x00\x00" + b"\x00\x00\x00\x00"
    assert (-1).to_bytes(2, "big", signed=True) == bulk.BINARY_TRAILER


def test_a_row_is_a_field_count_then_length_prefixed_fields():
    # Same documentation, "Tuples": a 16-bit field count, then per field a 32-bit length (-1 for NULL) and
    # the value in the type's binary send format (int4/int8 in network byte order; raw_url_id is int8, 0023).
    enc = bulk.BinaryRows(t.sightings, SIGHTING_COLUMNS)
    data = bytes(enc.encode([(1, 2, 3, 0, "v1", None, 7, "hs256:ab")]).data)
    assert data == (b"\x00\x08" + b"\x00\x00\x00\x04\x00\x00\x00\x01" + b"\x00\x00\x00\x04\x00\x00\x00\x02"
                    + b"\x00\x00\x00\x08" + (3).to_bytes(8, "big") + b"\x00\x00\x00\x04\x00\x00\x00\x00"
                    + b"\x00\x00\x00\x02v1" + b"\xff\xff\xff\xff" + b"\x00\x00\x00\x08" + (7).to_bytes(8, "big")
                    + b"\x00\x00\x00\x08hs256:ab")


@pytest.mark.postgres
def test_encoded_rows_read_back_as_the_rows_and_are_what_the_server_writes(pg_url):
    from linkfold.store import make_engine

    engine = make_engine(pg_url)
    try:
        with engine.begin() as conn:
            conn.exec_driver_sql("INSERT INTO datasets (id, name, created_at) VALUES (1, 'd', now())")
            conn.exec_driver_sql("INSERT INTO dataset_files (id, dataset_id, file_name, sha256, size_bytes, format, "
                                 "state, started_at) VALUES (2, 1, 'f', 'x', 0, 'csv', 'loading', now())")
            ready = bulk.BinaryRows(t.sightings, SIGHTING_COLUMNS).encode(ROWS[:2])
            # Two rows encoded ahead, one given as a tuple: both kinds in one COPY.
            assert bulk.insert_tuples(conn, t.sightings, SIGHTING_COLUMNS, ROWS[2:], binary=True,
                                      ready=ready) == 3
            got = conn.execute(sa.select(*[t.sightings.c[c] for c in SIGHTING_COLUMNS])
                               .order_by(t.sightings.c.line_no)).all()
            assert [tuple(r) for r in got] == ROWS
            # The server's own binary form of the stored rows is, row for row, what was encoded.
            raw = conn.connection.driver_connection
            sent: list[bytes] = []
            with raw.cursor() as cur, cur.copy("COPY sightings (dataset_id, file_id, line_no, position, row_key, "
                                               "seen_at, raw_url_id, unit) TO STDOUT (FORMAT BINARY)") as copy:
                sent = [bytes(b) for b in copy]
            body = b"".join(sent)
            assert body.startswith(bulk.BINARY_HEADER) and body.endswith(bulk.BINARY_TRAILER)
            ours = bytes(bulk.BinaryRows(t.sightings, SIGHTING_COLUMNS).encode(ROWS).data)
            assert body[len(bulk.BINARY_HEADER):-len(bulk.BINARY_TRAILER)] == ours
    finally:
        engine.dispose()


def test_encoded_rows_are_refused_on_sqlite(tmp_path):
    from linkfold.store import make_engine, upgrade

    engine = make_engine(f"sqlite:///{tmp_path / 'r.db'}")
    upgrade(engine)
    ready = bulk.BinaryRows(t.sightings, SIGHTING_COLUMNS).encode(ROWS[:1])
    with engine.begin() as conn, pytest.raises(ValueError, match="PostgreSQL"):
        bulk.insert_tuples(conn, t.sightings, SIGHTING_COLUMNS, [], binary=True, ready=ready)
    engine.dispose()


@pytest.mark.postgres
def test_a_load_leaves_the_same_registry_with_and_without_encoding_ahead(pg_server, tmp_path, monkeypatch):
    # Behaviour test: the encoded path (reading thread encodes, writer sends bytes) against the plain one
    # (writer formats every row), on an invented panel with repeats, refused URLs and rows across batches.
    from conftest import PG_ADMIN_URL, _with_database
    from linkfold.ingest import ingest_dump
    from linkfold.store import make_engine

    dump = tmp_path / "panel.csv"
    lines = ["visit_id,url,visited,person"]
    for i in range(700):
        url = f"https://site{i % 7}.example/story/{(i * 37) % 120}" + ("?utm_source=x" if i % 3 else "")
        if i % 50 == 0:
            url = "http://[broken"
        person = "" if i % 41 == 0 else f"person-{i % 13}"  # the unit travels in the encoded rows too
        lines.append(f"v{i},{url},2031-05-{1 + i % 28:02d}T08:00:00Z,{person}")
    dump.write_text("\n".join(lines) + "\n", encoding="utf-8")

    def load(encode: bool) -> list[tuple]:
        if not encode:
            monkeypatch.setattr(loads, "sighting_encoder", lambda: None)
            monkeypatch.setattr(loads, "raw_encoder", lambda: None)
        name = pg_server.create(template=pg_server.migrated_template())
        engine = make_engine(_with_database(PG_ADMIN_URL, name))
        try:
            summary = ingest_dump(engine, [dump], dataset="panel", key_column="visit_id", time_column="visited",
                                  unit_column="person", pseudonym_key=b"k" * 32, batch_size=64, cache_size=16)
            with engine.connect() as conn:
                rows = conn.execute(sa.text(
                    "SELECT s.line_no, s.position, s.row_key, s.seen_at, r.raw, r.reason, c.url, s.unit FROM sightings s "
                    "JOIN raw_urls r ON r.id = s.raw_url_id LEFT JOIN canonical_urls c ON c.id = r.canonical_id "
                    "ORDER BY s.line_no, s.position")).all()
                tallies = [conn.execute(sa.text(f"SELECT count(*) FROM {name}")).scalar_one()
                           for name in ("raw_urls", "canonical_urls", "rejects")]
            return [(summary.sightings, summary.new_raw_urls, summary.new_canonical_urls, tallies),
                    *[tuple(r) for r in rows]]
        finally:
            engine.dispose()
            pg_server.drop(name)

    sent_ready = _count_encoded_rows(monkeypatch)
    with_encoding = load(True)
    assert with_encoding[0][0] == 700 and len(with_encoding) == 701
    assert len({r[7] for r in with_encoding[1:]}) == 14  # 13 pseudonyms and NULL
    assert sum(sent_ready) > 350  # most sightings and every staged raw URL went as encoded bytes
    sent_ready.clear()
    assert load(False) == with_encoding
    assert not sent_ready


def test_sqlite_bulk_rows_are_stored_as_an_orm_insert_stores_them(tmp_path):
    # insert_tuples on SQLite skips the per-row statement machinery but must store the same text for
    # every column type (a time in SQLite's text form, not Python's isoformat), so reads agree.
    from linkfold.store import make_engine, upgrade

    engine = make_engine(f"sqlite:///{tmp_path / 'r.db'}")
    upgrade(engine)
    with engine.begin() as conn:
        conn.exec_driver_sql("INSERT INTO datasets (id, name, created_at) VALUES (1, 'd', '2031-05-04 00:00:00')")
        conn.exec_driver_sql("INSERT INTO dataset_files (id, dataset_id, file_name, sha256, size_bytes, format, "
                             "state, started_at) VALUES (2, 1, 'f', 'x', 0, 'csv', 'loading', '2031-05-04 00:00:00')")
        conn.exec_driver_sql("INSERT INTO raw_urls (id, raw_hash, raw, created_at) VALUES "
                             "(7, 'a', 'u', '2031-05-04 00:00:00'), (1, 'b', 'v', '2031-05-04 00:00:00'), "
                             "(2000000000, 'c', 'w', '2031-05-04 00:00:00')")
        bulk.insert_tuples(conn, t.sightings, SIGHTING_COLUMNS, ROWS[:2])
        conn.execute(t.sightings.insert(), [dict(zip(SIGHTING_COLUMNS, ROWS[2], strict=True))])
        stored = conn.exec_driver_sql("SELECT seen_at, typeof(seen_at), typeof(line_no) FROM sightings "
                                      "ORDER BY line_no").all()
        assert stored[0][0] == "2031-05-04 08:00:00.000000" and stored[1][0] is None
        assert stored[0][1:] == stored[2][1:] == ("text", "integer")
        got = conn.execute(sa.select(*[t.sightings.c[c] for c in SIGHTING_COLUMNS])
                           .order_by(t.sightings.c.line_no)).all()
        # SQLite keeps no zone: times read back naive, as for any row (utc puts UTC back).
        assert [(*r[:5], utc(r[5]), *r[6:]) for r in got] == ROWS
    engine.dispose()


def test_without_psycopgs_row_formatter_there_is_no_encoder(monkeypatch):
    # The formatter lives in a module psycopg does not document; if a release moves it, the loader must
    # fall back to formatting rows on the writer (the load test above runs that path end to end).
    monkeypatch.setattr(bulk, "_format_row_binary", None)
    assert sighting_encoder() is None and raw_encoder() is None
    with pytest.raises(ValueError, match="no binary COPY encoding"):
        bulk.BinaryRows(t.sightings, SIGHTING_COLUMNS)


@pytest.mark.postgres
def test_a_client_encoding_other_than_utf8_gets_no_encoding_ahead(pg_url, tmp_path, monkeypatch):
    # Text in a binary COPY is in the client encoding; the encoder writes UTF-8, so a connection set to
    # another encoding must take the writer's own path, and non-ASCII text must still arrive intact.
    from linkfold.ingest import ingest_dump
    from linkfold.store import make_engine

    sent_ready = _count_encoded_rows(monkeypatch)
    dump = tmp_path / "panel.csv"
    dump.write_text("id,url\n" + "".join(f"clé{i % 3},https://café.example/{i % 5}\n" for i in range(60)),
                    encoding="utf-8")
    engine = make_engine(pg_url, connect_args={"options": "-c client_encoding=LATIN1"})
    try:
        assert not sends_utf8(engine)
        ingest_dump(engine, [dump], dataset="d", key_column="id", batch_size=7)
        with engine.connect() as conn:
            keys = conn.execute(sa.text("SELECT DISTINCT row_key FROM sightings ORDER BY 1")).scalars().all()
            raws = conn.execute(sa.text("SELECT count(*) FROM raw_urls WHERE raw LIKE 'https://café.example/%'")
                                ).scalar_one()
        assert keys == ["clé0", "clé1", "clé2"] and raws == 5
        assert not sent_ready
    finally:
        engine.dispose()
