"""Datasets and their files: created and claimed by a load, completed, listed; the rejects they hold.

Every function works inside the caller's transaction (or connection, for the reads).
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..errors import NotFound
from . import tables as t
from .clock import now, utc


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
                format=fmt, options=options, state="loading", ruleset_id=ruleset_id, run_id=run_id,
                rows=0, sightings=0, rejects=0, lines_done=0, started_at=now()))
    except sa.exc.IntegrityError:
        pass
    found = find_file(conn, dataset_id, sha256)
    assert found is not None
    return found


def claim_file(conn: Connection, file_id: int, run_id: int | None) -> None:
    """Record that ``run_id`` (re)started loading the file."""
    conn.execute(sa.update(t.dataset_files).where(t.dataset_files.c.id == file_id).values(run_id=run_id))


def complete_file(conn: Connection, file_id: int, *, lines_done: int) -> None:
    conn.execute(sa.update(t.dataset_files).where(t.dataset_files.c.id == file_id).values(
        state="complete", loaded_at=now(), lines_done=lines_done))


def count_unfinished_files(conn: Connection) -> int:
    """Dataset files whose load has not completed (interrupted, or running now): a new load resumes them."""
    f = t.dataset_files
    return int(conn.execute(sa.select(sa.func.count()).select_from(f).where(f.c.state != "complete")).scalar_one())


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
                       sa.func.sum(sa.case((f.c.state == "complete", 0), else_=1)).label("files_loading"),
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
        # ``line`` is the old name of ``line_no`` (as export and the view call it), kept for one release.
        yield {"file": row["file_name"], "line_no": int(row["line_no"]), "position": int(row["position"]),
               "reason": row["reason"], "detail": row["detail"],
               "excerpt": row["excerpt"] if row["excerpt"] is not None else row["raw_url"],
               "line": int(row["line_no"])}


def reject_totals(conn: Connection, dataset_id: int) -> dict[str, int]:
    """The dataset's rejects counted by reason, reasons in order."""
    rows = conn.execute(sa.select(t.rejects.c.reason, sa.func.count())
                        .where(t.rejects.c.dataset_id == dataset_id).group_by(t.rejects.c.reason)
                        .order_by(t.rejects.c.reason))
    return {reason: int(n) for reason, n in rows}


__all__ = ["claim_file", "complete_file", "count_unfinished_files", "create_file", "dataset_files", "ensure_dataset", "file_reject_counts",
           "find_dataset", "find_file", "get_dataset", "iter_rejects", "list_datasets", "reject_totals"]
