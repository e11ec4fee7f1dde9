"""sightings without foreign keys or a dataset index; sighting_links gains the file name

``sightings`` is the one table that grows by millions of rows per load, and PostgreSQL checks a foreign
key with one query per inserted row: its three foreign keys and the index on ``dataset_id`` cost three
quarters of a bulk load's time (bench/ingest_bench.py, measure (d)). Every sighting is written by one
statement that resolves its raw URL by a join on ``raw_urls``' unique key, in the same transaction that
creates its dataset file, and no code deletes raw URLs, files or datasets, so the references cannot
dangle; ``tests/test_ingest_integrity.py`` checks that after every kind of load. Queries by dataset go
through the dataset's files and the (file_id, line_no, position) key.

``sighting_links`` is recreated with a ``file`` column (the dump file's name), as the export has.

Revision ID: 0009
Revises: 0008
"""

from __future__ import annotations

from alembic import op

revision = "0009"
down_revision = "0008"
branch_labels = None
depends_on = None

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

VIEW_0009 = """
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
    sm.cluster_id AS story_id,
    f.file_name   AS file
FROM sightings s
JOIN dataset_files f ON f.id = s.file_id
JOIN datasets d ON d.id = f.dataset_id
JOIN raw_urls r ON r.id = s.raw_url_id
LEFT JOIN canonical_urls c ON c.id = r.canonical_id
LEFT JOIN cluster_members am ON am.canonical_id = c.id AND am.level = 'article'
LEFT JOIN cluster_members sm ON sm.canonical_id = c.id AND sm.level = 'story'
"""

_FOREIGN_KEYS = (
    ("fk_sightings_dataset_id_datasets", "datasets", "dataset_id"),
    ("fk_sightings_file_id_dataset_files", "dataset_files", "file_id"),
    ("fk_sightings_raw_url_id_raw_urls", "raw_urls", "raw_url_id"),
)


def upgrade() -> None:
    # SQLite rebuilds the table to drop a constraint, and a view over it would stop the rebuild.
    op.execute("DROP VIEW sighting_links")
    with op.batch_alter_table("sightings", schema=None) as batch_op:
        for name, _table, _column in _FOREIGN_KEYS:
            batch_op.drop_constraint(name, type_="foreignkey")
        batch_op.drop_index("ix_sightings_dataset_id")
    op.execute(VIEW_0009)


def downgrade() -> None:
    op.execute("DROP VIEW sighting_links")
    with op.batch_alter_table("sightings", schema=None) as batch_op:
        batch_op.create_index("ix_sightings_dataset_id", ["dataset_id"], unique=False)
        for name, table, column in _FOREIGN_KEYS:
            batch_op.create_foreign_key(name, table, [column], ["id"])
    op.execute(VIEW_0007)
