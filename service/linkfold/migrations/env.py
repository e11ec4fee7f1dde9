"""Alembic environment for linkfold.

The engine comes from ``linkfold.store.migrate`` through ``config.attributes``; running ``alembic``
by hand works too, with the URL in LINKFOLD_DATABASE_URL. SQLite needs batch mode for ALTER TABLE.
"""

from __future__ import annotations

from alembic import context

from linkfold.settings import load_settings
from linkfold.store.engine import make_engine
from linkfold.store.tables import metadata

config = context.config


def run_migrations_online() -> None:
    engine = config.attributes.get("engine") or make_engine(load_settings().database_url)
    with engine.connect() as connection:
        context.configure(
            connection=connection,
            target_metadata=metadata,
            render_as_batch=connection.dialect.name == "sqlite",
            compare_type=True,
        )
        with context.begin_transaction():
            context.run_migrations()
        connection.commit()


if context.is_offline_mode():
    raise SystemExit("linkfold migrations run online only: give a database URL")
run_migrations_online()
