"""Queries and writes of ingest, lookup and export: datasets, their files, raw and canonical URLs,
sightings and rejects.

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

from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

import sqlalchemy as sa
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.engine import Connection, Engine

from ..errors import LockHeld, NotFound
from . import tables as t
from .bulk import BinaryRows, EncodedRows, insert_tuples
from .finals import FINAL_COLUMNS, FinalsJoin

UTC_TYPE = sa.DateTime(timezone=True)
_IN_CHUNK = 500  # ids per IN (…) list: well under SQLite's default limit of 999 bound parameters


def utc(value: datetime | None) -> datetime | None:
    """SQLite hands times back without a zone; every time we store is UTC, so say so."""
    if value is None or value.tzinfo is not None:
        return value
    return value.replace(tzinfo=UTC)


def now() -> datetime:
    return datetime.now(UTC)


# --- datasets and files ---------------------------------------------------------------------------------
def find_dataset(conn: Connection, name: str) -> dict[str, Any] | None:
    row = conn.execute(sa.select(t.datasets).where(t.datasets.c.name == name)).mappings().first()
    return dict(row) if row else None


def get_dataset(conn: Connection, name: str) -> dict[str, Any]:
    """The dataset's row by name; ``NotFound`` naming the datasets there are when there is none."""
    found = find_dataset(conn, name)
    if found is None:
        known = conn.execute(sa.select(t.datasets.c.name).order_by(t.datasets.c.name).limit(20)).scalars().all()
        hint = f"datasets: {', '.join(known)}" if known else "no dataset is loaded yet"
        raise NotFound(f"no dataset named {name!r}", hint=hint)
    return found


def ensure_dataset(conn: Connection, name: str, *, description: str | None, ruleset_id: int) -> int:
    """The id of dataset ``name``, created if new. A description given again replaces the stored one."""
    found = find_dataset(conn, name)
    if found is None:
        try:
            with conn.begin_nested():
                return int(conn.execute(sa.insert(t.datasets).values(
                    name=name, description=description, ruleset_id=ruleset_id, created_at=now())
                    .returning(t.datasets.c.id)).scalar_one())
        except sa.exc.IntegrityError:
            found = find_dataset(conn, name)  # created by a concurrent load a moment ago
            assert found is not None
    if description is not None and description != found["description"]:
        conn.execute(sa.update(t.datasets).where(t.datasets.c.id == found["id"])
                     .values(description=description))
    return int(found["id"])


def find_file(conn: Connection, dataset_id: int, sha256: str) -> dict[str, Any] | None:
    row = conn.execute(sa.select(t.dataset_files).where(t.dataset_files.c.dataset_id == dataset_id,
                                                        t.dataset_files.c.sha256 == sha256)).mappings().first()
    return dict(row) if row else None


def create_file(conn: Connection, *, dataset_id: int, file_name: str, sha256: str, size_bytes: int,
                fmt: str, options: dict[str, Any], ruleset_id: int, run_id: int | None) -> dict[str, Any]:
    """Register a file as ``loading``; if a concurrent load registered it first, return that row."""
    try:
        with conn.begin_nested():
            conn.execute(sa.insert(t.dataset_files).values(
                dataset_id=dataset_id, file_name=file_name, sha256=sha256, size_bytes=size_bytes,
                format=fmt, options=options, status="loading", ruleset_id=ruleset_id, run_id=run_id,
                rows=0, sightings=0, rejects=0, lines_done=0, started_at=now()))
    except sa.exc.IntegrityError:
        pass
    found = find_file(conn, dataset_id, sha256)
    assert found is not None
    return found


