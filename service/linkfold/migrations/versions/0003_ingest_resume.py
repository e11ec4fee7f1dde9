"""ingest indexes: resume point of a dataset file, index for listing a dataset's rejects by reason

``dataset_files.lines_done`` is the last input line covered by committed batches; it moves forward in
the same transaction as each batch's sightings and rejects, so a resumed load can skip what is stored
without re-reading the registry row by row. ``ix_rejects_dataset_reason`` serves ``linkfold rejects``
(filter by dataset and reason) and the per-reason counts of the ingest summary.

Revision ID: 0003
Revises: 0002
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("dataset_files", schema=None) as batch_op:
        batch_op.add_column(sa.Column("lines_done", sa.BigInteger(), server_default="0", nullable=False))
    with op.batch_alter_table("rejects", schema=None) as batch_op:
        batch_op.create_index("ix_rejects_dataset_reason", ["dataset_id", "reason"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("rejects", schema=None) as batch_op:
        batch_op.drop_index("ix_rejects_dataset_reason")
    with op.batch_alter_table("dataset_files", schema=None) as batch_op:
        batch_op.drop_column("lines_done")
