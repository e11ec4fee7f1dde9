"""Row identifiers past 2**31: a registry that grows beyond 32-bit ids keeps loading, looking up and
linking (migration 0023). The sequences (PostgreSQL) and the row ids (SQLite) are moved past 2**31 first,
then the real stages run on top: the binary COPY of a load, a lookup, and the view."""

from __future__ import annotations

import sqlalchemy as sa

from linkfold.ingest import ingest_dump, lookup
from linkfold.store import tables as t

BEYOND = 2**31 + 1_000  # past the largest 32-bit signed integer, 2**31 - 1

PANEL = (
    "visit_id,url,visited\n"
    "v1,https://riverton-daily.example/local/2031/bridge?utm_source=feed,2031-05-04T08:00:00Z\n"
    "v2,https://riverton-daily.example/local/2031/bridge,2031-05-04T09:00:00Z\n"
    "v3,https://lakeside-wire.example/wire/77,2031-05-04T09:30:00Z\n"
)

GROWING = ("raw_urls", "canonical_urls", "rejects", "links", "pages", "documents", "id_events")


def _move_ids_past_32_bits(engine: sa.Engine) -> None:
    with engine.begin() as conn:
        if engine.dialect.name == "postgresql":
            for table in GROWING:
                conn.execute(sa.text("SELECT setval(pg_get_serial_sequence(:t, 'id'), :v)"),
                             {"t": table, "v": BEYOND})
        else:
            # SQLite gives a new row the largest row id + 1: one canonical URL past 2**31 moves the rest.
            conn.execute(sa.text(
                "INSERT INTO canonical_urls (id, url, url_key, host, domain, outlet, is_article, created_at) "
                "VALUES (:id, 'https://placeholder.test/', 'aaaaaaaaaaaaaaaaaaaaaaaa', 'placeholder.test', "
                "'placeholder.test', 'placeholder.test', 0, CURRENT_TIMESTAMP)"), {"id": BEYOND})


def test_ids_past_32_bits_load_and_look_up(engine, tmp_path) -> None:
    _move_ids_past_32_bits(engine)
    path = tmp_path / "panel.csv"
    path.write_text(PANEL, encoding="utf-8")
    summary = ingest_dump(engine, [path], dataset="panel", key_column="visit_id", time_column="visited")
    assert (summary.rows, summary.sightings) == (3, 3)
    with engine.connect() as conn:
        ids = conn.execute(sa.select(t.canonical_urls.c.id, t.canonical_urls.c.url)
                           .where(t.canonical_urls.c.url.like("%riverton-daily%"))).all()
        assert ids and all(i > 2**31 for i, _ in ids)
        if engine.dialect.name == "postgresql":
            raw_ids = conn.execute(sa.select(t.raw_urls.c.id)).scalars().all()
            assert raw_ids and min(raw_ids) > 2**31
        sightings = conn.execute(sa.text("SELECT count(*) FROM sighting_links")).scalar_one()
        assert sightings == 3
    (answer,) = list(lookup(engine, ["https://riverton-daily.example/local/2031/bridge?utm_source=x"]))
    assert answer["seen"] is True and answer["sightings"] == 2


def test_identifier_columns_are_64_bit_on_postgresql(engine) -> None:
    if engine.dialect.name != "postgresql":
        return  # SQLite's INTEGER is 64-bit whatever it is declared as
    with engine.connect() as conn:
        rows = conn.execute(sa.text(
            "SELECT table_name, column_name, data_type FROM information_schema.columns "
            "WHERE table_schema = current_schema() AND table_name IN ('raw_urls', 'canonical_urls', 'documents') "
            "AND column_name IN ('id', 'canonical_id', 'final_id', 'page_id')")).all()
        assert rows and {r.data_type for r in rows} == {"bigint"}
        seqs = conn.execute(sa.text(
            "SELECT sequencename, data_type FROM pg_sequences WHERE sequencename IN "
            "('raw_urls_id_seq', 'canonical_urls_id_seq', 'documents_id_seq')")).all()
        assert len(seqs) == 3 and {s.data_type for s in seqs} == {"bigint"}
