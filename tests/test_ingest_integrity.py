"""Sightings carry no foreign keys (migration 0009), nor do raw and canonical URLs on PostgreSQL (migration
0010): the writers themselves must keep every reference whole.

Behaviour tests on both backends (invented data on reserved names): after a fresh load, a reload, an
append of an overlapping file, a load with bad rows, a second dataset sharing raw URLs, and a load whose
raw-id cache overflows, every sighting points at an existing file of its own dataset and at an existing
raw URL whose text is the one on that line of the dump; every raw URL's canonical URL and ruleset, and
every canonical URL's ruleset, exist, also after a re-canonicalisation under a new ruleset.
"""

from __future__ import annotations

import sqlalchemy as sa

from linkfold.ingest import ingest_dump
from linkfold.store import tables as t


def dangling(engine) -> dict[str, int]:
    s, f, r = t.sightings, t.dataset_files, t.raw_urls
    with engine.connect() as conn:
        def count(q) -> int:
            return int(conn.execute(q).scalar_one())
        c, rs = t.canonical_urls, t.rulesets

        def orphans(table, column, target) -> int:
            return count(sa.select(sa.func.count()).select_from(table.outerjoin(target, target.c.id == column))
                         .where(column.is_not(None), target.c.id.is_(None)))

        return {
            "raw canonical": orphans(r, r.c.canonical_id, c),
            "raw ruleset": orphans(r, r.c.ruleset_id, rs),
            "canonical ruleset": orphans(c, c.c.ruleset_id, rs),
            "canonical final": orphans(c, c.c.final_id, c.alias("fc")),  # migration 0012: no foreign key
            "file": count(sa.select(sa.func.count()).select_from(s.outerjoin(f, f.c.id == s.c.file_id))
                          .where(f.c.id.is_(None))),
            "dataset": count(sa.select(sa.func.count()).select_from(s.join(f, f.c.id == s.c.file_id))
                             .where(f.c.dataset_id != s.c.dataset_id)),
            "raw": count(sa.select(sa.func.count()).select_from(s.outerjoin(r, r.c.id == s.c.raw_url_id))
                         .where(r.c.id.is_(None))),
        }


def stored_urls(engine, dataset: str) -> list[tuple[int, str]]:
    s, f, r, d = t.sightings, t.dataset_files, t.raw_urls, t.datasets
    with engine.connect() as conn:
        q = (sa.select(s.c.line_no, r.c.raw)
             .select_from(s.join(r, r.c.id == s.c.raw_url_id).join(f, f.c.id == s.c.file_id)
                          .join(d, d.c.id == f.c.dataset_id))
             .where(d.c.name == dataset).order_by(s.c.file_id, s.c.line_no, s.c.position))
        return [(int(n), raw) for n, raw in conn.execute(q)]


def write(path, urls) -> list[tuple[int, str]]:
    path.write_text("url\n" + "".join(u + "\n" for u in urls))
    return [(i + 2, u) for i, u in enumerate(urls)]


def test_every_reference_holds_across_loads(engine, tmp_path):
    # A four-entry memo and the smallest raw-id cache: both overflow many times over.
    pool = [f"https://daily-{i % 7}.example/news/{i % 13}?utm_source=x" for i in range(40)]
    first = write(tmp_path / "a.csv", pool[:25])
    ingest_dump(engine, [tmp_path / "a.csv"], dataset="panel", batch_size=4, cache_size=4)
    ingest_dump(engine, [tmp_path / "a.csv"], dataset="panel", batch_size=4, cache_size=4)  # already loaded: nothing new
    second = write(tmp_path / "b.csv", [*pool[10:], "not a url", "https://daily-1.example/news/1"])
    ingest_dump(engine, [tmp_path / "b.csv"], dataset="panel", batch_size=3, cache_size=4)
    other = write(tmp_path / "c.csv", list(reversed(pool)))
    ingest_dump(engine, [tmp_path / "c.csv"], dataset="posts", batch_size=5, cache_size=4)

    assert not any(dangling(engine).values()), dangling(engine)
    assert stored_urls(engine, "panel") == first + second
    assert stored_urls(engine, "posts") == other
    with engine.connect() as conn:
        raws = conn.execute(sa.select(sa.func.count()).select_from(t.raw_urls)).scalar_one()
    assert raws == len(set(pool) | {"not a url", "https://daily-1.example/news/1"})  # each once, whatever the batches


def test_a_raw_url_stored_by_an_earlier_process_is_found_not_duplicated(engine, tmp_path):
    # Each ingest_dump call starts with an empty raw-id cache, like a new process: the ids of raw URLs
    # an earlier load stored come from the database.
    urls = [f"https://valley-{i}.test/story/{i}" for i in range(12)]
    write(tmp_path / "a.csv", urls)
    ingest_dump(engine, [tmp_path / "a.csv"], dataset="one", batch_size=5)
    expected = write(tmp_path / "b.csv", urls[::-1])
    ingest_dump(engine, [tmp_path / "b.csv"], dataset="two", batch_size=5)
    assert stored_urls(engine, "two") == expected
    assert not any(dangling(engine).values()), dangling(engine)


def test_binary_copy_types_follow_the_columns_and_fall_back_to_text():
    from linkfold.store.bulk import _binary_types

    assert _binary_types(t.sightings, ("dataset_id", "file_id", "line_no", "position", "row_key", "seen_at",
                                       "raw_url_id")) == ["int4", "int4", "int8", "int4", "text", "timestamptz",
                                                          "int8"]  # raw URL ids are 64-bit (0023)
    # A JSON column has no binary entry: the whole COPY goes in text format, which converts values.
    assert _binary_types(t.dataset_files, ("id", "options")) is None


def test_references_hold_after_a_recanonicalisation(engine, tmp_path):
    from linkfold.canon import parse_rules
    from linkfold.ingest.recanon import recanonicalize
    from linkfold.store.rulesets import store_ruleset

    urls = [f"https://www.harbour-{i % 3}.example/story/{i}?utm_source=x&ref=side" for i in range(20)]
    write(tmp_path / "a.csv", urls)
    ingest_dump(engine, [tmp_path / "a.csv"], dataset="panel", batch_size=6)
    with engine.begin() as conn:  # a new ruleset: more canonical URLs, raw URLs move to them
        store_ruleset(conn, parse_rules("name = 'lab'\n[steps]\nhost_prefixes = false\n"))  # www. kept
    summary = recanonicalize(engine, batch_size=7)
    assert summary.moved > 0
    assert not any(dangling(engine).values()), dangling(engine)
