"""dedupe: signatures, band keys, manual decisions, article and story IDs, stage marks

``signatures`` keeps one MinHash signature per signed document with its parameter record; ``band_keys``
holds its LSH band keys, indexed on (band, key) so candidate pairs come from a join in the database.
``decisions`` is the append-only log of a person's "same" / "different" verdicts. ``cluster_ids`` is every
article and story ID ever issued (founder, mint order, live or retired with its successor),
``cluster_members`` the current ID of every canonical URL at each level, ``id_events`` the history of
every ID (minted, merged_into, split_from) with its run and reason. ``stage_marks`` holds the high-water
marks that make the dedupe stage incremental. The ``sighting_links`` view is recreated with
``article_id`` and ``story_id``.

Revision ID: 0007
Revises: 0006
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0007"
down_revision = "0006"
branch_labels = None
depends_on = None

UTC = sa.DateTime(timezone=True)

VIEW_0002 = """
CREATE VIEW sighting_links AS
SELECT
    d.name        AS dataset,
    s.row_key     AS row_key,
    s.line_no     AS line_no,
    s.position    AS position,
    s.seen_at     AS seen_at,
    r.raw         AS raw_url,
    c.url         AS canonical_url,
    c.url_key     AS url_key,
    c.domain      AS domain,
    c.outlet      AS outlet,
    c.is_article  AS is_article,
    r.error       AS url_error,
    s.id          AS sighting_id
FROM sightings s
JOIN datasets d ON d.id = s.dataset_id
JOIN raw_urls r ON r.id = s.raw_url_id
LEFT JOIN canonical_urls c ON c.id = r.canonical_id
"""

VIEW_0007 = """
CREATE VIEW sighting_links AS
SELECT
    d.name        AS dataset,
    s.row_key     AS row_key,
    s.line_no     AS line_no,
    s.position    AS position,
    s.seen_at     AS seen_at,
    r.raw         AS raw_url,
    c.url         AS canonical_url,
    c.url_key     AS url_key,
    c.domain      AS domain,
    c.outlet      AS outlet,
    c.is_article  AS is_article,
    r.error       AS url_error,
    s.id          AS sighting_id,
    am.cluster_id AS article_id,
    sm.cluster_id AS story_id