def claim_file(conn: Connection, file_id: int, run_id: int | None) -> None:
    """Record that ``run_id`` (re)started loading the file."""
    conn.execute(sa.update(t.dataset_files).where(t.dataset_files.c.id == file_id).values(run_id=run_id))


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
        ["raw_hash", "raw", "canonical_id", "ruleset_id", "error", "created_at"],
        sa.select(w.c.raw_hash, w.c.raw, c.c.id, rs, w.c.raw_error, stamp)
        .select_from(w.outerjoin(c, c.c.url_key == w.c.url_key))
        .where(w.c.raw_hash.is_not(None)).order_by(w.c.raw_hash),
    ).on_conflict_do_nothing(index_elements=["raw_hash"]).returning(r.c.raw_hash, r.c.id)
    return canonicals, raw_insert


def complete_file(conn: Connection, file_id: int, *, lines_done: int) -> None:
    conn.execute(sa.update(t.dataset_files).where(t.dataset_files.c.id == file_id).values(
        status="complete", loaded_at=now(), lines_done=lines_done))


def count_unfinished_files(conn: Connection) -> int:
    """Dataset files whose load has not completed (interrupted, or running now): a new load resumes them."""
    f = t.dataset_files
    return int(conn.execute(sa.select(sa.func.count()).select_from(f).where(f.c.status != "complete")).scalar_one())


def file_reject_counts(conn: Connection, file_id: int) -> dict[str, int]:
    rows = conn.execute(sa.select(t.rejects.c.reason, sa.func.count())
                        .where(t.rejects.c.file_id == file_id).group_by(t.rejects.c.reason))
    return {reason: int(n) for reason, n in rows}


# --- reading: datasets, rejects, the linkage table --------------------------------------------------------
def list_datasets(conn: Connection) -> list[dict[str, Any]]:
    """Every dataset with its file, row, sighting and reject counts (kept per file during loads)."""
    f = t.dataset_files
    files = (sa.select(f.c.dataset_id,
                       sa.func.count().label("files"),
                       sa.func.sum(sa.case((f.c.status == "complete", 0), else_=1)).label("files_loading"),
                       sa.func.sum(f.c.rows).label("rows"),
                       sa.func.sum(f.c.sightings).label("sightings"),
                       sa.func.sum(f.c.rejects).label("rejects"),
                       sa.func.max(f.c.loaded_at).label("last_loaded_at"))
             .group_by(f.c.dataset_id).subquery())
    d = t.datasets
    q = (sa.select(d.c.name, d.c.description, d.c.ruleset_id, d.c.created_at, files)
         .select_from(d.outerjoin(files, files.c.dataset_id == d.c.id)).order_by(d.c.name))
    out = []
    for row in conn.execute(q).mappings():
        out.append({
            "dataset": row["name"],
            "description": row["description"],
            "files": int(row["files"] or 0),
            "files_loading": int(row["files_loading"] or 0),
            "rows": int(row["rows"] or 0),
            "sightings": int(row["sightings"] or 0),
            "rejects": int(row["rejects"] or 0),
            "ruleset": row["ruleset_id"],
            "created_at": utc(row["created_at"]),
            "last_loaded_at": utc(row["last_loaded_at"]),
        })
    return out


def dataset_files(conn: Connection, dataset_id: int) -> list[dict[str, Any]]:
    """The dataset's files as loaded (rows of ``dataset_files``), in the order they were first loaded."""
    rows = conn.execute(sa.select(t.dataset_files).where(t.dataset_files.c.dataset_id == dataset_id)
                        .order_by(t.dataset_files.c.id)).mappings()
    return [dict(r) for r in rows]


