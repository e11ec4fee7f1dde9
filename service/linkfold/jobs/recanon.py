"""Re-canonicalisation: bring every raw URL under the newest stored ruleset.

When a lab stores a new ruleset (``linkfold rules add``), raw URLs canonicalised under older versions
are pending here. Each is canonicalised again; a new canonical URL gets a row of its own (canonical rows
are never changed or deleted), the raw URL's pointer moves to it, and the move is written to
``canon_changes`` (old → new, ruleset, run) so any earlier canonical URL can be traced forward.

Work goes in keyset-ordered batches, one transaction each: killed midway, the next run picks up the
raw URLs still at the old version, and nothing is done twice.
"""

from __future__ import annotations

import logging
from collections import Counter
from dataclasses import dataclass, field
from datetime import UTC, datetime

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from ..canon import Canonicaliser
from ..errors import InvalidURL
from ..progress import SILENT, Progress
from ..store import insert_new_rows
from ..store import tables as t
from ..store.rulesets import latest_ruleset

log = logging.getLogger("linkfold")


@dataclass
class RecanonSummary:
    ruleset_version: int
    examined: int = 0
    moved: int = 0
    unchanged: int = 0
    new_canonical: int = 0
    errors: Counter = field(default_factory=Counter)

    def counts(self) -> dict[str, int]:
        return {"examined": self.examined, "moved": self.moved, "unchanged": self.unchanged,
                "new_canonical": self.new_canonical, "invalid": sum(self.errors.values())}

    def lines(self) -> list[str]:
        c = self.counts()
        out = [f"re-canonicalised under ruleset {self.ruleset_version}: {c['examined']:,} raw URLs, "
               f"{c['moved']:,} moved to another canonical URL, {c['unchanged']:,} unchanged, "
               f"{c['new_canonical']:,} new canonical URLs"]
        if self.errors:
            out.append("  invalid: " + ", ".join(f"{k} {v:,}" for k, v in sorted(self.errors.items())))
        return out


def _pending_filter(version: int):
    return sa.or_(t.raw_urls.c.ruleset_id.is_(None), t.raw_urls.c.ruleset_id != version)


def count_pending(engine: Engine) -> int:
    """Raw URLs not yet canonicalised under the newest ruleset (0 when no ruleset is stored yet)."""
    with engine.connect() as conn:
        version = conn.execute(sa.select(sa.func.max(t.rulesets.c.id))).scalar()
        if version is None:
            return 0
        return conn.execute(sa.select(sa.func.count()).select_from(t.raw_urls)
                            .where(_pending_filter(version))).scalar_one()


def recanonicalize(engine: Engine, *, batch_size: int = 5000, cache_size: int = 65536,
                   run_id: int | None = None, progress: Progress = SILENT) -> RecanonSummary:
    with engine.begin() as conn:
        version, rules = latest_ruleset(conn)
    summary = RecanonSummary(ruleset_version=version)
    canon = Canonicaliser(rules, cache_size=cache_size)
    progress.start("re-canonicalising", count_pending(engine))
    last_id = 0
    while True:
        with engine.begin() as conn:
            batch = conn.execute(
                sa.select(t.raw_urls.c.id, t.raw_urls.c.raw, t.raw_urls.c.canonical_id)
                .where(_pending_filter(version)).where(t.raw_urls.c.id > last_id)
                .order_by(t.raw_urls.c.id).limit(batch_size)).all()
            if not batch:
                break
            last_id = batch[-1].id
            _apply_batch(conn, batch, canon, version, run_id, summary)
        progress.advance(len(batch))
    progress.finish()
    log.info("recanonicalize: %s", summary.counts())
    return summary


def _apply_batch(conn: sa.Connection, batch, canon: Canonicaliser, version: int, run_id: int | None,
                 summary: RecanonSummary) -> None:
    now = datetime.now(UTC)
    results: list[tuple[int, int | None, object]] = []  # (raw id, old canonical id, Canonical | reason)
    new_rows: dict[str, dict] = {}
    for row in batch:
        try:
            c = canon(row.raw)
        except InvalidURL as exc:
            results.append((row.id, row.canonical_id, exc.reason))
            summary.errors[exc.reason] += 1
            continue
        results.append((row.id, row.canonical_id, c))
        new_rows.setdefault(c.url_key, {
            "url_key": c.url_key, "url": c.url, "host": c.host, "domain": c.domain, "outlet": c.outlet,
            "is_article": c.is_article, "ruleset_id": version, "created_at": now})
    rows = list(new_rows.values())
    summary.new_canonical += insert_new_rows(conn, t.canonical_urls, rows, ["url_key"])
    ids: dict[str, int] = {}
    keys = list(new_rows)
    for i in range(0, len(keys), 500):
        chunk = keys[i:i + 500]
        ids.update(conn.execute(sa.select(t.canonical_urls.c.url_key, t.canonical_urls.c.id)
                                .where(t.canonical_urls.c.url_key.in_(chunk))).all())
    updates, changes = [], []
    for raw_id, old_id, outcome in results:
        if isinstance(outcome, str):
            new_id, error = None, outcome
        else:
            new_id, error = ids[outcome.url_key], None  # type: ignore[attr-defined]
        updates.append({"b_id": raw_id, "b_canonical_id": new_id, "b_error": error})
        summary.examined += 1
        if new_id != old_id:
            summary.moved += 1
            changes.append({"raw_url_id": raw_id, "old_canonical_id": old_id, "new_canonical_id": new_id,
                            "ruleset_id": version, "run_id": run_id, "changed_at": now})
        else:
            summary.unchanged += 1
    conn.execute(
        t.raw_urls.update().where(t.raw_urls.c.id == sa.bindparam("b_id"))
        .values(canonical_id=sa.bindparam("b_canonical_id"), error=sa.bindparam("b_error"),
                ruleset_id=version),
        updates)
    if changes:
        conn.execute(t.canon_changes.insert(), changes)