FROM sightings s
JOIN datasets d ON d.id = s.dataset_id
JOIN raw_urls r ON r.id = s.raw_url_id
LEFT JOIN canonical_urls c ON c.id = r.canonical_id
LEFT JOIN cluster_members am ON am.canonical_id = c.id AND am.level = 'article'
LEFT JOIN cluster_members sm ON sm.canonical_id = c.id AND sm.level = 'story'
"""


def upgrade() -> None:
    op.create_table(
        "signatures",
        sa.Column("document_id", sa.Integer(), nullable=False),
        sa.Column("params", sa.String(length=120), nullable=False),
        sa.Column("signature", sa.LargeBinary(), nullable=False),
        sa.Column("created_at", UTC, nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["document_id"], ["documents.id"],
                                name=op.f("fk_signatures_document_id_documents")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_signatures_run_id_runs")),
        sa.PrimaryKeyConstraint("document_id", name=op.f("pk_signatures")),
    )
    op.create_table(
        "band_keys",
        sa.Column("document_id", sa.Integer(), nullable=False),
        sa.Column("band", sa.SmallInteger(), nullable=False),
        sa.Column("key", sa.BigInteger(), nullable=False),
        sa.ForeignKeyConstraint(["document_id"], ["signatures.document_id"],
                                name=op.f("fk_band_keys_document_id_signatures")),
        sa.PrimaryKeyConstraint("document_id", "band", name=op.f("pk_band_keys")),
    )
    with op.batch_alter_table("band_keys", schema=None) as batch_op:
        batch_op.create_index("ix_band_keys_band_key", ["band", "key"], unique=False)

    op.create_table(
        "decisions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("verdict", sa.String(length=20), nullable=False),
        sa.Column("level", sa.String(length=10), nullable=False),
        sa.Column("a_ref", sa.Text(), nullable=False),
        sa.Column("b_ref", sa.Text(), nullable=False),
        sa.Column("a_member", sa.Integer(), nullable=False),
        sa.Column("b_member", sa.Integer(), nullable=False),
        sa.Column("a_cluster", sa.String(length=24), nullable=True),
        sa.Column("b_cluster", sa.String(length=24), nullable=True),
        sa.Column("note", sa.Text(), nullable=True),
        sa.Column("decided_by", sa.String(length=200), nullable=False),
        sa.Column("decided_at", UTC, nullable=False),
        sa.ForeignKeyConstraint(["a_member"], ["canonical_urls.id"],
                                name=op.f("fk_decisions_a_member_canonical_urls")),
        sa.ForeignKeyConstraint(["b_member"], ["canonical_urls.id"],
                                name=op.f("fk_decisions_b_member_canonical_urls")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_decisions")),
    )
    with op.batch_alter_table("decisions", schema=None) as batch_op:
        batch_op.create_index("ix_decisions_level_pair", ["level", "a_member", "b_member"], unique=False)
        batch_op.create_index("ix_decisions_b_member", ["b_member"], unique=False)

    op.create_table(
        "cluster_ids",
        sa.Column("id", sa.String(length=24), nullable=False),
        sa.Column("level", sa.String(length=10), nullable=False),
        sa.Column("stem", sa.String(length=16), nullable=False),
        sa.Column("founder_id", sa.Integer(), nullable=False),
        sa.Column("mint_order", sa.BigInteger(), nullable=False),
        sa.Column("state", sa.String(length=10), nullable=False),
        sa.Column("successor", sa.String(length=24), nullable=True),
        sa.Column("minted_run", sa.Integer(), nullable=True),
        sa.Column("minted_at", UTC, nullable=False),
        sa.Column("retired_run", sa.Integer(), nullable=True),
        sa.Column("retired_at", UTC, nullable=True),
        sa.ForeignKeyConstraint(["founder_id"], ["canonical_urls.id"],
                                name=op.f("fk_cluster_ids_founder_id_canonical_urls")),
        sa.ForeignKeyConstraint(["minted_run"], ["runs.id"], name=op.f("fk_cluster_ids_minted_run_runs")),
        sa.ForeignKeyConstraint(["retired_run"], ["runs.id"], name=op.f("fk_cluster_ids_retired_run_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_cluster_ids")),
    )
    with op.batch_alter_table("cluster_ids", schema=None) as batch_op:
        batch_op.create_index("ix_cluster_ids_stem", ["stem"], unique=False)
        batch_op.create_index("ix_cluster_ids_level_order", ["level", "mint_order"], unique=False)

    op.create_table(
        "cluster_members",
        sa.Column("level", sa.String(length=10), nullable=False),
        sa.Column("canonical_id", sa.Integer(), nullable=False),
        sa.Column("cluster_id", sa.String(length=24), nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["canonical_id"], ["canonical_urls.id"],
                                name=op.f("fk_cluster_members_canonical_id_canonical_urls")),
        sa.ForeignKeyConstraint(["cluster_id"], ["cluster_ids.id"],
                                name=op.f("fk_cluster_members_cluster_id_cluster_ids")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_cluster_members_run_id_runs")),
        sa.PrimaryKeyConstraint("level", "canonical_id", name=op.f("pk_cluster_members")),
    )
    with op.batch_alter_table("cluster_members", schema=None) as batch_op:
        batch_op.create_index("ix_cluster_members_cluster_id", ["cluster_id"], unique=False)

    op.create_table(
        "id_events",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("cluster_id", sa.String(length=24), nullable=False),
        sa.Column("event", sa.String(length=20), nullable=False),
        sa.Column("other_id", sa.String(length=24), nullable=True),
        sa.Column("member_id", sa.Integer(), nullable=True),
        sa.Column("reason", sa.String(length=40), nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.Column("at", UTC, nullable=False),
        sa.ForeignKeyConstraint(["cluster_id"], ["cluster_ids.id"],
                                name=op.f("fk_id_events_cluster_id_cluster_ids")),
        sa.ForeignKeyConstraint(["member_id"], ["canonical_urls.id"],
                                name=op.f("fk_id_events_member_id_canonical_urls")),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_id_events_run_id_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_id_events")),
    )
    with op.batch_alter_table("id_events", schema=None) as batch_op:
        batch_op.create_index("ix_id_events_cluster_id", ["cluster_id"], unique=False)
        batch_op.create_index("ix_id_events_other_id", ["other_id"], unique=False)

    op.create_table(
        "stage_marks",
        sa.Column("name", sa.String(length=40), nullable=False),
        sa.Column("value", sa.BigInteger(), nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=True),
        sa.Column("updated_at", UTC, nullable=False),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], name=op.f("fk_stage_marks_run_id_runs")),
        sa.PrimaryKeyConstraint("name", name=op.f("pk_stage_marks")),
    )
    op.execute("DROP VIEW sighting_links")
    op.execute(VIEW_0007)


def downgrade() -> None:
    op.execute("DROP VIEW sighting_links")
    op.execute(VIEW_0002)
    op.drop_table("stage_marks")
    with op.batch_alter_table("id_events", schema=None) as batch_op:
        batch_op.drop_index("ix_id_events_other_id")
        batch_op.drop_index("ix_id_events_cluster_id")
    op.drop_table("id_events")
    with op.batch_alter_table("cluster_members", schema=None) as batch_op:
        batch_op.drop_index("ix_cluster_members_cluster_id")
    op.drop_table("cluster_members")
    with op.batch_alter_table("cluster_ids", schema=None) as batch_op:
        batch_op.drop_index("ix_cluster_ids_level_order")
        batch_op.drop_index("ix_cluster_ids_stem")
    op.drop_table("cluster_ids")
    with op.batch_alter_table("decisions", schema=None) as batch_op:
        batch_op.drop_index("ix_decisions_b_member")
        batch_op.drop_index("ix_decisions_level_pair")
    op.drop_table("decisions")
    with op.batch_alter_table("band_keys", schema=None) as batch_op:
        batch_op.drop_index("ix_band_keys_band_key")
    op.drop_table("band_keys")
    op.drop_table("signatures")