def iter_rejects(conn: Connection, dataset_id: int, *, reason: str | None = None,
                 limit: int | None = None) -> Iterator[dict[str, Any]]:
    """The dataset's rejects in file and line order (optionally of one reason): file, line, position,
    reason, detail and the excerpt kept (or the raw URL of a row whose URL was refused)."""
    j, f, r = t.rejects, t.dataset_files, t.raw_urls
    q = (sa.select(f.c.file_name, j.c.line_no, j.c.position, j.c.reason, j.c.detail, j.c.excerpt,
                   r.c.raw.label("raw_url"))
         .select_from(j.join(f, f.c.id == j.c.file_id).outerjoin(r, r.c.id == j.c.raw_url_id))
         .where(j.c.dataset_id == dataset_id)
         .order_by(j.c.file_id, j.c.line_no, j.c.position))
    if reason is not None:
        q = q.where(j.c.reason == reason)
    if limit is not None:
        q = q.limit(limit)
    for row in conn.execute(q.execution_options(yield_per=2000)).mappings():
        yield {"file": row["file_name"], "line": int(row["line_no"]), "position": int(row["position"]),
               "reason": row["reason"], "detail": row["detail"],
               "excerpt": row["excerpt"] if row["excerpt"] is not None else row["raw_url"]}


def reject_totals(conn: Connection, dataset_id: int) -> dict[str, int]:
    """The dataset's rejects counted by reason, reasons in order."""
    rows = conn.execute(sa.select(t.rejects.c.reason, sa.func.count())
                        .where(t.rejects.c.dataset_id == dataset_id).group_by(t.rejects.c.reason)
                        .order_by(t.rejects.c.reason))
    return {reason: int(n) for reason, n in rows}


LINK_COLUMNS = ("dataset", "file", "line_no", "position", "row_key", "seen_at", "raw_url", "canonical_url",
                "url_key", "domain", "outlet", "article_id", "story_id", *FINAL_COLUMNS)


def iter_links(conn: Connection, dataset: dict[str, Any], *, yield_per: int = 10000) -> Iterator[tuple]:
    """The linkage table of one dataset, one tuple per sighting in ``LINK_COLUMNS`` order, file by file
    and in line order (each file's rows come off the unique (file, line, position) index in order)."""
    s, r, c = t.sightings, t.raw_urls, t.canonical_urls
    fj = FinalsJoin.of(c)
    am, sm = t.cluster_members.alias("am"), t.cluster_members.alias("sm")
    for file in dataset_files(conn, dataset["id"]):
        q = (sa.select(s.c.line_no, s.c.position, s.c.row_key, s.c.seen_at, r.c.raw, c.c.url, c.c.url_key,
                       c.c.domain, c.c.outlet, am.c.cluster_id, sm.c.cluster_id.label("story_id"),
                       *fj.columns())
             .select_from(fj.join(s.join(r, r.c.id == s.c.raw_url_id).outerjoin(c, c.c.id == r.c.canonical_id))
                          .outerjoin(am, sa.and_(am.c.canonical_id == c.c.id, am.c.level == "article"))
                          .outerjoin(sm, sa.and_(sm.c.canonical_id == c.c.id, sm.c.level == "story")))
             .where(s.c.file_id == file["id"])
             .order_by(s.c.line_no, s.c.position))
        result = conn.execute(q.execution_options(yield_per=yield_per))
        name, fname = dataset["name"], file["file_name"]
        for (line_no, position, row_key, seen_at, raw, url, key, domain, outlet, article_id, story_id,
             *finals) in result:
            # article_id and story_id stay empty until the dedupe stage assigns them; the final columns
            # until a short link is followed (store/finals.py).
            yield (name, fname, int(line_no), int(position), row_key, utc(seen_at), raw, url, key, domain,
                   outlet, article_id, story_id, *finals)


# --- lookup -----------------------------------------------------------------------------------------------
def _chunks(items: Sequence[str]) -> Iterator[Sequence[str]]:
    for i in range(0, len(items), _IN_CHUNK):
        yield items[i:i + _IN_CHUNK]


def ids_by_hash(conn: Connection, hashes: Iterable[str]) -> dict[str, int]:
    """Raw hash -> raw URL id for the stored ones among ``hashes``."""
    r = t.raw_urls
    out: dict[str, int] = {}
    for part in _chunks(sorted(hashes)):
        out.update(conn.execute(sa.select(r.c.raw_hash, r.c.id).where(r.c.raw_hash.in_(part))).all())
    return out


