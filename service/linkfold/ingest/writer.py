"""The batch writer: batches go to the database on a thread of their own, in order, one transaction each.

Reading and canonicalising are Python work; inserting is the database's. With the writer on its own
thread (and its own connection), the two overlap: while batch n is being inserted, batch n+1 is being
read. The hand-over queue holds at most ``depth`` batches, so memory stays bounded and a slow database
slows the reader down rather than letting batches pile up.

Every batch handed over is written (or the writer fails and says so): stopping early waits for the
batches already handed over, so what is committed is always "everything up to some batch", never a gap.
A batch whose transaction loses a deadlock or serialization conflict to a concurrent writer is written
again from the same job (``store.conflicts.retrying``): ``write`` must leave the job as it found it.

The writer thread needs the interpreter after every round trip and every piece of a COPY, and the reading
thread never blocks: at the default thread switch interval (5 ms) the database waits for it each time.
The library leaves process-wide interpreter settings alone; the ``linkfold`` command lowers the interval
for its own process (``linkfold.cli.tuned_interpreter``, where the measurement is).
"""

from __future__ import annotations

import logging
import queue
import threading
from collections.abc import Callable
from typing import Any, Generic, TypeVar

from sqlalchemy.engine import Connection, Engine

from ..store.conflicts import retrying

log = logging.getLogger("linkfold")

Job = TypeVar("Job")
_STOP = object()


class BatchWriter(Generic[Job]):
    """Run ``write(conn, job)`` for each submitted job on one thread, each inside ``conn.begin()``;
    then ``committed(job, result)`` once that transaction is committed. ``write`` may run more than once
    for one job (a transaction that lost to a concurrent writer is run again): it must not change the
    job, nor keep anything from a run whose transaction did not commit."""

    def __init__(self, engine: Engine, write: Callable[[Connection, Job], Any],
                 committed: Callable[[Job, Any], None] = lambda _job, _result: None, *, depth: int = 2,
                 name: str = "linkfold-writer") -> None:
        self._engine = engine
        self._write = write
        self._committed = committed
        self._queue: queue.Queue = queue.Queue(maxsize=depth)
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, name=name, daemon=True)
        # An in-memory SQLite database exists once per connection (per thread, in SQLAlchemy's pool): a
        # second thread would write into a database of its own. Write on the caller's thread instead.
        self._inline = engine.dialect.name == "sqlite" and engine.url.database in (None, "", ":memory:")
        if not self._inline:
            self._thread.start()

    def _run(self) -> None:
        try:
            with self._engine.connect() as conn:
                while (job := self._queue.get()) is not _STOP:
                    result = retrying(lambda: self._transaction(conn, job), what="a batch")
                    self._committed(job, result)
                return
        except BaseException as exc:  # handed to the submitting thread, which re-raises it
            self._error = exc
        # Keep taking batches (and dropping them) so a submitter never blocks, until told to stop.
        while self._queue.get() is not _STOP:
            pass

    def _transaction(self, conn: Connection, job: Job) -> Any:
        with conn.begin():
            return self._write(conn, job)

    def _raise_if_failed(self) -> None:
        if self._error is not None:
            raise self._error

    def submit(self, job: Job) -> None:
        """Hand over a batch; blocks while ``depth`` batches are waiting. Raises the writer's error."""
        if self._inline:
            with self._engine.connect() as conn:
                result = retrying(lambda: self._transaction(conn, job), what="a batch")
                self._committed(job, result)
            return
        while True:
            self._raise_if_failed()
            try:
                self._queue.put(job, timeout=0.1)
                return
            except queue.Full:
                continue

    def close(self) -> None:
        """Wait for every batch handed over to be written; raise the writer's error if it failed."""
        if self._inline:
            return
        self._put_stop()
        self._raise_if_failed()

    def abandon(self) -> None:
        """Stop after the batches already handed over (used while another error propagates)."""
        if self._inline:
            return
        self._put_stop()
        if self._error is not None:
            log.warning("the batch writer failed as well: %s", self._error)

    def _put_stop(self) -> None:
        while self._thread.is_alive():
            try:
                self._queue.put(_STOP, timeout=0.1)
                break
            except queue.Full:
                continue
        self._thread.join()


__all__ = ["BatchWriter"]
