"""The registry lock: one nightly job (or other exclusive stage) at a time, whoever started it.

The lock is a row in ``job_locks`` saying who holds it (host, pid, run, since, heartbeat), so a second
job can say *who* is in the way. A row alone would outlive a killed holder, so:

* on PostgreSQL the row is backed by a session-level advisory lock, which the server releases when the
  holder's connection dies (kill -9 included); a row without its advisory lock is stale and is taken over;
* on SQLite (one machine) a row whose holder is on this host and no longer alive, or whose heartbeat is
  older than ``stale_after`` seconds, is stale and is taken over.

A stage that must run alone (dedupe) takes the lock itself, with ``hold_lock(..., reentrant=True)``: run
on its own it takes the lock; run by a job that holds the lock and lends it to its stages
(:meth:`RegistryLock.lend`, the nightly job) it runs under the job's hold; any other holder — another
process, or another hold in this one — makes it refuse with :class:`LockHeld`.
"""

from __future__ import annotations

import logging
import os
import socket
import time
import zlib
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from ..errors import LockHeld
from . import tables as t

log = logging.getLogger("linkfold")


@dataclass(frozen=True)
class LockInfo:
    name: str
    host: str
    pid: int
    run_id: int | None
    acquired_at: datetime
    heartbeat_at: datetime

    def describe(self) -> str:
        run = f", run {self.run_id}" if self.run_id else ""
        return (f"held by pid {self.pid} on {self.host}{run} since "
                f"{self.acquired_at:%Y-%m-%d %H:%M:%S}Z (heartbeat {self.heartbeat_at:%H:%M:%S}Z)")


def _now() -> datetime:
    return datetime.now(UTC).replace(microsecond=0)


def _aware(value: datetime) -> datetime:
    # SQLite returns naive datetimes for timezone-aware columns; they were written as UTC.
    return value if value.tzinfo else value.replace(tzinfo=UTC)