def canonicals_by_key(conn: Connection, keys: Sequence[str]) -> dict[str, dict[str, Any]]:
    """Known canonical URLs by url key (id, url key, URL, host, domain, outlet); unknown keys are absent."""
    c = t.canonical_urls
    out: dict[str, dict[str, Any]] = {}
    for part in _chunks(list(dict.fromkeys(keys))):
        for row in conn.execute(sa.select(c.c.id, c.c.url_key, c.c.url, c.c.host, c.c.domain, c.c.outlet)
                                .where(c.c.url_key.in_(part))).mappings():
            out[row["url_key"]] = dict(row)
    return out


def raws_by_hash(conn: Connection, hashes: Sequence[str]) -> dict[str, dict[str, Any]]:
    """Known raw URLs by hash, with the canonical URL each is mapped to (if any)."""
    r, c = t.raw_urls, t.canonical_urls
    out: dict[str, dict[str, Any]] = {}
    for part in _chunks(list(dict.fromkeys(hashes))):
        q = (sa.select(r.c.raw_hash, r.c.error, c.c.id, c.c.url_key, c.c.url, c.c.host, c.c.domain,
                       c.c.outlet)
             .select_from(r.outerjoin(c, c.c.id == r.c.canonical_id)).where(r.c.raw_hash.in_(part)))
        for row in conn.execute(q).mappings():
            out[row["raw_hash"]] = dict(row)
    return out


def sighting_counts(conn: Connection, canonical_ids: Sequence[int]) -> dict[int, tuple[int, int]]:
    """(sightings, datasets) per canonical URL id, over every raw URL that maps to it."""
    r, s = t.raw_urls, t.sightings
    out: dict[int, tuple[int, int]] = {}
    ids = list(dict.fromkeys(canonical_ids))
    for i in range(0, len(ids), _IN_CHUNK):
        part = ids[i:i + _IN_CHUNK]
        q = (sa.select(r.c.canonical_id, sa.func.count(s.c.id), sa.func.count(sa.distinct(s.c.dataset_id)))
             .select_from(r.join(s, s.c.raw_url_id == r.c.id))
             .where(r.c.canonical_id.in_(part)).group_by(r.c.canonical_id))
        for cid, n, nd in conn.execute(q):
            out[int(cid)] = (int(n), int(nd))
    return out


def raw_sighting_counts(conn: Connection, hashes: Sequence[str]) -> dict[str, tuple[int, int]]:
    """(sightings, datasets) per raw URL hash: for raw URLs with no canonical URL (unparsable ones)."""
    r, s = t.raw_urls, t.sightings
    out: dict[str, tuple[int, int]] = {}
    for part in _chunks(list(dict.fromkeys(hashes))):
        q = (sa.select(r.c.raw_hash, sa.func.count(s.c.id), sa.func.count(sa.distinct(s.c.dataset_id)))
             .select_from(r.join(s, s.c.raw_url_id == r.c.id))
             .where(r.c.raw_hash.in_(part)).group_by(r.c.raw_hash))
        for h, n, nd in conn.execute(q):
            out[h] = (int(n), int(nd))
    return out


__all__ = [
    "LINK_COLUMNS",
    "RAW_COLUMNS",
    "REJECT_COLUMNS",
    "SIGHTING_COLUMNS",
    "BatchCounts",
    "canonicals_by_key",
    "claim_file",
    "complete_file",
    "create_file",
    "dataset_files",
    "ensure_dataset",
    "file_reject_counts",
    "find_dataset",
    "find_file",
    "get_dataset",
    "ids_by_hash",
    "iter_links",
    "iter_rejects",
    "list_datasets",
    "raw_encoder",
    "raw_sighting_counts",
    "raws_by_hash",
    "reject_totals",
    "sends_utf8",
    "sighting_counts",
    "sighting_encoder",
    "utc",
    "write_batch",
]
