"""Engine set-up for both backends, and the schema check every command makes before it works."""

from __future__ import annotations

import logging
from pathlib import Path

import sqlalchemy as sa
from sqlalchemy.engine import Engine, make_url

from ..errors import ConfigError, DatabaseError

log = logging.getLogger("linkfold")


def normalise_database_url(url: str) -> str:
    """Accept the spellings people paste (``postgres://``, ``postgresql://``) and pin psycopg 3.

    SQLAlchemy's bare ``postgresql://`` means psycopg2, which we do not depend on.
    """
    url = url.strip()
    if not url:
        raise ConfigError("the database URL is empty (set LINKFOLD_DATABASE_URL or pass --db)")
    for prefix in ("postgres://", "postgresql://"):
        if url.startswith(prefix):
            return "postgresql+psycopg://" + url[len(prefix):]
    if "://" not in url:
        # A bare path is an SQLite file: the most common thing to type.
        return f"sqlite:///{url}"
    return url


DEFAULT_BUSY_TIMEOUT = 30.0  # seconds; the ``busy_timeout`` setting


def _sqlite_on_connect(busy_ms: int):
    def on_connect(dbapi_conn, _record) -> None:
        cur = dbapi_conn.cursor()
        # Foreign keys are off by default in SQLite, per connection; WAL lets readers work beside the one
        # writer; busy_timeout makes a second writer wait instead of failing at once (store/conflicts.py
        # turns a wait that runs out into a clear error).
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute("PRAGMA synchronous=NORMAL")
        cur.execute(f"PRAGMA busy_timeout={int(busy_ms)}")
        cur.close()
    return on_connect


def make_engine(url: str, *, busy_timeout: float = DEFAULT_BUSY_TIMEOUT, **kwargs) -> Engine:
    """An engine for ``url`` with the per-connection settings each backend needs. ``busy_timeout``:
    seconds an SQLite writer waits for another one (the setting of that name)."""
    url = normalise_database_url(url)
    try:
        parsed = make_url(url)
    except sa.exc.ArgumentError as exc:
        raise ConfigError(f"not a database URL: {url!r}") from exc
    backend = parsed.get_backend_name()
    if backend == "sqlite":
        database = parsed.database
        if database and database != ":memory:":
            parent = Path(database).expanduser().resolve().parent
            if not parent.is_dir():
                raise DatabaseError(f"cannot create the SQLite database {database}: "
                                    f"folder {parent} does not exist")
        # The driver's own wait (sqlite3's ``timeout``) is the same busy handler: set it to the same.
        connect_args = {"timeout": max(busy_timeout, 0.0), **kwargs.pop("connect_args", {})}
        engine = sa.create_engine(parsed, connect_args=connect_args, **kwargs)
        sa.event.listen(engine, "connect", _sqlite_on_connect(round(busy_timeout * 1000)))
        return engine
    if backend == "postgresql":
        if parsed.get_driver_name() != "psycopg":
            raise ConfigError(f"use the psycopg 3 driver: postgresql+psycopg://… (got {url!r})")
        return sa.create_engine(parsed, pool_pre_ping=True, **kwargs)
    raise ConfigError(f"unsupported database backend {backend!r}: use sqlite:/// or postgresql+psycopg://")


def is_postgres(bind: sa.engine.Connection | Engine) -> bool:
    return bind.dialect.name == "postgresql"


def display_url(engine: Engine) -> str:
    """The URL without a password, safe for logs and messages."""
    return engine.url.render_as_string(hide_password=True)
