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


def _sqlite_on_connect(dbapi_conn, _record) -> None:
    cur = dbapi_conn.cursor()
    # Foreign keys are off by default in SQLite, per connection; WAL lets readers work beside the one
    # writer; busy_timeout makes a second writer wait instead of failing at once.
    cur.execute("PRAGMA foreign_keys=ON")
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute("PRAGMA synchronous=NORMAL")
    cur.execute("PRAGMA busy_timeout=30000")
    cur.close()


def make_engine(url: str, **kwargs) -> Engine:
    """An engine for ``url`` with the per-connection settings each backend needs."""
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
        engine = sa.create_engine(parsed, **kwargs)
        sa.event.listen(engine, "connect", _sqlite_on_connect)
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
