"""``ingest_dump``: load dump files into a dataset with provenance, in resumable batches.

Order of work, chosen so that bad input costs nothing:

1. every file is checked before anything is written: it exists, its format is known, it is hashed, and
   its named columns are present (a missing column fails here, naming the columns found);
2. the ruleset is resolved (and stored if new), the dataset and the file's row are registered;
3. rows are read, canonicalised and written one batch per transaction; each batch moves the file's
   resume point (``lines_done``) in the same transaction, so an interruption keeps whole batches only;
4. the last batch marks the file complete. Loading a complete file again adds nothing; loading a file
   whose load was interrupted resumes after its resume point. Nothing after the resume point can be
   stored (it moves with the rows), so a resumed load never writes a row twice; the unique keys of
   sightings and rejects would turn a bug that tried into an error, never into a duplicate.

Batches are written on a writer thread with its own connection (``writer.BatchWriter``), overlapping
the database's work with the reading of the next batch.
"""

from __future__ import annotations

import logging
import time
from collections import ChainMap, Counter
from collections.abc import Sequence
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy.engine import Connection, Engine

from ..canon import Canonicaliser, Ruleset, load_rules
from ..errors import ConfigError, InputError
from ..inputs import (
    DEFAULT_MAX_LINE_BYTES,
    DumpFormat,
    DumpReader,
    FileFacts,
    ReadOptions,
    RowBlock,
    inspect_file,
    open_binary,
    parse_format,
    physical_lines,
)
from ..progress import SILENT, Progress
from ..pseudonyms import SCHEME, Pseudonymiser
from ..settings import Settings
from ..store import loads
from ..store.bulk import EncodedRows
from ..store.clock import now, utc
from ..store.datasets import (
    claim_file,
    complete_file,
    count_unfinished_files,
    create_file,
    ensure_dataset,
    find_file,
)
from ..store.loads import BatchCounts, sends_utf8
from ..store.migrate import require_schema
from ..store.pseudonym_keys import check_key
from ..store.rulesets import get_ruleset, latest_ruleset, store_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics
from .rows import Batch, RawIds
from .summary import FileOutcome, FileSummary, IngestSummary
from .writer import BatchWriter

log = logging.getLogger("linkfold")

DEFAULT_BATCH_SIZE = 20000

#: The run log's name of this stage.
STAGE = "ingest"
#: Raw URL ids kept between batches (``rows.RawIds``: raw text -> id), per entry of the canonical-form
#: memo (``cache_size``), per generation (two at most). The ids are what most rows need, and an entry
#: costs about a quarter of a memo entry; the bound keeps the load's memory flat once the caches are full.
RAW_IDS_PER_MEMO_ENTRY = 4


@dataclass(frozen=True)
class _Plan:
    path: Path
    facts: FileFacts
    options: ReadOptions

    @property
    def name(self) -> str:
        # Only the file's own name is kept: a full path says whose machine and folders it came from.
        return self.path.name

    def options_record(self) -> dict[str, Any]:
        o = self.options
        record = {"format": o.fmt.value, "url_columns": list(o.url_columns), "key_column": o.key_column,
                  "time_column": o.time_column, "gzip": self.facts.gzipped, "max_line_bytes": o.max_line_bytes}
        if o.unit_column is not None:
            record["unit_column"] = o.unit_column  # the column's name only, never a value
        return record


def _same_reading(stored: dict[str, Any] | None, plan: _Plan) -> bool:
    """Whether a resumed load reads the file the way the interrupted one did (same rows, same positions)."""
    if not stored:
        return False
    now = plan.options_record()
    return all(stored.get(k) == now.get(k) for k in ("format", "url_columns", "key_column", "time_column",
                                                      "unit_column"))


def _columns(value: str | Sequence[str] | None) -> tuple[str, ...]:
    if value is None:
        return ()
    if isinstance(value, str):
        return (value,)
    return tuple(value)


