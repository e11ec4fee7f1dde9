"""Planner statistics after loads (issue 15, item 9): PostgreSQL tables are ANALYZEd at the end of a stage
that changed them a lot, so the next query is planned on what is there (a documented view join took 28 s
before and 0.9 s after). Checked on a real PostgreSQL server through its own statistics views
(``pg_stat_user_tables.analyze_count``, ``pg_class.reltuples``: PostgreSQL documentation, "The Cumulative
Statistics System" and "pg_class")."""

from __future__ import annotations

import pytest
import sqlalchemy as sa

from linkfold.ingest import ingest_dump
from linkfold.store import make_engine
from linkfold.store.stats import MIN_ROWS, refresh_statistics, tables_to_analyse


def _stats(engine, table: str) -> tuple[int, float]:
    # A connection of its own: a transaction keeps its first snapshot of the statistics views.
    with engine.connect() as conn:
        row = conn.execute(sa.text(
            "SELECT s.analyze_count, c.reltuples FROM pg_stat_user_tables s JOIN pg_class c ON c.oid = s.relid "
            "WHERE s.relname = :t AND s.schemaname = current_schema()"), {"t": table}).one()
    return int(row.analyze_count), float(row.reltuples)


@pytest.mark.postgres
def test_an_ingest_analyses_the_tables_it_filled(pg_url, tmp_path):
    engine = make_engine(pg_url)
    try:
        before_count, before_tuples = _stats(engine, "sightings")
        assert before_tuples <= 0  # never analysed: PostgreSQL 14+ says -1
        dump = tmp_path / "panel.csv"
        rows = 3 * MIN_ROWS
        dump.write_text("id,url\n" + "".join(f"{i},https://daily.example/a/{i % 1000}?utm_source=x\n"
                                             for i in range(rows)), encoding="utf-8")
        ingest_dump(engine, [dump], dataset="panel", key_column="id")
        after_count, after_tuples = _stats(engine, "sightings")
        assert after_count > before_count
        assert after_tuples == rows  # ANALYZE counts a table this small exactly
        canon_count, canon_tuples = _stats(engine, "canonical_urls")
        assert canon_count >= 1 and canon_tuples == 1000
        # A second small load changes a small share of the table: left to autovacuum.
        small = tmp_path / "more.csv"
        small.write_text("id,url\n1,https://daily.example/b/1\n", encoding="utf-8")
        ingest_dump(engine, [small], dataset="more", key_column="id")
        assert _stats(engine, "sightings")[0] == after_count
    finally:
        engine.dispose()


def test_refresh_statistics_is_a_no_op_on_sqlite(sqlite_url):
    engine = make_engine(sqlite_url)
    try:
        assert refresh_statistics(engine, ["sightings"], changed={"sightings": 10**6}) == []
    finally:
        engine.dispose()


def test_the_rule_follows_autovacuums_shape():
    rows = [("a", -1.0, 0), ("b", 100_000.0, 5_000), ("c", 100_000.0, 20_000), ("d", 0.0, 999)]
    # a: never analysed, the stage wrote 2,000 rows; b: 5% changed; c: 20% changed; d: below the floor.
    assert tables_to_analyse(rows, {"a": 2_000}) == ["a", "c"]
    assert tables_to_analyse(rows, {"b": 50_000}) == ["b", "c"]  # the stage's own count can exceed the view's
    assert tables_to_analyse(rows, {}, fraction=0.01) == ["b", "c"]
