"""The run log: one ``runs`` row per execution of a stage, with its counts and how it ended.

A run is committed as ``running`` the moment it starts (in its own transaction), so that a crash still
leaves a trace; :func:`finish_run` then records ``ok``, ``failed`` or ``interrupted`` with the counts.
:func:`recording_run` does both around a block of work.
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
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ..store import tables as t

_MAX_ERROR_CHARS = 4000

log = logging.getLogger("linkfold")


class RunStatus(enum.StrEnum):
    RUNNING = "running"
    OK = "ok"
    FAILED = "failed"
    INTERRUPTED = "interrupted"


Bind = Engine | Connection


def _execute(bind: Bind, stmt: sa.Executable) -> sa.CursorResult:
    # An engine gets a transaction of its own (the row must be visible at once); a connection is the
    # caller's, inside whatever transaction the caller holds.
    if isinstance(bind, Engine):
        with bind.begin() as conn:
            return conn.execute(stmt)
    return bind.execute(stmt)


def start_run(bind: Bind, stage: str, *, parent_id: int | None = None) -> int:
    """Record the start of ``stage`` and return the run id."""
    stmt = sa.insert(t.runs).values(stage=stage[:40], status=RunStatus.RUNNING.value, parent_id=parent_id,
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
        status=status.value, finished_at=datetime.now(UTC),
        counts=dict(counts) if counts is not None else None, error=error))


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


__all__ = ["RunRecord", "RunStatus", "finish_run", "get_run", "recording_run", "start_run"]