def plan_file(path: str | Path, *, fmt: str | DumpFormat | None = None, url_column: str | Sequence[str] | None,
              key_column: str | None, time_column: str | None, unit_column: str | None = None,
              max_line_bytes: int = DEFAULT_MAX_LINE_BYTES) -> _Plan:
    """Check one file as far as possible without writing: format, digest, columns."""
    p = Path(path)
    dump_format = parse_format(fmt, p)
    facts = inspect_file(p)
    options = ReadOptions(fmt=dump_format, url_columns=_columns(url_column), key_column=key_column,
                          time_column=time_column, unit_column=unit_column, max_line_bytes=max_line_bytes)
    if facts.empty:
        return _Plan(p, facts, options)  # nothing to check: an empty file is one outcome in every format
    with closing(open_binary(p, facts.gzipped)) as stream:
        DumpReader(physical_lines(stream.binary, max_line_bytes), options, name=str(p)).check()
    return _Plan(p, facts, options)


def _resolve_ruleset(conn: Connection, ruleset: int | str | Path | Ruleset | None) -> tuple[int, Ruleset]:
    if ruleset is None:
        return latest_ruleset(conn)
    if isinstance(ruleset, Ruleset):
        return store_ruleset(conn, ruleset), ruleset
    if isinstance(ruleset, int) or (isinstance(ruleset, str) and ruleset.isdigit()):
        version = int(ruleset)
        return version, get_ruleset(conn, version)
    rules = load_rules(Path(ruleset))
    return store_ruleset(conn, rules), rules


def count_pending(engine: Engine, *, settings: Settings | None = None) -> int:
    """Files whose load was interrupted: loading the same file into the same dataset again resumes it.

    An ingest's work is otherwise the files it is given; nothing else in the registry waits for it.
    """
    with engine.connect() as conn:
        return count_unfinished_files(conn)


