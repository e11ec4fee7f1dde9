"""sighting_links: the linkage table as a SQL view for projects that read the database directly

One row per sighting: dataset, row key, time, raw URL, canonical URL, url key, domain, outlet. Later
revisions that add article and story IDs recreate it with those columns.

Revision ID: 0002
Revises: 0001
"""

from __future__ import annotations

from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None

VIEW = """
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


def upgrade() -> None:
    op.execute(VIEW)


def downgrade() -> None:
    op.execute("DROP VIEW sighting_links")
