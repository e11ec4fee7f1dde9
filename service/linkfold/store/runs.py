"""The run log: one ``runs`` row per execution of a stage, with its counts and how it ended.

A run is committed as ``running`` the moment it starts (in its own transaction), so that a crash still
leaves a trace; :func:`finish_run` then records ``ok``, ``failed`` or ``interrupted`` with the counts.
:func:`recording_run` does both around a block of work.

A process killed outright (``kill -9``, a lost machine) records no end: its row stays ``running``. Every
reader of the run log passes rows through :func:`observed`, which shows such a run as ``interrupted``
when its process is gone: the row names its host and pid, and on that host a pid that no longer exists,
or that now belongs to a process started after the run, is not the run's (as the registry lock checks
its holder). A run on another host cannot be checked from here and is shown as recorded.
"""

from __future__ import annotations

import enum
import logging
import os
import socket
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any, Protocol, runtime_checkable

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from . import tables as t
from .migrate import require_schema

_MAX_ERROR_CHARS = 4000

log = logging.getLogger("linkfold")


class RunStatus(enum.StrEnum):
    RUNNING = "running"
    OK = "ok"
    FAILED = "failed"
    INTERRUPTED = "interrupted"


Bind = Engine | Connection


@runtime_checkable
class StageSummary(Protocol):
    """What every stage returns: the run it recorded, its counts as JSON-ready data, and the lines a
    person reads. The CLI prints ``lines()`` (or ``as_dict()`` as JSON), the API answers ``as_dict()``,
    and the nightly job stores ``as_dict()`` as the stage's counts, so all three say the same thing."""

    run_id: int | None

    def as_dict(self) -> dict[str, Any]: ...

    def lines(self) -> list[str]: ...


def _execute(bind: Bind, stmt: sa.Executable) -> sa.CursorResult:
    # An engine gets a transaction of its own (the row must be visible at once); a connection is the
    # caller's, inside whatever transaction the caller holds.
    if isinstance(bind, Engine):
        with bind.begin() as conn:
            return conn.execute(stmt)
    return bind.execute(stmt)


def start_run(bind: Bind, stage: str, *, parent_id: int | None = None) -> int:
    """Record the start of ``stage`` and return the run id.

    Every stage records a run before it works, so this is also where a stage that forgot to check the
    schema (:func:`~linkfold.store.migrate.require_schema`) is refused with a clear error."""
    if isinstance(bind, Engine):
        require_schema(bind)
    stmt = sa.insert(t.runs).values(stage=stage[:40], state=RunStatus.RUNNING.value, parent_id=parent_id,
                                    started_at=datetime.now(UTC), host=socket.gethostname()[:255],
                                    pid=os.getpid()).returning(t.runs.c.id)
    if isinstance(bind, Engine):
        with bind.begin() as conn:
            return int(conn.execute(stmt).scalar_one())
    return int(bind.execute(stmt).scalar_one())


def finish_run(bind: Bind, run_id: int, *, status: RunStatus | str,
               counts: Mapping[str, Any] | None = None, error: str | None = None) -> None:
    """Record how run ``run_id`` ended, with its counts (JSON) and, if it failed, the error."""
    status = RunStatus(status)
    if status is RunStatus.RUNNING:
        raise ValueError("finish_run needs a final status, not 'running'")
    if error is not None and len(error) > _MAX_ERROR_CHARS:
        error = error[:_MAX_ERROR_CHARS - 1] + "…"
    _execute(bind, sa.update(t.runs).where(t.runs.c.id == run_id).values(
        state=status.value, finished_at=datetime.now(UTC),
        counts=dict(counts) if counts is not None else None, detail=error))


def _process_started(pid: int) -> datetime | None:
    """When process ``pid`` of this machine started (Linux ``/proc``), or None where that cannot be told."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            stat = fh.read()
        ticks = int(stat.rsplit(")", 1)[1].split()[19])  # field 22, starttime (proc(5))
        with open("/proc/stat", encoding="ascii") as fh:
            boot = next(int(line.split()[1]) for line in fh if line.startswith("btime "))
        return datetime.fromtimestamp(boot + ticks / os.sysconf("SC_CLK_TCK"), UTC)
    except (OSError, ValueError, IndexError, StopIteration):
        return None


def process_gone(row: Mapping[str, Any]) -> bool:
    """Whether a ``running`` run's process has ended without recording an end (checked on its own host
    only: the pid is gone, or belongs to a process that started after the run did)."""
    from .locks import pid_alive

    pid, host = row.get("pid"), row.get("host")
    # A row read before migration 0022 (or built by a caller) may still say status.
    if row.get("state", row.get("status")) != RunStatus.RUNNING.value or pid is None or host != socket.gethostname():
        return False
    if pid == os.getpid():
        return False
    if not pid_alive(int(pid)):
        return True
    started, run_started = _process_started(int(pid)), row.get("started_at")
    if started is None or run_started is None:
        return False
    if run_started.tzinfo is None:
        run_started = run_started.replace(tzinfo=UTC)
    # A second of slack: the two clocks are read at different moments (the boot time is whole seconds).
    return (started - run_started).total_seconds() > 1.0


def observed(row: dict[str, Any]) -> dict[str, Any]:
    """``row`` as the run log shows it: a ``running`` run whose process is gone is ``interrupted``.

    The row also carries ``status`` and ``error``, the old names of ``state`` and ``detail`` (migration
    0022), for one release: the run log's JSON (CLI and API) still gives them (docs/vocabulary.md)."""
    if process_gone(row):
        row["state"] = RunStatus.INTERRUPTED.value
        row["detail"] = row.get("detail") or (f"interrupted: process {row['pid']} on {row['host']} ended "
                                              "without recording an end")
    row["status"], row["error"] = row.get("state"), row.get("detail")
    return row