def ingest_dump(engine: Engine, paths: Sequence[str | Path], *, dataset: str,
                fmt: str | DumpFormat | None = None, url_column: str | Sequence[str] | None = None,
                key_column: str | None = None, time_column: str | None = None, unit_column: str | None = None,
                pseudonym_key: bytes | None = None,
                ruleset: int | str | Path | Ruleset | None = None, description: str | None = None,
                batch_size: int = DEFAULT_BATCH_SIZE, max_line_bytes: int = DEFAULT_MAX_LINE_BYTES,
                cache_size: int = 65536, progress: Progress = SILENT,
                parent_run: int | None = None) -> IngestSummary:
    """Load dump files into ``dataset``; return what was added.

    ``url_column`` is a column name (CSV/TSV) or dotted path (JSON lines; see ``linkfold.inputs.paths``),
    or several of them; ``ruleset`` is a stored version, a rules file, a :class:`Ruleset`, or ``None``
    for the newest stored one. ``unit_column`` (a column or path, like ``key_column``) names the person
    or account of each row, stored only as its HMAC-SHA256 pseudonym under ``pseudonym_key``
    (``linkfold.pseudonyms``; needed with a unit column, refused before anything is written without one,
    and refused when the registry's units were pseudonymised under another key). Raises ``InputError`` (and its subclasses) before writing anything when a
    file cannot be read as asked; single bad rows never raise, they become rejects. ``parent_run`` is the
    run this one is a step of (a job's), recorded as its parent.
    """
    require_schema(engine)
    name = (dataset or "").strip()
    if not name:
        raise ConfigError("a dataset needs a name (--dataset NAME)")
    if len(name) > 200:
        raise ConfigError(f"dataset name is {len(name)} characters long; the limit is 200")
    if batch_size <= 0:
        raise ConfigError("batch_size must be a positive integer")
    if not paths:
        raise InputError("no file to ingest")
    units: Pseudonymiser | None = None
    if unit_column is not None:
        if not unit_column.strip():
            raise ConfigError("--unit-column needs a column name or path")
        others = [("--key-column", key_column), ("--time-column", time_column),
                  *(("--url-column", u) for u in _columns(url_column) or ("url",))]
        clash = [option for option, col in others if col == unit_column]
        if clash:
            # The key and the URL are stored as they are: the unit's column among them would store the raw ID.
            raise ConfigError(f"--unit-column {unit_column!r} is also given as {clash[0]}; a unit column is "
                              "stored only as a pseudonym, so it cannot be a key, time or URL column too")
        if not pseudonym_key:
            raise ConfigError("a load with --unit-column needs the lab's pseudonym key, and none is set",
                              hint="set pseudonym_key (LINKFOLD_PSEUDONYM_KEY) or pseudonym_key_file; "
                                   "see docs/exposure.md")
        units = Pseudonymiser(pseudonym_key)
    plans = [plan_file(p, fmt=fmt, url_column=url_column, key_column=key_column, time_column=time_column,
                       unit_column=unit_column, max_line_bytes=max_line_bytes) for p in paths]

    with engine.connect() as conn:
        if units is not None:
            with conn.begin():
                check_key(conn, scheme=SCHEME, fingerprint=units.fingerprint)
        with conn.begin():
            version, rules = _resolve_ruleset(conn, ruleset)
        summary = IngestSummary(dataset=name, ruleset_version=version)
        canonicalisers: dict[int, Canonicaliser] = {}
        raw_ids = RawIds(RAW_IDS_PER_MEMO_ENTRY * cache_size)  # shared by the files, as raw URLs are
        with recording_run(engine, STAGE, parent_id=parent_run) as run:
            summary.run_id = run.id
            with conn.begin():
                dataset_id = ensure_dataset(conn, name, description=description, ruleset_id=version)
            for plan in plans:
                with conn.begin():
                    stored = find_file(conn, dataset_id, plan.facts.sha256)
                    if stored is not None and stored["state"] == "complete":
                        log.info("%s is already loaded into %s; skipping it", plan.name, name)
                        summary.files.append(FileSummary(
                            plan.name, plan.facts.sha256, FileOutcome.ALREADY_LOADED,
                            loaded_at=utc(stored["loaded_at"])))
                        continue
                    if stored is None:
                        stored = create_file(
                            conn, dataset_id=dataset_id, file_name=plan.name, sha256=plan.facts.sha256,
                            size_bytes=plan.facts.size_bytes, fmt=plan.options.fmt.value,
                            options=plan.options_record(), ruleset_id=version, run_id=run.id)
                    else:
                        _check_resume(stored, plan, version, explicit=ruleset is not None)
                        claim_file(conn, stored["id"], run.id)
                    if plan.facts.empty:
                        complete_file(conn, stored["id"], lines_done=plan.facts.lines)
                if plan.facts.empty:
                    # CSV without a header, JSON lines without a line, an empty gzip, a blank list: one
                    # outcome, recorded as loaded (a second load says so), with nothing to read.
                    log.info("%s is empty; nothing to load from it", plan.name)
                    summary.files.append(FileSummary(plan.name, plan.facts.sha256, FileOutcome.EMPTY,
                                                     blank_lines=plan.facts.lines, loaded_at=now()))
                    run.counts = summary.as_dict()
                    continue
                file_version = int(stored["ruleset_id"] or version)
                if file_version not in canonicalisers:
                    file_rules = rules
                    if file_version != version:
                        with conn.begin():
                            file_rules = get_ruleset(conn, file_version)
                    # The batch's memo is the load's cache of canonical forms (cache_size entries); the
                    # canonicaliser's own only needs to catch what the memo has just dropped.
                    canonicalisers[file_version] = Canonicaliser(file_rules, cache_size=4096)
                result = _load_file(engine, plan, stored, dataset_id=dataset_id, ruleset_id=file_version,
                                    canon=canonicalisers[file_version], batch_size=batch_size,
                                    progress=progress, raw_ids=raw_ids, memo_size=cache_size, units=units)
                summary.files.append(result)
                run.counts = summary.as_dict()
            run.counts = summary.as_dict()
    # A first load can multiply a table's size: plan the next queries on what is there now.
    refresh_statistics(engine, ["dataset_files"], changed={
        "sightings": summary.sightings, "raw_urls": summary.new_raw_urls,
        "canonical_urls": summary.new_canonical_urls, "rejects": sum(summary.rejects.values())})
    return summary


