"""Alembic, driven from code: ``linkfold db upgrade|current|downgrade`` and the schema check."""

from __future__ import annotations

import logging
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


def head_revision() -> str:
    script = ScriptDirectory.from_config(_config(sa.create_engine("sqlite://")))
    head = script.get_current_head()
    assert head is not None
    return head


def current_revision(engine: Engine) -> str | None:
    try:
        with engine.connect() as conn:
            return MigrationContext.configure(conn).get_current_revision()
    except sa.exc.OperationalError as exc:
        raise DatabaseError(f"cannot open {display_url(engine)}: {exc.orig}") from exc


def upgrade(engine: Engine, revision: str = "head") -> str | None:
    command.upgrade(_config(engine), revision)
    return current_revision(engine)


def downgrade(engine: Engine, revision: str) -> str | None:
    command.downgrade(_config(engine), revision)
    return current_revision(engine)


def history() -> list[tuple[str, str | None, str]]:
    script = ScriptDirectory.from_config(_config(sa.create_engine("sqlite://")))
    return [(rev.revision, rev.down_revision if isinstance(rev.down_revision, str) else None,
             rev.doc or "") for rev in script.walk_revisions()]


def ensure_schema(engine: Engine) -> None:
    """Refuse to work on a database whose schema is not at head; initialise an empty one.

    An empty database (no Alembic version yet) is brought to head at once, so that a newcomer's first
    command just works; a database at an older revision is never migrated behind the user's back.
    """
    current = current_revision(engine)
    head = head_revision()
    if current == head:
        return
    if current is None:
        inspector = sa.inspect(engine)
        if inspector.get_table_names():
            raise SchemaError(f"{display_url(engine)} holds tables but no linkfold schema version",
                              hint="point --db at a linkfold registry or an empty database")
        log.info("initialising an empty registry at %s", display_url(engine))
        upgrade(engine)
        return
    raise SchemaError(f"the registry at {display_url(engine)} is at schema {current}, this linkfold "
                      f"needs {head}", hint="run: linkfold db upgrade")
