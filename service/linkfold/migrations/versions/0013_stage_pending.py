"""stage_pending: what incremental stages still have to look at, recorded in the inserting transaction

On PostgreSQL ids are handed out when rows are inserted, not when they are committed, so the stage marks
("every row up to id N is done") passed over rows committed later with smaller ids (issue 16). From this
revision on, a statement-level trigger on each watched table writes the id range a statement inserted
into ``stage_pending`` in the same transaction, and the stages consume those entries
(``linkfold.store.pending``). The marks of the watched topics are converted: rows past a mark become an
entry, and rows at or below it that the stage evidently passed over are entered as well — canonical URLs
without an article ID, usable documents without a signature — so an existing registry heals on its next
run. ``dedupe.params`` (a settings fingerprint) stays a mark.

SQLite commits rows in id order (one writer at a time), so its marks stay; the table is created there
too, empty, so that both backends have one schema.

Revision ID: 0013
Revises: 0021
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0013"
down_revision = "0021"
branch_labels = None
depends_on = None

# (topic, table, id column); the same as linkfold.store.pending.TOPICS, written out: a migration must
# not change when the code does.
WATCHED = (
    ("dedupe.signed", "documents", "id"),
    ("dedupe.matched", "band_keys", "document_id"),
    ("dedupe.matched", "title_keys", "document_id"),
    ("dedupe.canonical", "canonical_urls", "id"),
    ("dedupe.links", "links", "id"),
    ("dedupe.decisions", "decisions", "id"),
)
TOPICS = sorted({topic for topic, _table, _column in WATCHED})

# The trigger function: one entry per statement that inserted rows (a statement inserting none writes
# nothing). The id column's name is the trigger's second argument, so the range is read with EXECUTE;
# the transition table is visible there as in static SQL.
_FUNCTION = """
CREATE FUNCTION lf_note_pending() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    EXECUTE format('INSERT INTO stage_pending (topic, lo, hi) '
                   'SELECT %L, min(%I), max(%I) FROM lf_new_rows HAVING count(*) > 0',
                   TG_ARGV[0], TG_ARGV[1], TG_ARGV[1]);
    RETURN NULL;
END
$$
"""

# Islands of consecutive ids in a set (gaps and islands): one entry per run of ids, not one per row.
_ISLANDS = """
INSERT INTO stage_pending (topic, lo, hi)
SELECT :topic, min(id), max(id)
FROM (SELECT id, id - row_number() OVER (ORDER BY id) AS grp FROM ({ids}) AS missed(id)) AS runs
GROUP BY grp
"""


def _trigger(table: str) -> str:
    return f"lf_pending_{table}"


def upgrade() -> None:
    op.create_table(
        "stage_pending",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer, "sqlite"), nullable=False),
        sa.Column("topic", sa.String(length=40), nullable=False),
        sa.Column("lo", sa.BigInteger(), nullable=False),
        sa.Column("hi", sa.BigInteger(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_stage_pending")),
    )
    op.create_index("ix_stage_pending_topic", "stage_pending", ["topic"])
    conn = op.get_bind()
    if conn.dialect.name != "postgresql":
        return
    op.execute(_FUNCTION)
    for topic, table, column in WATCHED:
        op.execute(f"CREATE TRIGGER {_trigger(table)} AFTER INSERT ON {table} "
                   f"REFERENCING NEW TABLE AS lf_new_rows FOR EACH STATEMENT "
                   f"EXECUTE FUNCTION lf_note_pending('{topic}', '{column}')")
    marks: dict[str, int] = {name: value for name, value in conn.execute(
        sa.text("SELECT name, value FROM stage_marks"))}
    for topic, table, column in WATCHED:
        mark = int(marks.get(topic) or 0)
        conn.execute(sa.text(f"INSERT INTO stage_pending (topic, lo, hi) SELECT :topic, min({column}), "
                             f"max({column}) FROM {table} WHERE {column} > :mark HAVING count(*) > 0"),
                     {"topic": topic, "mark": mark})
    # Rows at or below a mark that the stage passed over, where that can be told from the registry.
    passed_over = {
        "dedupe.canonical": "SELECT c.id FROM canonical_urls c WHERE c.id <= :mark AND NOT EXISTS "
                            "(SELECT 1 FROM cluster_members m WHERE m.canonical_id = c.id AND m.level = 'article')",
        "dedupe.signed": "SELECT d.id FROM documents d WHERE d.id <= :mark AND d.status = 'usable' AND NOT EXISTS "
                         "(SELECT 1 FROM signatures s WHERE s.document_id = d.id)",
    }
    for topic, ids in passed_over.items():
        mark = int(marks.get(topic) or 0)
        if mark:
            conn.execute(sa.text(_ISLANDS.format(ids=ids)), {"topic": topic, "mark": mark})
    conn.execute(sa.text("DELETE FROM stage_marks WHERE name IN :names")
                 .bindparams(sa.bindparam("names", expanding=True)), {"names": TOPICS})


def downgrade() -> None:
    conn = op.get_bind()
    if conn.dialect.name == "postgresql":
        for _topic, table, _column in WATCHED:
            op.execute(f"DROP TRIGGER IF EXISTS {_trigger(table)} ON {table}")
        op.execute("DROP FUNCTION IF EXISTS lf_note_pending()")
        # Back to marks: each stands just below the oldest row still pending (or at the newest row), so
        # nothing pending is lost; rows between are looked at again.
        for topic in TOPICS:
            newest = ", ".join(f"(SELECT max({column}) FROM {table})" for tp, table, column in WATCHED if tp == topic)
            value = conn.execute(sa.text(
                f"SELECT COALESCE((SELECT min(lo) - 1 FROM stage_pending WHERE topic = :topic), "
                f"GREATEST({newest}), 0)"), {"topic": topic}).scalar_one()
            conn.execute(sa.text("DELETE FROM stage_marks WHERE name = :topic"), {"topic": topic})
            conn.execute(sa.text("INSERT INTO stage_marks (name, value, run_id, updated_at) "
                                 "VALUES (:topic, :value, NULL, now())"), {"topic": topic, "value": int(value)})
    op.drop_index("ix_stage_pending_topic", table_name="stage_pending")
    op.drop_table("stage_pending")
