"""units on sightings (keyed pseudonyms) and versioned outlet lists

``sightings.unit`` holds the person or account a row belongs to, only ever as a keyed pseudonym (HMAC-SHA256
under the lab's ``pseudonym_key``, RFC 2104); the raw ID is never written. It is nullable: loads that name
no unit column leave it empty, and adding a nullable column rewrites nothing on either backend.

``outlet_lists`` / ``outlet_entries``: a lab's coded list of outlets, one version per loaded file, each entry a
registered domain or host with its outlet name and lab-defined attributes.

Revision ID: 0017
Revises: 0012
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0017"
down_revision = "0012"
branch_labels = None
depends_on = None

UTC = sa.DateTime(timezone=True)


def upgrade() -> None:
    # ALTER TABLE … ADD COLUMN of a nullable column: no table rebuild on SQLite, no rewrite on PostgreSQL.
    op.add_column("sightings", sa.Column("unit", sa.Text, nullable=True))
    op.create_table(
        "outlet_lists",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("sha256", sa.String(64), nullable=False),
        sa.Column("columns", sa.JSON, nullable=False),
        sa.Column("created_at", UTC, nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outlet_lists")),
        sa.UniqueConstraint("sha256", name=op.f("uq_outlet_lists_sha256")),
    )
    op.create_table(
        "outlet_entries",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("list_id", sa.Integer, nullable=False),
        sa.Column("match", sa.String(255), nullable=False),
        sa.Column("outlet", sa.String(255), nullable=False),
        sa.Column("attributes", sa.JSON, nullable=False),
        sa.Column("line_no", sa.Integer, nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outlet_entries")),
        sa.ForeignKeyConstraint(["list_id"], ["outlet_lists.id"], name=op.f("fk_outlet_entries_list_id_outlet_lists")),
        sa.UniqueConstraint("list_id", "match", name=op.f("uq_outlet_entries_list_id_match")),
    )
    op.create_index("ix_outlet_entries_list_outlet", "outlet_entries", ["list_id", "outlet"])


def downgrade() -> None:
    op.drop_index("ix_outlet_entries_list_outlet", table_name="outlet_entries")
    op.drop_table("outlet_entries")
    op.drop_table("outlet_lists")
    # Plain ALTER on both backends (SQLite >= 3.35): batch mode would rebuild sightings under its view.
    op.execute("ALTER TABLE sightings DROP COLUMN unit")
