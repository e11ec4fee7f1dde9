"""Every migration runs forward and back on both backends, and head matches the code's tables."""

from __future__ import annotations

import sqlalchemy as sa
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from linkfold.store import current_revision, downgrade, head_revision, make_engine, upgrade
from linkfold.store.migrate import history
from linkfold.store.tables import UNENFORCED_ON_POSTGRESQL, metadata


def _schema_diff(engine: sa.Engine) -> list:
    with engine.connect() as conn:
        ctx = MigrationContext.configure(conn, opts={"compare_type": True})
        diff = compare_metadata(ctx, metadata)
    if engine.dialect.name == "postgresql":
        # Declared in tables.py, deliberately not created on PostgreSQL (migration 0010).
        diff = [d for d in diff if not (d[0] == "add_fk" and d[1].name in UNENFORCED_ON_POSTGRESQL)]
    return diff


def _user_tables(engine: sa.Engine) -> set[str]:
    return set(sa.inspect(engine).get_table_names()) - {"alembic_version"}


def test_head_matches_table_definitions(empty_db_url):
    engine = make_engine(empty_db_url)
    try:
        upgrade(engine)
        assert current_revision(engine) == head_revision()
        diff = _schema_diff(engine)
        assert diff == [], f"migrated schema differs from store/tables.py: {diff}"
    finally:
        engine.dispose()


def test_every_revision_round_trips(empty_db_url):
    engine = make_engine(empty_db_url)
    revisions = [rev for rev, _down, _doc in reversed(history())]
    try:
        for i, rev in enumerate(revisions):
            upgrade(engine, rev)
            assert current_revision(engine) == rev
            previous = revisions[i - 1] if i else "base"
            downgrade(engine, previous)
            assert current_revision(engine) == (None if previous == "base" else previous)
            upgrade(engine, rev)
        downgrade(engine, "base")
        assert current_revision(engine) is None
        assert _user_tables(engine) == set()
        upgrade(engine)
        assert _schema_diff(engine) == []
    finally:
        engine.dispose()


def test_revisions_form_one_line():
    revs = history()
    heads = {rev for rev, _d, _doc in revs} - {down for _r, down, _doc in revs if down}
    assert heads == {head_revision()}, "migrations must form a single chain (one head)"


def test_the_unenforced_foreign_keys_are_exactly_those_missing_on_postgresql(empty_db_url):
    engine = make_engine(empty_db_url)
    try:
        upgrade(engine)
        with engine.connect() as conn:
            ctx = MigrationContext.configure(conn, opts={"compare_type": True})
            missing = {d[1].name for d in compare_metadata(ctx, metadata) if d[0] == "add_fk"}
        assert missing == (set(UNENFORCED_ON_POSTGRESQL) if engine.dialect.name == "postgresql" else set())
    finally:
        engine.dispose()