def _check_resume(stored: dict[str, Any], plan: _Plan, version: int, *, explicit: bool) -> None:
    if not _same_reading(stored["options"], plan):
        raise InputError(f"{plan.name}: an interrupted load of this file into the dataset read it with "
                         f"options {stored['options']}; resume it with the same --format, --url-column, "
                         "--key-column, --time-column and --unit-column")
    if explicit and stored["ruleset_id"] is not None and int(stored["ruleset_id"]) != version:
        raise InputError(f"{plan.name}: the interrupted load of this file used ruleset version "
                         f"{stored['ruleset_id']}; resume it under that version (omit --ruleset), so that "
                         "one file is never canonicalised under two rulesets")


@dataclass
class _Job:
    sightings: list[tuple]
    rejects: list[tuple]
    pending: list[int]
    raws: list[tuple]
    known: dict[str, int]
    row_count: int
    lines_after: int
    reasons: Counter[str]
    no_url: int = 0
    final: bool = False
    ready: EncodedRows | None = None  # complete sightings, encoded for COPY (PostgreSQL)
    raws_ready: EncodedRows | None = None  # ``raws``, encoded for COPY (PostgreSQL)


def _resolve(job: _Job, sightings: list[tuple], recent: list[dict[str, int]]) -> list[int]:
    """Give the job's hashed sightings (in ``sightings``, a copy of the job's) the ids the writer already
    knows (plain dict lookups, not through ``write_batch``'s general mapping); return the indexes of
    those still hashed."""
    here, newer, older = job.known.get, recent[0].get, recent[1].get
    left = []
    for i in job.pending:
        s = sightings[i]
        h = s[6]
        rid = here(h) or newer(h) or older(h)  # ids start at 1
        if rid is None:
            left.append(i)
        else:
            sightings[i] = (s[0], s[1], s[2], s[3], s[4], s[5], rid, s[7])
    return left


