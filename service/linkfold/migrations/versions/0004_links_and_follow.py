"""links and follow: the evidence table shared by later stages, per-URL follow outcome and its history

``links`` holds one row per piece of evidence that two canonical URLs are the same (``redirect`` now;
declared canonicals, text similarity and manual decisions later). ``follow_results`` is the latest
outcome of following each canonical URL (state, failure class, final URL, next attempt time for
``--retry-failed``); ``follow_attempts`` keeps every attempt, so link rot can be measured over time.

Revision ID: 0004
Revises: 0003
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None

UTC = sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "links",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=20), nullable=False),
        sa.Column("src_id", sa.Integer(), nullable=False),
        sa.Column("dst_id", sa.Integer(), nullable=False),
        sa.Column("status", sa.Integer(), nullable=True),
        sa.Column("hop", sa.Integer(), nullable=True),
        sa.Column("source", sa.String(length=255), nullable=True),
        sa.Column("detail", sa.JSON(), nullable=True),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.Column("created_at", UTC, nullable=False),
        sa.ForeignKeyConstraint(["src_id"], ["canonical_urls.id"], name=op.f("fk_links_src_id_canonical_urls")),
        sa.ForeignKeyConstraint(["dst_id"], ["canonical_urls.id"], name=op.f("fk_links_dst_id_canonical_urls")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_links_run_id_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_links")),
    )
    with op.batch_alter_table("links", schema=None) as batch_op:
        batch_op.create_index("ix_links_src_id", ["src_id"], unique=False)
        batch_op.create_index("ix_links_dst_id", ["dst_id"], unique=False)
        batch_op.create_index("ix_links_kind", ["kind"], unique=False)

    op.create_table(
        "follow_results",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("canonical_id", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=20), nullable=False),
        sa.Column("failure", sa.String(length=30), nullable=True),
        sa.Column("http_status", sa.Integer(), nullable=True),
        sa.Column("final_id", sa.Integer(), nullable=True),
        sa.Column("hops", sa.Integer(), nullable=True),
        sa.Column("via", sa.String(length=20), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("first_attempt_at", UTC, nullable=False),
        sa.Column("last_attempt_at", UTC, nullable=False),
        sa.Column("next_attempt_at", UTC, nullable=True),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["canonical_id"], ["canonical_urls.id"],
                                name=op.f("fk_follow_results_canonical_id_canonical_urls")),
        sa.ForeignKeyConstraint(["final_id"], ["canonical_urls.id"],
                                name=op.f("fk_follow_results_final_id_canonical_urls")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_follow_results_run_id_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_follow_results")),
        sa.UniqueConstraint("canonical_id", name=op.f("uq_follow_results_canonical_id")),
    )
    with op.batch_alter_table("follow_results", schema=None) as batch_op:
        batch_op.create_index("ix_follow_results_state_next", ["state", "next_attempt_at"], unique=False)

    op.create_table(
        "follow_attempts",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("canonical_id", sa.Integer(), nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.Column("attempted_at", UTC, nullable=False),
        sa.Column("state", sa.String(length=20), nullable=False),
        sa.Column("failure", sa.String(length=30), nullable=True),
        sa.Column("http_status", sa.Integer(), nullable=True),
        sa.Column("final_id", sa.Integer(), nullable=True),
        sa.Column("hops", sa.Integer(), nullable=True),
        sa.Column("detail", sa.Text(), nullable=True),
        sa.ForeignKeyConstraint(["canonical_id"], ["canonical_urls.id"],
                                name=op.f("fk_follow_attempts_canonical_id_canonical_urls")),
        sa.ForeignKeyConstraint(["final_id"], ["canonical_urls.id"],
                                name=op.f("fk_follow_attempts_final_id_canonical_urls")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_follow_attempts_run_id_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_follow_attempts")),
    )
    with op.batch_alter_table("follow_attempts", schema=None) as batch_op:
        batch_op.create_index("ix_follow_attempts_canonical_id", ["canonical_id"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("follow_attempts", schema=None) as batch_op:
        batch_op.drop_index("ix_follow_attempts_canonical_id")
    op.drop_table("follow_attempts")
    with op.batch_alter_table("follow_results", schema=None) as batch_op:
        batch_op.drop_index("ix_follow_results_state_next")
    op.drop_table("follow_results")
    with op.batch_alter_table("links", schema=None) as batch_op:
        batch_op.drop_index("ix_links_kind")
        batch_op.drop_index("ix_links_dst_id")
        batch_op.drop_index("ix_links_src_id")
    op.drop_table("links")
