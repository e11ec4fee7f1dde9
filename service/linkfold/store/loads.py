"""Writing one batch of a load: raw and canonical URLs, sightings and rejects.

A batch of a load is written set-wise. The raw URLs the loader has not met in an earlier batch go into a
temporary staging table (COPY on PostgreSQL, executemany on SQLite, through
:func:`linkfold.store.bulk.insert_tuples`); two ``INSERT … SELECT`` statements move them into canonical
URLs and raw URLs (``ON CONFLICT DO NOTHING``: they are shared by every dataset); the insert returns the
new ids, and a join on the unique raw hash finds those already stored. The sightings and rejects then go
straight into their tables with those ids (COPY again): no row is looked up one by one, and a raw URL the
loader already knows costs nothing. The file's resume point moves in the same transaction, which is what
lets an interrupted load resume without writing anything twice.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import sqlalchemy as sa
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.engine import Connection, Engine

from ..errors import LockHeld
from . import tables as t
from .bulk import BinaryRows, EncodedRows, insert_tuples
from .clock import now
from .lookup import ids_by_hash

UTC_TYPE = sa.DateTime(timezone=True)


# --- the staging table and one batch ----------------------------------------------------------------------
_stage_meta = sa.MetaData()
# Temporary tables are never WAL-logged and carry no index: the cheap place to COPY into. PostgreSQL
# empties them at each commit; SQLite gets an explicit DELETE.
stage_raws = sa.Table(
    "lf_stage_raws", _stage_meta,
    sa.Column("raw_hash", sa.String(64)),
    sa.Column("raw", sa.Text),
    sa.Column("raw_error", sa.String(40)),
    sa.Column("url_key", sa.String(32)),
    sa.Column("url", sa.Text),
    sa.Column("host", sa.String(255)),
    sa.Column("domain", sa.String(255)),
    sa.Column("outlet", sa.String(255)),
    sa.Column("is_article", sa.Boolean),
    prefixes=["TEMPORARY"], postgresql_on_commit="DELETE ROWS",
)
RAW_COLUMNS = tuple(c.name for c in stage_raws.columns)
# ``unit``: the keyed pseudonym, or None (linkfold/pseudonyms.py); after the raw URL so that field 6 stays it.
SIGHTING_COLUMNS = ("dataset_id", "file_id", "line_no", "position", "row_key", "seen_at", "raw_url_id", "unit")
REJECT_COLUMNS = ("dataset_id", "file_id", "line_no", "position", "reason", "detail", "excerpt", "raw_url_id")


def _stage_setup(dialect) -> str:
    create = str(sa.schema.CreateTable(stage_raws, if_not_exists=True).compile(dialect=dialect))
    if dialect.name != "postgresql":
        return create
    # Every join of _register_raws pairs a few thousand staged rows with a large table through its unique
    # index, so an index nested loop is always the right plan. The planner, with no statistics on the
    # temporary table and stale ones on tables that grow during the load, otherwise picks hash joins that
    # scan the whole registry once per batch (the load slowed as it grew).
    return f"{create}; SET LOCAL enable_hashjoin = off; SET LOCAL enable_mergejoin = off"


_STAGE_SETUP = {name: _stage_setup(d) for name, d in (("postgresql", postgresql.dialect()),
                                                     ("sqlite", sqlite.dialect()))}


@dataclass
class BatchCounts:
    rows: int = 0
    sightings: int = 0
    new_raw_urls: int = 0
    new_canonical_urls: int = 0
    rejects: int = 0
    #: Raw hash -> id of the raw URLs this batch staged (new or found), for the caller's cache once the
    #: batch is committed: an id is only certain after the commit.
    raw_ids: dict[str, int] = field(default_factory=dict)


def _insert(conn: Connection, table: sa.Table):
    stmt = (postgresql.insert if conn.dialect.name == "postgresql" else sqlite.insert)(table)
    # SQLAlchemy does not keep an INSERT's rowcount unless asked; it is how we count what was new.
    return stmt.execution_options(preserve_rowcount=True)


def write_batch(conn: Connection, *, dataset_id: int, file_id: int, ruleset_id: int | None,
                sightings: list[tuple], rejects: list[tuple], pending: Sequence[int] = (),
                raws: Sequence[Sequence[Any]] = (), known: Mapping[str, int] | None = None, row_count: int,
                lines_before: int, lines_after: int, ready: EncodedRows | None = None,
                raws_ready: EncodedRows | None = None) -> BatchCounts:
    """Write one batch inside the caller's transaction and move the file's resume point forward.

    ``sightings`` and ``rejects`` are rows in ``SIGHTING_COLUMNS`` / ``REJECT_COLUMNS`` order whose raw URL
    (field 6 of a sighting, the last of a reject) is its id or, where the caller had none, its raw hash (``pending`` lists the
    sightings that carry one). ``raws`` are the raw URLs to store for those, in ``RAW_COLUMNS`` order;
    ``known`` gives raw hash -> id for hashed rows whose raw URL the caller knows to be stored; any other
    hash not among ``raws`` is looked up (a raw URL an earlier, committed batch stored).
    On PostgreSQL, ``ready`` holds more sightings, complete (raw URL ids, not hashes) and already encoded
    for binary COPY (``sighting_encoder``), and ``raws_ready`` holds ``raws`` encoded the same way
    (``raw_encoder``): the caller's thread did that work, and this one only sends bytes.
    ``row_count`` is how many dump rows the batch came from. ``lines_before`` is the resume point this
    batch continues from: if the stored one differs, another process is loading the same file, and
    :class:`LockHeld` is raised before anything is written. The lists are completed in place.

    The raw URLs are staged and resolved set-wise; the sightings and rejects then go straight into their
    tables (COPY on PostgreSQL), since a panel repeats its URLs so much that the caller already holds the
    id of most rows' raw URL and nothing is looked up for them.
    """
    counts = BatchCounts(rows=row_count, sightings=len(sightings) + (ready.count if ready else 0),
                         rejects=len(rejects))
    f = t.dataset_files
    # The resume point and the file's counts move first, in one statement that is also the guard; the
    # counts are known before anything is written, and a failure later rolls the whole batch back.
    if conn.dialect.name == "postgresql":
        # One round trip for the guard and the staging table's set-up: the writer thread waits for the
        # interpreter after every round trip while the reading thread works. The statement is written out
        # (compiling it cost the writer about a millisecond a batch, while the database waited); only
        # integers go into it.
        sql = (f"UPDATE {f.name} SET lines_done={int(lines_after)}, rows=({f.name}.rows + {int(counts.rows)}), "
               f"sightings=({f.name}.sightings + {int(counts.sightings)}), "
               f"rejects=({f.name}.rejects + {int(counts.rejects)}) "
               f"WHERE {f.name}.id = {int(file_id)} AND {f.name}.lines_done = {int(lines_before)}")
        if raws:
            sql = f"{sql}; {_STAGE_SETUP[conn.dialect.name]}"
        moved = conn.exec_driver_sql(sql).rowcount  # the first statement's
    else:
        guard = sa.update(f).where(f.c.id == file_id, f.c.lines_done == lines_before).values(
            lines_done=lines_after, rows=f.c.rows + counts.rows, sightings=f.c.sightings + counts.sightings,
            rejects=f.c.rejects + counts.rejects)
        moved = conn.execute(guard).rowcount
        if raws:
            conn.exec_driver_sql(_STAGE_SETUP[conn.dialect.name])
    if moved != 1:
        raise LockHeld(f"dataset file {file_id} is being loaded by another process (its resume point "
                       "moved under this load); let that load finish, then run this one again")
    ids = counts.raw_ids
    if raws:
        _register_raws(conn, raws, ruleset_id=ruleset_id, counts=counts, ready=raws_ready)
    known = known or {}
    missing = {h for i in pending if (h := sightings[i][6]) not in ids and h not in known}
    missing.update(h for r in rejects if isinstance(h := r[7], str) and h not in ids and h not in known)
    found = ids_by_hash(conn, missing) if missing else {}
    for i in pending:
        s = sightings[i]
        h = s[6]
        sightings[i] = (*s[:6], ids.get(h) or known.get(h) or found[h], s[7])
    for i, r in enumerate(rejects):
        if isinstance(h := r[7], str):
            rejects[i] = (*r[:7], ids.get(h) or known.get(h) or found[h])
    # Straight into the indexed table, not through a staging table: staging first pays the same index
    # work again in the INSERT … SELECT, plus the staging COPY and a join, and with every id known here
    # there is nothing for a join to do (bench/ingest_bench.py (d): 0.9-1.05x the raw COPY baseline).
    # No ON CONFLICT (whose speculative insertion costs a good part of a load): the resume-point guard
    # above guarantees that no row after the stored resume point exists, so a conflict here would be
    # a bug, and the unique keys turn it into an error, never into a duplicate.
    insert_tuples(conn, t.sightings, SIGHTING_COLUMNS, sightings, binary=True, ready=ready)
    insert_tuples(conn, t.rejects, REJECT_COLUMNS, rejects, binary=True)
    return counts


def sends_utf8(engine: Engine) -> bool:
    """Whether ``engine``'s connections send text to PostgreSQL as UTF-8, the form :class:`BinaryRows`
    encodes it in (psycopg encodes in the client encoding, which a server or a URL may set otherwise)."""
    with engine.connect() as conn:
        return conn.connection.driver_connection.info.encoding == "utf-8"  # type: ignore[union-attr]


def sighting_encoder() -> BinaryRows | None:
    """An encoder for complete sightings (``write_batch(ready=...)``), or None where there is none."""
    return BinaryRows(t.sightings, SIGHTING_COLUMNS) if BinaryRows.available(t.sightings, SIGHTING_COLUMNS) else None


def raw_encoder() -> BinaryRows | None:
    """An encoder for staged raw URLs (``write_batch(raws_ready=...)``), or None where there is none."""
    return BinaryRows(stage_raws, RAW_COLUMNS) if BinaryRows.available(stage_raws, RAW_COLUMNS) else None


def _register_raws(conn: Connection, raws: Sequence[Sequence[Any]], *, ruleset_id: int | None,
                   counts: BatchCounts, ready: EncodedRows | None = None) -> None:
    """Store the raw URLs (and their canonical URLs) the registry may not know yet; learn their ids.
    The staging table is set up (``_STAGE_SETUP``) by the caller. ``ready``: ``raws`` already encoded."""
    if ready is not None and conn.dialect.name == "postgresql":
        insert_tuples(conn, stage_raws, RAW_COLUMNS, (), ready=ready)
    else:
        insert_tuples(conn, stage_raws, RAW_COLUMNS, raws, binary=True)
    if conn.dialect.name == "postgresql":
        # Both statements in one round trip, read back as plain tuples: this runs once per batch on the
        # writer thread, which shares the interpreter. The SQL is made once per ruleset (compiling it
        # costs milliseconds); only the ruleset's id is inlined, and the time is the server's.
        sql = _PG_REGISTER_SQL.get(ruleset_id)
        if sql is None:
            if len(_PG_REGISTER_SQL) > 64:
                _PG_REGISTER_SQL.clear()
            sql = _PG_REGISTER_SQL[ruleset_id] = "; ".join(
                str(q.compile(dialect=conn.dialect, compile_kwargs={"literal_binds": True}))
                for q in _register_statements(conn, ruleset_id, sa.func.statement_timestamp()))
        with conn.connection.driver_connection.cursor() as cur:  # type: ignore[union-attr]
            cur.execute(sql)
            counts.new_canonical_urls = max(cur.rowcount, 0)
            cur.nextset()
            inserted: Sequence[tuple[str, int]] = cur.fetchall()
    else:
        canonicals, raw_insert = _register_statements(conn, ruleset_id,
                                                      sa.bindparam("stamp", now(), type_=UTC_TYPE))
        counts.new_canonical_urls = max(conn.execute(canonicals).rowcount, 0)
        inserted = [tuple(row) for row in conn.execute(raw_insert).all()]
    counts.new_raw_urls = len(inserted)
    counts.raw_ids.update(inserted)
    if len(inserted) < len(raws):
        w, r = stage_raws, t.raw_urls
        counts.raw_ids.update(conn.execute(sa.select(w.c.raw_hash, r.c.id)
                                           .select_from(w.join(r, r.c.raw_hash == w.c.raw_hash))).all())
    if conn.dialect.name != "postgresql":
        conn.execute(sa.delete(stage_raws))


_PG_REGISTER_SQL: dict[int | None, str] = {}


def _register_statements(conn: Connection, ruleset_id: int | None, stamp: Any) -> tuple[Any, Any]:
    """The two statements that move staged raw URLs into canonical_urls and raw_urls.

    Both insert in the order of the table's unique key, canonical URLs before raw URLs: a row lock is
    taken as each row goes in, and a concurrent load that needs one of the same keys waits for it. When
    every writer takes its locks in that one order, two loads can wait for each other but never in a
    circle, so PostgreSQL never has to abort one of them as a deadlock (issue 16: two loads of
    overlapping dumps in arbitrary row order deadlocked in 4 of 4 trials; tests/test_concurrency.py)."""
    w, c, r = stage_raws, t.canonical_urls, t.raw_urls
    rs = sa.literal(ruleset_id, sa.Integer)

    # Canonical URLs, only for raw URLs the registry does not know yet: a known raw URL keeps the
    # canonical URL it has (re-canonicalisation under a new ruleset is its own stage, with a record).
    known_raw = sa.select(r.c.id).where(r.c.raw_hash == w.c.raw_hash).exists()
    canonicals = _insert(conn, c).from_select(
        ["url_key", "url", "host", "domain", "outlet", "is_article", "ruleset_id", "created_at"],
        sa.select(w.c.url_key, w.c.url, w.c.host, w.c.domain, w.c.outlet, w.c.is_article, rs, stamp)
        .where(w.c.url_key.is_not(None), ~known_raw).order_by(w.c.url_key),
    ).on_conflict_do_nothing(index_elements=["url_key"])
    # The new raw URLs say their ids as they are inserted; only those already stored (by an earlier
    # load, or a concurrent one) need the join afterwards.
    raw_insert = _insert(conn, r).from_select(
        ["raw_hash", "raw", "canonical_id", "ruleset_id", "reason", "created_at"],
        sa.select(w.c.raw_hash, w.c.raw, c.c.id, rs, w.c.raw_error, stamp)
        .select_from(w.outerjoin(c, c.c.url_key == w.c.url_key))
        .where(w.c.raw_hash.is_not(None)).order_by(w.c.raw_hash),
    ).on_conflict_do_nothing(index_elements=["raw_hash"]).returning(r.c.raw_hash, r.c.id)
    return canonicals, raw_insert


__all__ = ["RAW_COLUMNS", "REJECT_COLUMNS", "SIGHTING_COLUMNS", "BatchCounts", "raw_encoder", "sends_utf8",
           "sighting_encoder", "stage_raws", "write_batch"]
