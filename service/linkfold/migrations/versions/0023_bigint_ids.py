"""64-bit row identifiers for every table that grows with the data, and every column that refers to one

``raw_urls.id``, ``canonical_urls.id``, the ids of pages, documents, links, rejects, follow and fetch
outcomes, re-canonicalisation changes and ID events, and the columns that point at them (``canonical_id``,
``final_id``, ``document_id``, ``raw_url_id``, ``founder_id``…) were 32-bit on PostgreSQL: a registry
that pools years of panel and platform data passes 2**31 rows of raw URLs long before its server is full.
Their sequences become bigint too (a serial's sequence is ``AS integer`` and would stop at 2**31 - 1
whatever the column's type). ``sightings.id`` has been a bigint since 0011.

On PostgreSQL each table is rewritten once (one ALTER TABLE per table, all its columns together); plan
the upgrade of a large registry for a quiet hour. The view over the tables is dropped and created again
from its own stored definition. SQLite is left as it is: there every INTEGER is already 64-bit.

Revision ID: 0023
Revises: 0020
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0023"
down_revision = "0020"
branch_labels = None
depends_on = None

#: table -> its 32-bit identifier columns that become 64-bit (``id`` first when the table has one)
COLUMNS: dict[str, tuple[str, ...]] = {
    "canonical_urls": ("id", "final_id"),
    "raw_urls": ("id", "canonical_id"),
    "canon_changes": ("id", "raw_url_id", "old_canonical_id", "new_canonical_id"),
    "sightings": ("raw_url_id",),
    "rejects": ("id", "raw_url_id"),
    "links": ("id", "src_id", "dst_id"),
    "follow_results": ("id", "canonical_id", "final_id"),
    "follow_attempts": ("id", "canonical_id", "final_id"),
    "pages": ("id", "canonical_id", "final_canonical_id"),
    "fetch_results": ("id", "canonical_id", "page_id"),
    "documents": ("id", "canonical_id", "page_id"),
    "signatures": ("document_id",),
    "band_keys": ("document_id",),
    "title_keys": ("document_id",),
    "decisions": ("a_member", "b_member"),
    "cluster_ids": ("founder_id",),
    "cluster_members": ("canonical_id",),
    "id_events": ("id", "member_id"),
}


def _retype(kind: str) -> None:
    conn = op.get_bind()
    definition = conn.execute(sa.text("SELECT pg_get_viewdef('sighting_links'::regclass)")).scalar_one()
    op.execute("DROP VIEW sighting_links")
    for table, columns in COLUMNS.items():
        op.execute(f'ALTER TABLE "{table}" '
                   + ", ".join(f'ALTER COLUMN "{c}" TYPE {kind}' for c in columns))
        if columns[0] == "id":
            sequence = conn.execute(sa.text("SELECT pg_get_serial_sequence(:t, 'id')"), {"t": table}).scalar()
            if sequence is not None:
                op.execute(f"ALTER SEQUENCE {sequence} AS {kind}")
    op.execute(f"CREATE VIEW sighting_links AS {definition}")


def upgrade() -> None:
    if op.get_bind().dialect.name != "postgresql":
        return
    _retype("bigint")


def downgrade() -> None:
    # Fails, changing nothing, when a value no longer fits 32 bits: such a registry cannot go back.
    if op.get_bind().dialect.name != "postgresql":
        return
    _retype("integer")
