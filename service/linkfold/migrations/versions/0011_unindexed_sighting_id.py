"""sightings on PostgreSQL: the row id is a bigint without an index; (file_id, line_no, position) is the key

A sighting is found by its natural key, (file, line, position), which is unique and indexed, or by its
raw URL; nothing looks a sighting up by ``id``. Its primary-key index was the one index of the table that
served no query, and it cost a fifth of the time PostgreSQL spends storing a batch's sightings
(bench/ingest_bench.py, measure (d)). The id stays, as ``sighting_links.sighting_id`` says (the view keeps
its columns), unique by its sequence; it becomes a bigint, as the table is the one that grows by millions
of rows a load and a 32-bit id would run out.

The id's type change rewrites the table once, and the view over it is dropped and created again from its
own stored definition. SQLite is left as it is: there the id is the row id, which costs nothing.

Revision ID: 0011
Revises: 0010
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0011"
down_revision = "0010"
branch_labels = None
depends_on = None


def _recreated_view(change) -> None:
    """Run ``change`` with the view ``sighting_links`` out of the way, then restore the view as it was."""
    conn = op.get_bind()
    definition = conn.execute(sa.text("SELECT pg_get_viewdef('sighting_links'::regclass)")).scalar_one()
    op.execute("DROP VIEW sighting_links")
    change()
    op.execute(f"CREATE VIEW sighting_links AS {definition}")


def upgrade() -> None:
    if op.get_bind().dialect.name != "postgresql":
        return

    def change() -> None:
        op.drop_constraint("pk_sightings", "sightings", type_="primary")
        op.execute("ALTER TABLE sightings ALTER COLUMN id TYPE bigint")
        op.execute("ALTER SEQUENCE sightings_id_seq AS bigint")

    _recreated_view(change)


def downgrade() -> None:
    if op.get_bind().dialect.name != "postgresql":
        return

    def change() -> None:
        op.execute("ALTER SEQUENCE sightings_id_seq AS integer")
        op.execute("ALTER TABLE sightings ALTER COLUMN id TYPE integer")
        op.create_primary_key("pk_sightings", "sightings", ["id"])

    _recreated_view(change)
