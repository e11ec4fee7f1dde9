"""One naming for states and reasons: ``state`` for where a row stands, ``reason`` for a key saying why,
``detail`` for words for people

Before, three tables said ``status`` where four said ``state``, and why something went wrong was
``error`` (a key in ``raw_urls``, words in ``runs``), ``reason`` or ``unusable_reason``. Renamed here
(docs/vocabulary.md, "Columns"):

- ``runs.status`` → ``state``, ``runs.error`` → ``detail`` (words for people, like ``fetch_results.detail``)
- ``dataset_files.status`` → ``state``
- ``documents.status`` → ``state``, ``documents.unusable_reason`` → ``reason``
- ``raw_urls.error`` → ``reason`` (the canonicaliser's key, as in ``rejects.reason``)

``status`` now means an HTTP status only (``links.status``, ``pages.status``; ``http_status`` in the
result tables). ``failure`` stays: the class of a failed or refused follow or fetch, beside the finer
refusal ``reason`` of ``follow_results``.

Both backends rename in place (``ALTER TABLE … RENAME COLUMN``; SQLite has it since 3.25), so no table is
copied, however large ``raw_urls`` is. The ``sighting_links`` view reads ``raw_urls.error``: it is dropped
first and created again with ``url_reason``, and ``url_error`` beside it for one release (deprecated).

Revision ID: 0022
Revises: 0023
"""

from __future__ import annotations

from alembic import op

revision = "0022"
down_revision = "0023"
branch_labels = None
depends_on = None

RENAMES = (
    ("runs", "status", "state"),
    ("runs", "error", "detail"),
    ("dataset_files", "status", "state"),
    ("documents", "status", "state"),
    ("documents", "unusable_reason", "reason"),
    ("raw_urls", "error", "reason"),
)


def _final(column: str) -> str:
    return f"CASE WHEN sh.host IS NOT NULL THEN NULL WHEN c.final_id IS NULL THEN c.{column} ELSE fc.{column} END"


# The view as migration 0021 left it, with the raw URL's reason column named by ``reason_columns``:
# written out, because a migration must not change when the code or another migration does.
def _view(reason_columns: str) -> str:
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
    {reason_columns},
    s.id          AS sighting_id,
    am.cluster_id AS article_id,
    sm.cluster_id AS story_id,
    f.file_name   AS file,
    {_final("url")} AS final_url,
    {_final("domain")} AS final_domain,
    CASE WHEN sh.host IS NOT NULL THEN NULL ELSE COALESCE(foh.outlet, fod.outlet,
        CASE WHEN c.final_id IS NULL THEN c.outlet ELSE fc.outlet END) END AS final_outlet,
    {_final("is_article")} AS final_is_article
FROM sightings s
JOIN dataset_files f ON f.id = s.file_id
JOIN datasets d ON d.id = f.dataset_id
JOIN raw_urls r ON r.id = s.raw_url_id
LEFT JOIN canonical_urls c ON c.id = r.canonical_id
LEFT JOIN canonical_urls fc ON fc.id = c.final_id
LEFT JOIN ruleset_hosts sh ON sh.host = COALESCE(fc.host, c.host) AND sh.role = 'shortener'
    AND sh.ruleset_id = (SELECT max(rs.id) FROM rulesets rs)
LEFT JOIN outlet_entries foh ON foh.list_id = (SELECT max(ol.id) FROM outlet_lists ol)
    AND foh.match = COALESCE(fc.host, c.host)
LEFT JOIN outlet_entries fod ON fod.list_id = (SELECT max(ol.id) FROM outlet_lists ol)
    AND fod.match = COALESCE(fc.domain, c.domain)
LEFT JOIN cluster_members am ON am.canonical_id = c.id AND am.level = 'article'
LEFT JOIN cluster_members sm ON sm.canonical_id = c.id AND sm.level = 'story'
"""


VIEW_0021 = _view("r.error       AS url_error")
# url_error: the old name of url_reason, kept for one release (docs/vocabulary.md, "Deprecated").
VIEW_0022 = _view("r.reason      AS url_reason,\n    r.reason      AS url_error")


def _rename(table: str, old: str, new: str) -> None:
    op.execute(f'ALTER TABLE {table} RENAME COLUMN "{old}" TO "{new}"')


def upgrade() -> None:
    op.execute("DROP VIEW sighting_links")
    for table, old, new in RENAMES:
        _rename(table, old, new)
    op.execute(VIEW_0022)


def downgrade() -> None:
    op.execute("DROP VIEW sighting_links")
    for table, old, new in reversed(RENAMES):
        _rename(table, new, old)
    op.execute(VIEW_0021)
