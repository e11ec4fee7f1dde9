"""What a link stands for: canonical_urls.final_id, ruleset_hosts, and the final columns of sighting_links

``canonical_urls.final_id`` names the canonical URL a URL leads to at the end of its followed chains,
resolved transitively (NULL when none leads elsewhere). It has no foreign key and no index (store/tables.py
says why), so a bulk load, which inserts NULLs, pays nothing for it; which links lead to a URL is found
through a new index on ``follow_results.final_id``. ``ruleset_hosts`` records each
ruleset's shortener hosts, so SQL can tell a short link that was never followed: its final columns are
NULL. The view gains ``final_url``, ``final_domain``, ``final_outlet`` and ``final_is_article`` at its end.

The upgrade fills both from what is stored: the shortener hosts of every ruleset (parsed from its stored
source) and the end of every resolved chain (follow_results), as ``store/finals.py`` does.

Revision ID: 0012
Revises: 0011
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0012"
down_revision = "0011"
branch_labels = None
depends_on = None

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

# A URL stands for itself (final_id NULL) or for the URL final_id names; nothing is known when that URL
# is on a shortener host of the newest ruleset. Both joins find at most one row (primary keys), the first
# only for the few URLs that lead elsewhere.


def _final(column: str) -> str:
    return f"CASE WHEN sh.host IS NOT NULL THEN NULL WHEN c.final_id IS NULL THEN c.{column} ELSE fc.{column} END"


VIEW_0012 = f"""
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
    {_final("outlet")} AS final_outlet,
    {_final("is_article")} AS final_is_article
FROM sightings s
JOIN dataset_files f ON f.id = s.file_id
JOIN datasets d ON d.id = f.dataset_id
JOIN raw_urls r ON r.id = s.raw_url_id
LEFT JOIN canonical_urls c ON c.id = r.canonical_id
LEFT JOIN canonical_urls fc ON fc.id = c.final_id
LEFT JOIN ruleset_hosts sh ON sh.host = COALESCE(fc.host, c.host) AND sh.role = 'shortener'
    AND sh.ruleset_id = (SELECT max(rs.id) FROM rulesets rs)
LEFT JOIN cluster_members am ON am.canonical_id = c.id AND am.level = 'article'
LEFT JOIN cluster_members sm ON sm.canonical_id = c.id AND sm.level = 'story'
"""

_MAX_DEPTH = 64


def _backfill_hosts(conn: sa.Connection) -> None:
    from linkfold.canon import parse_rules
    from linkfold.errors import RulesError

    rows = []
    for rid, source in conn.execute(sa.text("SELECT id, source FROM rulesets ORDER BY id")):
        try:
            hosts = parse_rules(source, source=f"ruleset version {rid}").shortener_hosts
        except RulesError:
            continue  # a ruleset this linkfold cannot read any more is not in force either
        rows += [{"r": rid, "h": h} for h in sorted(hosts)]
    if rows:
        conn.execute(sa.text("INSERT INTO ruleset_hosts (ruleset_id, role, host) VALUES (:r, 'shortener', :h)"),
                     rows)


def _backfill_finals(conn: sa.Connection) -> None:
    """final_id of every URL with a follow outcome leading elsewhere: the target of the last resolved
    chain on its walk (store/finals.py, ``end_of``)."""
    edges = {int(a): (int(b), state == "resolved") for a, b, state in conn.execute(sa.text(
        "SELECT canonical_id, final_id, state FROM follow_results WHERE final_id IS NOT NULL "
        "AND final_id <> canonical_id"))}
    updates = []
    for start in edges:
        end, path, here = None, {start}, start
        while here in edges:
            here, resolved = edges[here]
            if here in path or len(path) > _MAX_DEPTH:
                end = None
                break
            path.add(here)
            if resolved:
                end = here
        if end is not None:
            updates.append({"i": start, "f": end})
    for i in range(0, len(updates), 10000):
        conn.execute(sa.text("UPDATE canonical_urls SET final_id = :f WHERE id = :i"), updates[i:i + 10000])


def upgrade() -> None:
    conn = op.get_bind()
    op.create_table(
        "ruleset_hosts",
        sa.Column("ruleset_id", sa.Integer(), nullable=False),
        sa.Column("role", sa.String(length=20), nullable=False),
        sa.Column("host", sa.String(length=255), nullable=False),
        sa.ForeignKeyConstraint(["ruleset_id"], ["rulesets.id"], name=op.f("fk_ruleset_hosts_ruleset_id_rulesets")),
        sa.PrimaryKeyConstraint("ruleset_id", "role", "host", name=op.f("pk_ruleset_hosts")),
    )
    # A plain ADD COLUMN on both backends (no table rebuild on SQLite, where canonical_urls is referenced
    # by most tables).
    op.execute("ALTER TABLE canonical_urls ADD COLUMN final_id INTEGER")
    with op.batch_alter_table("follow_results", schema=None) as batch_op:
        batch_op.create_index("ix_follow_results_final_id", ["final_id"], unique=False)
    _backfill_hosts(conn)
    _backfill_finals(conn)
    op.execute("DROP VIEW sighting_links")
    op.execute(VIEW_0012)


def downgrade() -> None:
    op.execute("DROP VIEW sighting_links")
    with op.batch_alter_table("follow_results", schema=None) as batch_op:
        batch_op.drop_index("ix_follow_results_final_id")
    op.execute("ALTER TABLE canonical_urls DROP COLUMN final_id")  # SQLite 3.35 or newer
    op.drop_table("ruleset_hosts")
    op.execute(VIEW_0009)
