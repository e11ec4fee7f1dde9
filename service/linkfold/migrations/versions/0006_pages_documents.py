"""pages and documents: stored HTML responses, fetch outcomes, and extracted or loaded documents

``pages`` holds one stored response per canonical URL and body (fetched, or imported from WARC files,
page directories and JSONL), with only the headers that matter and a zlib-compressed body up to the size
cap. ``fetch_results`` is the latest fetch outcome per canonical URL (state, failure class, attempts, next
attempt time), in the shape of ``follow_results``. ``documents`` holds one document per page and extractor
version (or per loaded record), usable or marked ``no_text`` with the reason.

Revision ID: 0006
Revises: 0005
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None

UTC = sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "pages",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("canonical_id", sa.Integer(), nullable=False),
        sa.Column("requested_url", sa.Text(), nullable=False),
        sa.Column("final_url", sa.Text(), nullable=False),
        sa.Column("final_canonical_id", sa.Integer(), nullable=True),
        sa.Column("status", sa.Integer(), nullable=True),
        sa.Column("headers", sa.JSON(), nullable=True),
        sa.Column("body", sa.LargeBinary(), nullable=False),
        sa.Column("body_size", sa.BigInteger(), nullable=False),
        sa.Column("truncated", sa.Boolean(), nullable=False),
        sa.Column("body_sha256", sa.String(length=64), nullable=False),
        sa.Column("source", sa.Text(), nullable=False),
        sa.Column("fetched_at", UTC, nullable=True),
        sa.Column("stored_at", UTC, nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["canonical_id"], ["canonical_urls.id"],
                                name=op.f("fk_pages_canonical_id_canonical_urls")),
        sa.ForeignKeyConstraint(["final_canonical_id"], ["canonical_urls.id"],
                                name=op.f("fk_pages_final_canonical_id_canonical_urls")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_pages_run_id_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_pages")),
        sa.UniqueConstraint("canonical_id", "body_sha256", name=op.f("uq_pages_canonical_id_body_sha256")),
    )
    with op.batch_alter_table("pages", schema=None) as batch_op:
        batch_op.create_index("ix_pages_canonical_id", ["canonical_id"], unique=False)
        batch_op.create_index("ix_pages_final_canonical_id", ["final_canonical_id"], unique=False)

    op.create_table(
        "fetch_results",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("canonical_id", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=20), nullable=False),
        sa.Column("failure", sa.String(length=30), nullable=True),
        sa.Column("http_status", sa.Integer(), nullable=True),
        sa.Column("page_id", sa.Integer(), nullable=True),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("first_attempt_at", UTC, nullable=False),
        sa.Column("last_attempt_at", UTC, nullable=False),
        sa.Column("next_attempt_at", UTC, nullable=True),
        sa.Column("detail", sa.Text(), nullable=True),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["canonical_id"], ["canonical_urls.id"],
                                name=op.f("fk_fetch_results_canonical_id_canonical_urls")),
        sa.ForeignKeyConstraint(["page_id"], ["pages.id"], name=op.f("fk_fetch_results_page_id_pages")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_fetch_results_run_id_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_fetch_results")),
        sa.UniqueConstraint("canonical_id", name=op.f("uq_fetch_results_canonical_id")),
    )
    with op.batch_alter_table("fetch_results", schema=None) as batch_op:
        batch_op.create_index("ix_fetch_results_state_next", ["state", "next_attempt_at"], unique=False)

    op.create_table(
        "documents",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("canonical_id", sa.Integer(), nullable=False),
        sa.Column("page_id", sa.Integer(), nullable=True),
        sa.Column("title", sa.Text(), nullable=True),
        sa.Column("text", sa.Text(), nullable=True),
        sa.Column("text_hash", sa.String(length=64), nullable=True),
        sa.Column("word_count", sa.Integer(), nullable=False),
        sa.Column("author", sa.Text(), nullable=True),
        sa.Column("published", UTC, nullable=True),
        sa.Column("published_source", sa.String(length=40), nullable=True),
        sa.Column("language", sa.String(length=35), nullable=True),
        sa.Column("declared_canonical", sa.Text(), nullable=True),
        sa.Column("og_url", sa.Text(), nullable=True),
        sa.Column("amp_url", sa.Text(), nullable=True),
        sa.Column("status", sa.String(length=20), nullable=False),
        sa.Column("unusable_reason", sa.String(length=30), nullable=True),
        sa.Column("extractor_version", sa.String(length=80), nullable=False),
        sa.Column("source", sa.Text(), nullable=False),
        sa.Column("record_sha256", sa.String(length=64), nullable=True),
        sa.Column("created_at", UTC, nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["canonical_id"], ["canonical_urls.id"],
                                name=op.f("fk_documents_canonical_id_canonical_urls")),
        sa.ForeignKeyConstraint(["page_id"], ["pages.id"], name=op.f("fk_documents_page_id_pages")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_documents_run_id_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_documents")),
        sa.UniqueConstraint("page_id", "extractor_version", name=op.f("uq_documents_page_id_extractor_version")),
        sa.UniqueConstraint("record_sha256", name=op.f("uq_documents_record_sha256")),
    )
    with op.batch_alter_table("documents", schema=None) as batch_op:
        batch_op.create_index("ix_documents_canonical_id", ["canonical_id"], unique=False)
        batch_op.create_index("ix_documents_text_hash", ["text_hash"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("documents", schema=None) as batch_op:
        batch_op.drop_index("ix_documents_text_hash")
        batch_op.drop_index("ix_documents_canonical_id")
    op.drop_table("documents")
    with op.batch_alter_table("fetch_results", schema=None) as batch_op:
        batch_op.drop_index("ix_fetch_results_state_next")
    op.drop_table("fetch_results")
    with op.batch_alter_table("pages", schema=None) as batch_op:
        batch_op.drop_index("ix_pages_final_canonical_id")
        batch_op.drop_index("ix_pages_canonical_id")
    op.drop_table("pages")
