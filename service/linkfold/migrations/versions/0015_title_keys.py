"""dedupe: title keys, so that short texts whose titles decide become candidate pairs

Two briefs of thirty words with one title on two outlets never met: candidates came only from equal band
keys (shared shingles) and equal texts, and a rewritten brief shares neither, although the verification
rule says that for short texts the title decides (docs/dedupe.md §6). ``title_keys`` holds the keys of
``linkfold.dedupe.titles`` for the current document of each canonical URL that has a publication date,
indexed on ``key`` so the matching step joins them as it joins band keys. The dedupe stage fills the table
for documents signed before this revision on its next run (a ``stage_marks`` entry records that it did).

Revision ID: 0015
Revises: 0016
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0015"
down_revision = "0016"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "title_keys",
        sa.Column("document_id", sa.Integer(), nullable=False),
        sa.Column("key", sa.BigInteger(), nullable=False),
        sa.ForeignKeyConstraint(["document_id"], ["signatures.document_id"],
                                name=op.f("fk_title_keys_document_id_signatures")),
        sa.PrimaryKeyConstraint("document_id", "key", name=op.f("pk_title_keys")),
    )
    with op.batch_alter_table("title_keys", schema=None) as batch_op:
        batch_op.create_index("ix_title_keys_key", ["key"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("title_keys", schema=None) as batch_op:
        batch_op.drop_index("ix_title_keys_key")
    op.drop_table("title_keys")