def pid_alive(pid: int) -> bool:
    """Whether a process with this id runs on this machine (signal 0 probes without signalling)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


#: The lock a job lends to the stages it runs (in this thread or task): see :meth:`RegistryLock.lend`.
_LENT: ContextVar[RegistryLock | None] = ContextVar("linkfold_lent_lock", default=None)


def _advisory_key(name: str) -> int:
    return zlib.crc32(f"linkfold:{name}".encode()) & 0x7FFFFFFF


def read_lock(engine: Engine, name: str = "registry") -> LockInfo | None:
    with engine.connect() as conn:
        row = conn.execute(sa.select(t.job_locks).where(t.job_locks.c.name == name)).mappings().first()
    if row is None:
        return None
    return LockInfo(name=row["name"], host=row["host"], pid=row["pid"], run_id=row["run_id"],
                    acquired_at=_aware(row["acquired_at"]), heartbeat_at=_aware(row["heartbeat_at"]))


class RegistryLock:
    """A held lock; release it with :meth:`release` or use :func:`hold_lock`."""

    def __init__(self, engine: Engine, name: str, pg_conn: sa.Connection | None) -> None:
        self.engine = engine
        self.name = name
        self._pg_conn = pg_conn
        self.host = socket.gethostname()
        self.pid = os.getpid()

    def heartbeat(self, run_id: int | None = None) -> None:
        values: dict = {"heartbeat_at": _now()}
        if run_id is not None:
            values["run_id"] = run_id
        with self.engine.begin() as conn:
            conn.execute(t.job_locks.update().where(t.job_locks.c.name == self.name)
                         .where(t.job_locks.c.pid == self.pid).values(**values))

    @contextmanager
    def lend(self) -> Iterator[RegistryLock]:
        """Inside the block, a stage asking for this lock reentrantly runs under this hold (a job lends
        its lock to the stages it runs) instead of being refused."""
        token = _LENT.set(self)
        try:
            yield self
        finally:
            _LENT.reset(token)

    def covers(self, engine: Engine, name: str) -> bool:
        """Whether this hold is the lock ``name`` of the database ``engine`` opens."""
        return self.name == name and self.engine.url == engine.url

    def release(self) -> None:
        with self.engine.begin() as conn:
            conn.execute(t.job_locks.delete().where(t.job_locks.c.name == self.name)
                         .where(t.job_locks.c.pid == self.pid).where(t.job_locks.c.host == self.host))
        if self._pg_conn is not None:
            self._pg_conn.execute(sa.text("SELECT pg_advisory_unlock(:k)"), {"k": _advisory_key(self.name)})
            self._pg_conn.close()
            self._pg_conn = None


def _is_stale(info: LockInfo, *, stale_after: float, have_advisory: bool | None) -> bool:
    if have_advisory is not None:
        # PostgreSQL: we got the advisory lock, so whoever wrote the row is gone.
        return have_advisory
    if info.host == socket.gethostname() and not pid_alive(info.pid):
        return True
    return _now() - info.heartbeat_at > timedelta(seconds=stale_after)


def _try_advisory(pg_conn: sa.Connection, name: str) -> bool:
    return bool(pg_conn.execute(sa.text("SELECT pg_try_advisory_lock(:k)"),
                                {"k": _advisory_key(name)}).scalar())


def acquire_lock(engine: Engine, name: str = "registry", *, run_id: int | None = None,
                 stale_after: float = 6 * 3600, release_wait: float = 10.0) -> RegistryLock:
    """Take the lock or raise :class:`LockHeld` naming its holder."""
    pg_conn = None
    have_advisory: bool | None = None
    if engine.dialect.name == "postgresql":
        pg_conn = engine.connect().execution_options(isolation_level="AUTOCOMMIT")
        have_advisory = _try_advisory(pg_conn, name)
        if not have_advisory:
            info = read_lock(engine, name)
            if info is not None and info.host == socket.gethostname() and not pid_alive(info.pid):
                # The holder died a moment ago: its server session ends a few moments after the process,
                # and only then is the advisory lock free. Wait that long rather than refuse.
                deadline = time.monotonic() + release_wait
                while not have_advisory and time.monotonic() < deadline:
                    time.sleep(0.1)
                    have_advisory = _try_advisory(pg_conn, name)
        if not have_advisory:
            pg_conn.close()
            info = read_lock(engine, name)
            held = info.describe() if info else "held by a job that has not written its row yet"
            raise LockHeld(f"the {name} lock is {held}", hint="wait for it to finish, or see linkfold runs")
    me = {"name": name, "host": socket.gethostname(), "pid": os.getpid(), "run_id": run_id,
          "acquired_at": _now(), "heartbeat_at": _now()}
    try:
        with engine.begin() as conn:
            existing = conn.execute(sa.select(t.job_locks).where(t.job_locks.c.name == name)).mappings().first()
            if existing is not None:
                info = LockInfo(name=name, host=existing["host"], pid=existing["pid"], run_id=existing["run_id"],
                                acquired_at=_aware(existing["acquired_at"]),
                                heartbeat_at=_aware(existing["heartbeat_at"]))
                if not _is_stale(info, stale_after=stale_after, have_advisory=have_advisory):
                    raise LockHeld(f"the {name} lock is {info.describe()}",
                                   hint="wait for it to finish, or see linkfold runs")
                log.warning("taking over a stale %s lock (%s)", name, info.describe())
                conn.execute(t.job_locks.delete().where(t.job_locks.c.name == name))
            conn.execute(t.job_locks.insert().values(**me))
    except sa.exc.IntegrityError as exc:
        # Two SQLite jobs raced for an empty table: the loser sees the winner's row.
        if pg_conn is not None:
            pg_conn.close()
        info = read_lock(engine, name)
        raise LockHeld(f"the {name} lock is {info.describe() if info else 'taken'}") from exc
    except BaseException:
        if pg_conn is not None:
            pg_conn.close()
        raise
    return RegistryLock(engine, name, pg_conn)


@contextmanager
def hold_lock(engine: Engine, name: str = "registry", *, reentrant: bool = False,
              **kwargs) -> Iterator[RegistryLock]:
    """Hold the lock for the block. ``reentrant``: when a job lends its hold of this lock to the stages it
    runs (:meth:`RegistryLock.lend`), run under that hold and leave releasing it to the job."""
    lent = _LENT.get() if reentrant else None
    if lent is not None and lent.covers(engine, name):
        yield lent
        return
    lock = acquire_lock(engine, name, **kwargs)
    try:
        yield lock
    finally:
        lock.release()
