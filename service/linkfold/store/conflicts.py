"""Concurrent writers: which database failures are a conflict with another writer, and retrying them.

On PostgreSQL two transactions that wait for each other's row locks are a deadlock: the server aborts
one of them (SQLSTATE 40P01), and under REPEATABLE READ or SERIALIZABLE a transaction can lose a
serialization conflict (40001). Both leave the loser's transaction with nothing written, and the same
transaction run again usually succeeds: :func:`retrying` does that a bounded number of times, then
raises :class:`~linkfold.errors.WriteConflict`. The writers take their row locks in one global order
(new raw and canonical URLs are inserted sorted by their unique keys, ``loads._register_statements``),
so a deadlock between two loads should not arise at all; the retry is for whatever is left.

On SQLite a second writer waits for the first for ``busy_timeout`` seconds (a setting; the engine sets
it on every connection); when the wait runs out SQLite says "database is locked", which
:func:`as_write_conflict` turns into the same error with a message that says what to do.
"""

from __future__ import annotations

import logging
import random
import time
from collections.abc import Callable
from typing import TypeVar

import sqlalchemy as sa

from ..errors import WriteConflict

log = logging.getLogger("linkfold")

T = TypeVar("T")

#: SQLSTATE codes of a transaction that lost to a concurrent one (PostgreSQL Appendix A, class 40).
RETRYABLE_SQLSTATES = {"40P01": "deadlock", "40001": "serialization conflict"}
#: Attempts of one transaction, the first included.
DEFAULT_ATTEMPTS = 5


def _orig(exc: BaseException) -> BaseException:
    return exc.orig if isinstance(exc, sa.exc.DBAPIError) and exc.orig is not None else exc


def retryable_kind(exc: BaseException) -> str | None:
    """``deadlock`` or ``serialization conflict`` when ``exc`` is PostgreSQL aborting a transaction in
    favour of a concurrent one (worth running again), else None."""
    return RETRYABLE_SQLSTATES.get(getattr(_orig(exc), "sqlstate", None) or "")


def sqlite_locked(exc: BaseException) -> bool:
    """Whether ``exc`` is SQLite giving up waiting for another writer (busy timeout ran out)."""
    import sqlite3

    orig = _orig(exc)
    return isinstance(orig, sqlite3.OperationalError) and "locked" in str(orig)


def as_write_conflict(exc: BaseException, *, attempts: int = 1) -> WriteConflict | None:
    """The :class:`WriteConflict` that a database failure caused by a concurrent writer stands for, or
    None if it is something else. The message names the condition, not the statement (which may hold
    personal data)."""
    kind = retryable_kind(exc)
    if kind is not None:
        tries = f" {attempts} times" if attempts > 1 else ""
        return WriteConflict(f"the database aborted this transaction{tries} as the loser of a {kind} with a "
                             "concurrent writer; nothing of the failed transaction was stored",
                             hint="run the command again; committed work is kept")
    if sqlite_locked(exc):
        return WriteConflict("the SQLite registry stayed locked by another writer for longer than the busy "
                             "timeout; nothing of the failed transaction was stored",
                             hint="run the command again when the other writer is done, or raise "
                                  "LINKFOLD_BUSY_TIMEOUT (seconds)")
    return None


def retrying(attempt: Callable[[], T], *, what: str, attempts: int = DEFAULT_ATTEMPTS,
             base_delay: float = 0.05) -> T:
    """Run ``attempt`` (one whole transaction, begun and committed inside it) until it does not lose to
    a concurrent writer, at most ``attempts`` times, with a short jittered back-off between tries; then
    raise :class:`WriteConflict`. Any other failure propagates at once. ``attempt`` must be safe to run
    again: it must rebuild from its inputs whatever the lost transaction changed."""
    for n in range(1, attempts + 1):
        try:
            return attempt()
        except sa.exc.DBAPIError as exc:
            kind = retryable_kind(exc)
            if kind is None:
                raise
            if n == attempts:
                conflict = as_write_conflict(exc, attempts=attempts)
                assert conflict is not None
                raise conflict from exc
            delay = base_delay * (2 ** (n - 1)) * (0.5 + random.random())
            log.info("%s lost a %s with a concurrent writer; trying again in %.2f s (attempt %d of %d)",
                     what, kind, delay, n + 1, attempts)
            time.sleep(delay)
    raise AssertionError("unreachable")  # pragma: no cover


__all__ = ["DEFAULT_ATTEMPTS", "RETRYABLE_SQLSTATES", "as_write_conflict", "retryable_kind", "retrying",
           "sqlite_locked"]
