"""The outlet list in force names the final outlet of sighting_links

``final_outlet`` of the view becomes the outlet that the outlet list in force (the newest ``outlet_lists``
row) gives the final URL's host, else its registered domain, else the canonicaliser's outlet as before
(docs/outlets.md), as ``store.finals.FinalsJoin`` reads it for the export, lookup and clusters. Two outer
joins on ``outlet_entries``' unique key (list_id, match); without a list they match nothing and the view
gives what it gave. No table changes.

Revision ID: 0021
Revises: 0015
"""

from __future__ import annotations

from alembic import op

revision = "0021"
down_revision = "0015"
branch_labels = None
depends_on = None


def _final(column: str) -> str:
    return f"CASE WHEN sh.host IS NOT NULL THEN NULL WHEN c.final_id IS NULL THEN c.{column} ELSE fc.{column} END"


def _view(final_outlet: str, outlet_joins: str) -> str:
    return f"""
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
    f.file_name   AS file,
    {_final("url")} AS final_url,
    {_final("domain")} AS final_domain,
    {final_outlet} AS final_outlet,
    {_final("is_article")} AS final_is_article
FROM sightings s
JOIN dataset_files f ON f.id = s.file_id
JOIN datasets d ON d.id = f.dataset_id
JOIN raw_urls r ON r.id = s.raw_url_id
LEFT JOIN canonical_urls c ON c.id = r.canonical_id
LEFT JOIN canonical_urls fc ON fc.id = c.final_id
LEFT JOIN ruleset_hosts sh ON sh.host = COALESCE(fc.host, c.host) AND sh.role = 'shortener'
    AND sh.ruleset_id = (SELECT max(rs.id) FROM rulesets rs)
{outlet_joins}LEFT JOIN cluster_members am ON am.canonical_id = c.id AND am.level = 'article'
LEFT JOIN cluster_members sm ON sm.canonical_id = c.id AND sm.level = 'story'
"""


VIEW_0012 = _view(_final("outlet"), "")

VIEW_0021 = _view(
    "CASE WHEN sh.host IS NOT NULL THEN NULL ELSE COALESCE(foh.outlet, fod.outlet, "
    "CASE WHEN c.final_id IS NULL THEN c.outlet ELSE fc.outlet END) END",
    "LEFT JOIN outlet_entries foh ON foh.list_id = (SELECT max(ol.id) FROM outlet_lists ol)\n"
    "    AND foh.match = COALESCE(fc.host, c.host)\n"
    "LEFT JOIN outlet_entries fod ON fod.list_id = (SELECT max(ol.id) FROM outlet_lists ol)\n"
    "    AND fod.match = COALESCE(fc.domain, c.domain)\n")


def upgrade() -> None:
    op.execute("DROP VIEW sighting_links")
    op.execute(VIEW_0021)


def downgrade() -> None:
    op.execute("DROP VIEW sighting_links")
    op.execute(VIEW_0012)
