"""Alembic, driven from code: ``linkfold db upgrade|current|downgrade`` and the schema check.

:func:`upgrade_schema` is the one public call that creates a registry's schema or migrates it forward
(``linkfold.upgrade_schema``; the command ``linkfold db upgrade`` calls it). The library never changes a
schema on its own: every stage's entry point calls :func:`require_schema`, which refuses, with a
:class:`SchemaError` naming that call, a database that is empty, foreign or at another revision.
"""

from __future__ import annotations

import functools
import logging
import weakref
from pathlib import Path

import sqlalchemy as sa
from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy.engine import Engine

from ..errors import DatabaseError, SchemaError
from .engine import display_url

log = logging.getLogger("linkfold")


def migrations_dir() -> Path:
    """The Alembic environment: ``linkfold/migrations/``, shipped inside the package (a wheel has it too)."""
    candidate = Path(__file__).resolve().parents[1] / "migrations"
    if (candidate / "env.py").is_file():
        return candidate
    raise SchemaError(f"cannot find the migrations folder (looked in {candidate})",
                      hint="reinstall linkfold: its migrations ship inside the package")


def _config(engine: Engine) -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(migrations_dir()))
    # The engine itself is handed to env.py, so a URL with a password never passes through ini syntax.
    cfg.attributes["engine"] = engine
    return cfg


@functools.cache
def head_revision() -> str:
    """The newest schema revision this linkfold knows (its migrations ship with it, so it never changes
    while a process runs)."""
    script = ScriptDirectory.from_config(_config(sa.create_engine("sqlite://")))
    head = script.get_current_head()
    assert head is not None
    return head


#: Engines whose database was seen at head: a stage checks the schema at every call, and the check
#: costs one query only the first time per engine. Migrating through this module forgets the engine.
_AT_HEAD: weakref.WeakSet[Engine] = weakref.WeakSet()


def current_revision(engine: Engine) -> str | None:
    """The schema revision the database is at (``None``: no linkfold schema yet)."""
    try:
        with engine.connect() as conn:
            return MigrationContext.configure(conn).get_current_revision()
    except sa.exc.OperationalError as exc:
        raise DatabaseError(f"cannot open {display_url(engine)}: {exc.orig}") from exc


def upgrade(engine: Engine, revision: str = "head") -> str | None:
    """Run the migrations up to ``revision`` as they are (no check of what the database holds)."""
    _AT_HEAD.discard(engine)
    command.upgrade(_config(engine), revision)
    return current_revision(engine)


def downgrade(engine: Engine, revision: str) -> str | None:
    """Migrate back to ``revision`` (``"base"`` removes every table)."""
    _AT_HEAD.discard(engine)
    command.downgrade(_config(engine), revision)
    return current_revision(engine)


def upgrade_schema(engine: Engine, revision: str = "head") -> str | None:
    """Create the registry's schema in an empty database, or migrate an older one forward; return the
    revision it is at now.

    The one call a Python user needs before the first stage (``linkfold db upgrade`` does the same):
    it is safe to repeat (a registry at head is left as it is) and never touches a database that holds
    tables but no linkfold schema version (``SchemaError``). Migrations run in order, each in its own
    transaction.
    """
    _refuse_foreign(engine, current_revision(engine))
    return upgrade(engine, revision)


def _refuse_foreign(engine: Engine, current: str | None) -> None:
    # Alembic's own table stays behind, empty, after a downgrade to base: that database is empty too.
    if current is None and set(sa.inspect(engine).get_table_names()) - {"alembic_version"}:
        raise SchemaError(f"{display_url(engine)} holds tables but no linkfold schema version",
                          hint="point the database URL at a linkfold registry or an empty database")


def require_schema(engine: Engine) -> None:
    """Refuse to work on a database whose schema is not the one this linkfold needs.

    Every stage's entry point calls it first, so that a new or old database fails with a
    :class:`SchemaError` that says what to do instead of a driver's "no such table" halfway through.
    The library never creates or migrates a schema by itself: that is :func:`upgrade_schema`'s job.
    """
    if engine in _AT_HEAD:
        return
    current = current_revision(engine)
    head = head_revision()
    if current == head:
        _AT_HEAD.add(engine)
        return
    _refuse_foreign(engine, current)
    where = display_url(engine)
    if current is None:
        raise SchemaError(f"{where} has no linkfold schema yet",
                          hint="create it with linkfold.upgrade_schema(engine), or run: linkfold db upgrade")
    known = {rev for rev, _down, _doc in history()}
    if current not in known:
        raise SchemaError(f"the registry at {where} is at schema {current}, which this linkfold does not "
                          f"know (its newest is {head})", hint="upgrade linkfold")
    raise SchemaError(f"the registry at {where} is at schema {current}, this linkfold needs {head}",
                      hint="migrate it with linkfold.upgrade_schema(engine), or run: linkfold db upgrade")


def history() -> list[tuple[str, str | None, str]]:
    script = ScriptDirectory.from_config(_config(sa.create_engine("sqlite://")))
    return [(rev.revision, rev.down_revision if isinstance(rev.down_revision, str) else None,
             rev.doc or "") for rev in script.walk_revisions()]


def ensure_schema(engine: Engine) -> None:
    """Refuse to work on a database whose schema is not at head; initialise an empty one.

    An empty database (no Alembic version yet) is brought to head at once, so that a newcomer's first
    command just works; a database at an older revision is never migrated behind the user's back.
    """
    if engine in _AT_HEAD:
        return
    current = current_revision(engine)
    if current is None:
        _refuse_foreign(engine, current)
        log.info("initialising an empty registry at %s", display_url(engine))
        upgrade(engine)
    require_schema(engine)