def _load_file(engine: Engine, plan: _Plan, stored: dict[str, Any], *, dataset_id: int, ruleset_id: int,
               canon: Canonicaliser, batch_size: int, progress: Progress, raw_ids: RawIds,
               memo_size: int, units: Pseudonymiser | None = None) -> FileSummary:
    resume_after = int(stored["lines_done"] or 0)
    outcome = FileOutcome.RESUMED if resume_after else FileOutcome.LOADED
    summary = FileSummary(plan.name, plan.facts.sha256, outcome, resumed_after_line=resume_after)
    started = time.monotonic()
    if resume_after:
        log.info("%s: resuming an interrupted load after line %d", plan.name, resume_after)
    state = {"lines_done": resume_after, "reported": 0}

    # Raw hash -> id of what the last batches staged (writer thread only), in two generations that take
    # turns (dropping the older costs nothing): a later batch read before those were committed refers to
    # them by hash, and finds them here rather than by a query.
    recent: list[dict[str, int]] = [{}, {}]  # newer, older

    def write(conn: Connection, job: _Job) -> BatchCounts:
        # Runs on the writer thread, inside one transaction per batch, and again from the same job if that
        # transaction loses to a concurrent writer: write_batch completes the lists it is given in place,
        # so it gets copies (a list copy is microseconds a batch), and nothing learnt here is kept before
        # the commit.
        sightings, rejects = list(job.sightings), list(job.rejects)
        pending = _resolve(job, sightings, recent)
        counts = loads.write_batch(conn, dataset_id=dataset_id, file_id=stored["id"], ruleset_id=ruleset_id,
                                      sightings=sightings, rejects=rejects, pending=pending,
                                      raws=job.raws, known=ChainMap(job.known, *recent), row_count=job.row_count,
                                      lines_before=state["lines_done"], lines_after=job.lines_after,
                                      ready=job.ready, raws_ready=job.raws_ready)
        if job.final:
            complete_file(conn, stored["id"], lines_done=max(job.lines_after, plan.facts.lines))
        return counts

    def committed(job: _Job, counts: BatchCounts) -> None:
        # Only after the commit: the summary counts what is stored, and an id is only certain now. The
        # writer thread's own memory of recent ids first (it runs on that thread, before the next batch);
        # the reading thread takes the ids in between batches.
        if len(recent[0]) + len(counts.raw_ids) > memo_size // 2:
            recent[1] = recent[0]
            recent[0] = {}
        recent[0].update(counts.raw_ids)
        raw_ids.offer(job.raws, counts.raw_ids)
        state["lines_done"] = job.lines_after
        summary.rows += counts.rows
        summary.sightings += counts.sightings
        summary.new_raw_urls += counts.new_raw_urls
        summary.new_canonical_urls += counts.new_canonical_urls
        summary.rejects.update(job.reasons)
        summary.rows_without_url += job.no_url
        done = plan.facts.lines if job.final else job.lines_after
        progress.advance(max(done - state["reported"], 0))
        state["reported"] = max(done, state["reported"])

    batch = Batch(canon, dataset_id=dataset_id, file_id=stored["id"], keyed=plan.options.key_column is not None,
                  timed=plan.options.time_column is not None, memo_size=memo_size, ids=raw_ids,
                  units=units if plan.options.unit_column is not None else None)
    last_line = resume_after

    # On PostgreSQL the reading thread also encodes the batch for COPY, so that the writer thread, whose
    # connection is the load's bottleneck, only sends bytes: what it did for a row in Python it did while
    # the database waited for it. Only the sightings still naming a raw URL by hash are left to it.
    encode = engine.dialect.name == "postgresql" and sends_utf8(engine)
    sighting_encoder = loads.sighting_encoder() if encode else None
    raw_encoder = loads.raw_encoder() if encode else None

    def job(final: bool) -> _Job:
        known = batch.known()
        fresh = [w for h, w in batch.raws.items() if h not in known]
        sightings, pending = batch.sightings, batch.pending
        ready = raws_ready = None
        if sighting_encoder is not None and len(pending) < len(sightings):
            ready = sighting_encoder.encode([s for s in sightings if type(s[6]) is int])
            sightings = [sightings[i] for i in pending]
            pending = list(range(len(sightings)))
        if raw_encoder is not None and fresh:
            raws_ready = raw_encoder.encode(fresh)
        out = _Job(sightings, batch.rejects, pending, fresh, known, batch.count, last_line, batch.reasons(),
                   batch.no_url, final, ready, raws_ready)
        batch.clear()
        return out

    progress.start(f"ingest {plan.name} (lines)", total=plan.facts.lines)
    writer: BatchWriter[_Job] = BatchWriter(engine, write, committed)
    try:
        with closing(open_binary(plan.path, plan.facts.gzipped)) as stream:
            reader = DumpReader(physical_lines(stream.binary, plan.options.max_line_bytes), plan.options,
                                name=plan.name)
            try:
                for piece in reader.pieces():
                    if isinstance(piece, RowBlock):
                        # Consecutive lines: taken in slices that end where a batch is full.
                        start, end = max(resume_after - piece.first + 1, 0), len(piece)
                        while start < end:
                            stop = min(end, start + batch_size - batch.count)
                            batch.add_block(piece, start, stop)
                            last_line = piece.first + stop - 1
                            start = stop
                            if batch.count >= batch_size:
                                writer.submit(job(final=False))
                        continue
                    if piece.line_no <= resume_after:
                        continue  # committed by the interrupted load
                    batch.add(piece)
                    last_line = piece.end_line
                    if batch.count >= batch_size:
                        writer.submit(job(final=False))
            except InputError as exc:
                # The file broke under us after it was checked; what is committed stays, resumable.
                raise InputError(f"{plan.name}: {exc}") from exc
            summary.blank_lines = reader.blank_lines
            if stream.sha256() != plan.facts.sha256:
                # The file changed between hashing and reading: completing it would attach this content
                # to another file's digest. What is committed stays; a new load sees the new file.
                raise InputError(f"{plan.name} changed while it was being loaded; load it again")
        writer.submit(job(final=True))
        writer.close()
    except BaseException:
        writer.abandon()
        raise
    finally:
        progress.finish()
    summary.seconds = time.monotonic() - started
    summary.loaded_at = now()
    log.info("%s: %d rows, %d sightings, %d rejects", plan.name, summary.rows, summary.sightings,
             summary.reject_count)
    return summary


__all__ = ["DEFAULT_BATCH_SIZE", "STAGE", "count_pending", "ingest_dump", "plan_file"]
