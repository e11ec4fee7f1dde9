"""raw and canonical URLs without foreign-key checks on PostgreSQL

A bulk load inserts each new raw URL and canonical URL once, and PostgreSQL checks a foreign key with a
query per inserted row that also takes a share lock on the referenced row (``SELECT … FOR KEY SHARE``):
for ``raw_urls.canonical_id``, ``raw_urls.ruleset_id`` and ``canonical_urls.ruleset_id`` that was about a
third of the time PostgreSQL spent storing a new URL (EXPLAIN ANALYZE of a load's batch, "Trigger for
constraint" lines; bench/ingest_bench.py). Every writer of these columns takes the value from a row it
reads in the same transaction (the canonical URL joined on its url key, the ruleset it resolved), and no
code deletes rulesets or canonical URLs, so the references cannot dangle;
``tests/test_ingest_integrity.py`` checks them after loads and a re-canonicalisation.

SQLite keeps the three constraints: its check is a plain index probe, without a lock, and dropping a
constraint there means rebuilding a table that other tables reference.

Revision ID: 0010
Revises: 0009
"""

from __future__ import annotations

from alembic import op

revision = "0010"
down_revision = "0009"
branch_labels = None
depends_on = None

# name, table, column, referenced table (as in store/tables.py: UNENFORCED_ON_POSTGRESQL)
_FOREIGN_KEYS = (
    ("fk_raw_urls_canonical_id_canonical_urls", "raw_urls", "canonical_id", "canonical_urls"),
    ("fk_raw_urls_ruleset_id_rulesets", "raw_urls", "ruleset_id", "rulesets"),
    ("fk_canonical_urls_ruleset_id_rulesets", "canonical_urls", "ruleset_id", "rulesets"),
)


def upgrade() -> None:
    if op.get_bind().dialect.name != "postgresql":
        return
    for name, table, _column, _target in _FOREIGN_KEYS:
        op.drop_constraint(name, table, type_="foreignkey")


def downgrade() -> None:
    if op.get_bind().dialect.name != "postgresql":
        return
    for name, table, column, target in _FOREIGN_KEYS:
        op.create_foreign_key(name, table, target, [column], ["id"])