def get_run(bind: Bind, run_id: int) -> dict[str, Any] | None:
    row = _execute(bind, sa.select(t.runs).where(t.runs.c.id == run_id)).mappings().first()
    return dict(row) if row else None


@dataclass
class RunRecord:
    """The run in progress: put counts in ``counts``; they are stored however the block ends."""

    id: int
    stage: str
    counts: dict[str, Any] = field(default_factory=dict)


@contextmanager
def recording_run(engine: Engine, stage: str, *, parent_id: int | None = None) -> Iterator[RunRecord]:
    """Start a run, yield it, and finish it as ok / failed / interrupted according to how the block ends.

    Ctrl-C (KeyboardInterrupt) is ``interrupted``; any other exception is ``failed`` with its message;
    the exception always propagates.
    """
    record = RunRecord(start_run(engine, stage, parent_id=parent_id), stage)
    try:
        yield record
    except KeyboardInterrupt:
        _finish_quietly(engine, record, RunStatus.INTERRUPTED, "interrupted (Ctrl-C)")
        raise
    except BaseException as exc:
        _finish_quietly(engine, record, RunStatus.FAILED, f"{type(exc).__name__}: {exc}")
        raise
    finish_run(engine, record.id, status=RunStatus.OK, counts=record.counts)


def _finish_quietly(engine: Engine, record: RunRecord, status: RunStatus, error: str) -> None:
    # The original failure is what the user must see; a second one (the database went away) is logged.
    try:
        finish_run(engine, record.id, status=status, counts=record.counts, error=error)
    except Exception:
        log.warning("could not record the end of run %d (%s)", record.id, status.value, exc_info=True)


# --- reading the run log ---------------------------------------------------------------------------------------
def _times(row: dict[str, Any]) -> None:
    for key in ("started_at", "finished_at"):
        if row.get(key) is not None and row[key].tzinfo is None:
            row[key] = row[key].replace(tzinfo=UTC)
    if row.get("started_at") and row.get("finished_at"):
        row["seconds"] = round((row["finished_at"] - row["started_at"]).total_seconds(), 3)


def list_runs(engine: Engine, *, limit: int = 20, stage: str | None = None,
              top_level: bool = True) -> list[dict[str, Any]]:
    """Runs, newest first: by default the top-level ones (a nightly run's stages are its children)."""
    r = t.runs
    q = sa.select(r).order_by(r.c.id.desc()).limit(limit)
    if top_level:
        q = q.where(r.c.parent_id.is_(None))
    if stage:
        q = q.where(r.c.stage == stage)
    with engine.connect() as conn:
        rows = [dict(x) for x in conn.execute(q).mappings()]
        ids = [x["id"] for x in rows]
        children: dict[int, int] = {}
        if ids:
            children = {int(p): int(n) for p, n in conn.execute(
                sa.select(r.c.parent_id, sa.func.count()).where(r.c.parent_id.in_(ids)).group_by(r.c.parent_id))}
    for x in rows:
        x["children"] = children.get(x["id"], 0)
        _times(x)
        observed(x)
    return rows


def show_run(engine: Engine, run_id: int) -> dict[str, Any]:
    """One run with its children (and theirs), counts and errors."""
    from ..errors import NotFound

    r = t.runs
    with engine.connect() as conn:
        row = conn.execute(sa.select(r).where(r.c.id == run_id)).mappings().first()
        if row is None:
            raise NotFound(f"no run {run_id}")
        out = observed(dict(row))
        _times(out)

        def children_of(pid: int) -> list[dict[str, Any]]:
            kids = [dict(x) for x in conn.execute(sa.select(r).where(r.c.parent_id == pid).order_by(r.c.id)).mappings()]
            for k in kids:
                _times(k)
                observed(k)
                k["children"] = children_of(k["id"])
            return kids

        out["children"] = children_of(run_id)
    return out


def running_runs(engine: Engine, *, other_than: int | None = None) -> list[dict[str, Any]]:
    """The runs recorded as ``running`` (id, stage, parent, host, pid, start), as stored: no
    :func:`observed` applied, so a caller can tell a dead process's run from a live one itself."""
    r = t.runs
    q = (sa.select(r.c.id, r.c.stage, r.c.state, r.c.parent_id, r.c.host, r.c.pid, r.c.started_at)
         .where(r.c.state == RunStatus.RUNNING.value))
    if other_than is not None:
        q = q.where(r.c.id != other_than)
    with engine.connect() as conn:
        return [dict(x) for x in conn.execute(q).mappings()]


def child_run_id(engine: Engine, parent: int, stage: str) -> int | None:
    """The newest run of ``stage`` recorded under run ``parent``, if any."""
    r = t.runs
    with engine.connect() as conn:
        return conn.execute(sa.select(sa.func.max(r.c.id)).where(r.c.parent_id == parent,
                                                                  r.c.stage == stage)).scalar()


__all__ = ["RunRecord", "RunStatus", "StageSummary", "child_run_id", "finish_run", "get_run", "list_runs", "observed",
           "process_gone", "recording_run", "running_runs", "show_run", "start_run"]
