"""Storage: table definitions, engine set-up, migrations and dialect-specific bulk writers."""

from .bulk import insert_new_rows, insert_rows
from .engine import display_url, is_postgres, make_engine, normalise_database_url
from .migrate import (
    current_revision,
    downgrade,
    ensure_schema,
    head_revision,
    require_schema,
    upgrade,
    upgrade_schema,
)
from .tables import metadata

__all__ = [
    "current_revision",
    "display_url",
    "downgrade",
    "ensure_schema",
    "head_revision",
    "insert_new_rows",
    "insert_rows",
    "is_postgres",
    "make_engine",
    "metadata",
    "normalise_database_url",
    "require_schema",
    "upgrade",
    "upgrade_schema",
]
