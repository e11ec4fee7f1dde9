"""follow_results.reason: why a URL was refused; rejects of parsed records lose their excerpts

``follow_results.reason`` holds a refusal's stable key (``private``, ``loopback`` … from the
request-forgery guard; ``robots_file``, ``robots_unavailable``; ``never_follow_hosts``), so that ``linkfold follow-report`` can
count refusals by reason and name the setting that would allow them. Refused URLs stored before are
given theirs from the text of their latest attempt, which has said it since migration 0004.

Rejects of records that were parsed keep no excerpt any more (docs/ingest.md, "What is stored"): their
other fields are personal data that the registry has no use for. Excerpts stored by earlier loads for such
rejects are removed here, and so is the value an earlier ``bad_time`` detail repeated. The downgrade
cannot bring them back, and must not.

Revision ID: 0016
Revises: 0017
"""

from __future__ import annotations

import re

import sqlalchemy as sa
from alembic import op

revision = "0016"
down_revision = "0017"
branch_labels = None
depends_on = None

# Reasons of rejects whose row was parsed (every reason but malformed_csv, invalid_utf8, line_too_long,
# and bad_json for text that is not JSON), as written by the loads before this revision.
PARSED = ("field_count", "missing_column", "missing_key", "bad_key", "missing_time", "bad_time", "not_text",
          "no_url")
BAD_TIME_DETAIL = "a value that is not a time; the sightings have no time"

_GUARD = re.compile(r" is ([a-z-]+)(?: \(embedded in [^)]*\))?; refused by the request-forgery guard")


def _reason(failure: str | None, detail: str | None) -> str | None:
    text = detail or ""
    if failure == "never_follow":
        return "never_follow_hosts"
    if failure == "robots":
        return "robots_file" if "disallows this URL" in text else "robots_unavailable"
    found = _GUARD.search(text)
    if found:
        return found.group(1)
    if "refused by the request-forgery guard" in text:
        return "not_an_address"
    return None


def upgrade() -> None:
    with op.batch_alter_table("follow_results") as batch:
        batch.add_column(sa.Column("reason", sa.String(40), nullable=True))
    conn = op.get_bind()
    fr = sa.table("follow_results", sa.column("id"), sa.column("canonical_id"), sa.column("state"),
                  sa.column("failure"), sa.column("reason"))
    fa = sa.table("follow_attempts", sa.column("id"), sa.column("canonical_id"), sa.column("state"),
                  sa.column("detail"))
    latest = (sa.select(fa.c.canonical_id, sa.func.max(fa.c.id).label("id"))
              .where(fa.c.state == "refused").group_by(fa.c.canonical_id).subquery())
    rows = conn.execute(sa.select(fr.c.id, fr.c.failure, fa.c.detail)
                        .select_from(fr.join(latest, latest.c.canonical_id == fr.c.canonical_id)
                                     .join(fa, fa.c.id == latest.c.id))
                        .where(fr.c.state == "refused")).all()
    updates = [{"b_id": rid, "reason": why} for rid, failure, detail in rows
               if (why := _reason(failure, detail)) is not None]
    if updates:
        conn.execute(sa.update(fr).where(fr.c.id == sa.bindparam("b_id")).values(reason=sa.bindparam("reason")),
                     updates)
    rj = sa.table("rejects", sa.column("reason"), sa.column("detail"), sa.column("excerpt"))
    conn.execute(sa.update(rj).where(rj.c.reason.in_(PARSED), rj.c.excerpt.is_not(None)).values(excerpt=None))
    conn.execute(sa.update(rj).where(rj.c.reason == "bad_json", rj.c.detail.like("the line is a JSON %"),
                                     rj.c.excerpt.is_not(None)).values(excerpt=None))
    conn.execute(sa.update(rj).where(rj.c.reason == "bad_time", rj.c.detail != BAD_TIME_DETAIL)
                 .values(detail=BAD_TIME_DETAIL))


def downgrade() -> None:
    # The removed excerpts and details stay removed: they were personal data kept by mistake.
    with op.batch_alter_table("follow_results") as batch:
        batch.drop_column("reason")
