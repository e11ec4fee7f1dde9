"""The harness itself: both backends give a migrated, writable registry."""

import sqlalchemy as sa

from linkfold.store import current_revision, head_revision
from linkfold.store import tables as t


def test_fresh_registry_is_at_head_and_empty(engine):
    assert current_revision(engine) == head_revision()
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(t.datasets)).scalar_one() == 0
