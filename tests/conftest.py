"""Test harness: real databases for every test.

* ``sqlite_url``: a fresh SQLite file per test, migrated to head.
* ``pg_url``: a fresh PostgreSQL database per test, cloned from a template migrated once per session,
  dropped afterwards. The server comes from ``LINKFOLD_TEST_PG`` (default: the local server on
  127.0.0.1:5432 as user ``postgres``). Without a reachable server these tests skip with the reason;
  under ``CI=true`` they fail instead, since CI must run them.
* ``db_url`` / ``engine``: the same test on both backends (parametrised ``sqlite`` / ``postgres``).
* ``empty_db_url``: an empty database (no schema) on both backends, for migration tests.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator

import pytest
import sqlalchemy as sa

from linkfold.store import make_engine, upgrade

PG_ADMIN_URL = os.environ.get("LINKFOLD_TEST_PG", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres")
IN_CI = os.environ.get("CI", "").lower() in {"1", "true", "yes"}


def _pg_admin_engine() -> sa.Engine:
    return make_engine(PG_ADMIN_URL, isolation_level="AUTOCOMMIT")


def _with_database(url: str, name: str) -> str:
    return sa.engine.make_url(url).set(database=name).render_as_string(hide_password=False)


class _PgServer:
    def __init__(self) -> None:
        self.admin = _pg_admin_engine()
        self.template: str | None = None
        self.created: list[str] = []

    def create(self, *, template: str | None = None) -> str:
        name = f"lf_test_{uuid.uuid4().hex[:12]}"
        with self.admin.connect() as conn:
            clause = f' TEMPLATE "{template}"' if template else ""
            conn.exec_driver_sql(f'CREATE DATABASE "{name}"{clause}')
        self.created.append(name)
        return name

    def drop(self, name: str) -> None:
        with self.admin.connect() as conn:
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        if name in self.created:
            self.created.remove(name)

    def migrated_template(self) -> str:
        if self.template is None:
            name = self.create()
            engine = make_engine(_with_database(PG_ADMIN_URL, name))
            upgrade(engine)
            engine.dispose()
            self.template = name
        return self.template


@pytest.fixture(scope="session")
def pg_server() -> Iterator[_PgServer]:
    try:
        server = _PgServer()
        with server.admin.connect() as conn:
            conn.exec_driver_sql("SELECT 1")
    except Exception as exc:  # any failure to reach the server means: no PostgreSQL here
        reason = f"PostgreSQL not reachable at {PG_ADMIN_URL} ({type(exc).__name__}); set LINKFOLD_TEST_PG"
        if IN_CI:
            pytest.fail(f"CI=true but {reason}", pytrace=False)
        pytest.skip(reason)
    yield server
    for name in list(server.created):
        server.drop(name)
    server.admin.dispose()


@pytest.fixture
def server():
    """A real HTTP server on 127.0.0.1 with redirect chains, robots.txt and slow or huge answers."""
    from httpserver import LoopbackServer

    with LoopbackServer() as srv:
        yield srv


@pytest.fixture
def sqlite_url(tmp_path) -> str:
    url = f"sqlite:///{tmp_path / 'registry.db'}"
    engine = make_engine(url)
    upgrade(engine)
    engine.dispose()
    return url


@pytest.fixture
def pg_url(pg_server: _PgServer) -> Iterator[str]:
    name = pg_server.create(template=pg_server.migrated_template())
    yield _with_database(PG_ADMIN_URL, name)
    pg_server.drop(name)


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def backend(request) -> str:
    return request.param


@pytest.fixture
def db_url(request, backend: str) -> str:
    return request.getfixturevalue("sqlite_url" if backend == "sqlite" else "pg_url")


@pytest.fixture
def engine(db_url: str) -> Iterator[sa.Engine]:
    eng = make_engine(db_url)
    yield eng
    eng.dispose()


@pytest.fixture
def empty_db_url(request, backend: str, tmp_path) -> Iterator[str]:
    if backend == "sqlite":
        yield f"sqlite:///{tmp_path / 'empty.db'}"
        return
    server: _PgServer = request.getfixturevalue("pg_server")
    name = server.create()
    yield _with_database(PG_ADMIN_URL, name)
    server.drop(name)
