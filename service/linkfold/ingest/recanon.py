"""The re-canonicalisation stage: bring every raw URL under the newest stored ruleset.

When a lab stores a new ruleset (``linkfold rules load``), raw URLs canonicalised under older versions are
pending here. Each is canonicalised again; a new canonical URL gets a row of its own (canonical rows are
never changed or deleted), the raw URL's pointer moves to it, and the move is written to ``canon_changes``
(old → new, ruleset, run) so any earlier canonical URL can be traced forward.

Why here, in :mod:`linkfold.ingest`: it is the canonicalise arrow of the flow run a second time. Ingest
is the stage that turns raw URLs into canonical URLs as they arrive; this one does the same for the raw
URLs already stored, with the same canonicaliser and onto the same tables, so it sits in the same layer
and package (a stage over :mod:`linkfold.canon` and :mod:`linkfold.store`; its SQL is
:mod:`linkfold.store.recanon`). It imports no other stage, and the nightly job runs it first.

Work goes in keyset-ordered batches, one transaction each: killed midway, the next run picks up the raw
URLs still at the old version, and nothing is done twice.
"""

from __future__ import annotations

import logging
from collections import Counter
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from sqlalchemy.engine import Engine

from ..canon import Canonicaliser
from ..errors import InvalidURL
from ..progress import SILENT, Progress
from ..settings import Settings
from ..store.migrate import require_schema
from ..store.recanon import Recanonicalised, apply_recanon, count_recanon_pending, select_recanon_batch
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics

log = logging.getLogger("linkfold")

#: The run log's name of this stage.
STAGE = "recanonicalize"

DEFAULT_BATCH_SIZE = 5000


@dataclass
class RecanonSummary:
    """What one re-canonicalisation run did; ``errors`` counts raw URLs the ruleset refuses, by reason."""

    ruleset_version: int
    examined: int = 0
    moved: int = 0
    unchanged: int = 0
    new_canonical: int = 0
    restated: int = 0  # stored canonical URLs with a new is_article or outlet under the new rules
    errors: Counter[str] = field(default_factory=Counter)
    run_id: int | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"run_id": self.run_id, "ruleset_version": self.ruleset_version, "examined": self.examined,
                "moved": self.moved, "unchanged": self.unchanged, "new_canonical": self.new_canonical,
                "restated": self.restated, "invalid": sum(self.errors.values()), "invalid_by_reason": dict(sorted(self.errors.items()))}

    def lines(self) -> list[str]:
        if not self.examined:
            return [f"recanonicalize: nothing pending; every raw URL is under ruleset {self.ruleset_version}"]
        out = [f"re-canonicalised under ruleset {self.ruleset_version}: {self.examined:,} raw URLs, "
               f"{self.moved:,} moved to another canonical URL, {self.unchanged:,} unchanged, "
               f"{self.new_canonical:,} new canonical URLs, {self.restated:,} with a new article status or "
               f"outlet (run {self.run_id})"]
        if self.errors:
            out.append("  invalid: " + ", ".join(f"{k} {v:,}" for k, v in sorted(self.errors.items())))
        return out


def count_pending(engine: Engine, *, settings: Settings | None = None) -> int:
    """Raw URLs not yet canonicalised under the newest ruleset (0 when no ruleset is stored yet)."""
    with engine.connect() as conn:
        return count_recanon_pending(conn)


def recanonicalize(engine: Engine, *, settings: Settings | None = None, batch_size: int | None = None,
                   cache_size: int | None = None, progress: Progress = SILENT,
                   parent_run: int | None = None) -> RecanonSummary:
    """Canonicalise again every raw URL under an older ruleset than the newest (see the module doc).

    ``batch_size`` and ``cache_size`` default to the settings' ``batch_size`` and ``canon_cache_size``.
    Records a run (a child of ``parent_run`` when given) even when nothing is pending, so the run log
    says the registry was checked.
    """
    require_schema(engine)
    batch = batch_size or (settings.batch_size if settings is not None else DEFAULT_BATCH_SIZE)
    cache = cache_size or (settings.canon_cache_size if settings is not None else 65536)
    with engine.begin() as conn:
        version, rules = latest_ruleset(conn)
        total = count_recanon_pending(conn, version)
    summary = RecanonSummary(ruleset_version=version)
    canon = Canonicaliser(rules, cache_size=cache)
    progress.start("re-canonicalising", total)
    with recording_run(engine, STAGE, parent_id=parent_run) as run:
        summary.run_id = run.id
        last_id = 0
        try:
            while True:
                with engine.begin() as conn:
                    rows = select_recanon_batch(conn, version, after_id=last_id, limit=batch)
                    if not rows:
                        break
                    last_id = rows[-1].id
                    outcomes = [_outcome(canon, row.id, row.canonical_id, row.raw, summary) for row in rows]
                    moved = apply_recanon(conn, outcomes, version=version, run_id=run.id, at=datetime.now(UTC))
                summary.examined += len(rows)
                summary.moved += moved.moved
                summary.unchanged += moved.unchanged
                summary.new_canonical += moved.new_canonical
                summary.restated += moved.restated
                run.counts = summary.as_dict()
                progress.advance(len(rows))
        finally:
            run.counts = summary.as_dict()
            progress.finish()
    if summary.examined:
        refresh_statistics(engine, ["raw_urls"], changed={"canonical_urls": summary.new_canonical,
                                                          "canon_changes": summary.moved})
    log.info("recanonicalize: %s", summary.as_dict())
    return summary


def _outcome(canon: Canonicaliser, raw_id: int, old_id: int | None, raw: str,
             summary: RecanonSummary) -> Recanonicalised:
    try:
        c = canon(raw)
    except InvalidURL as exc:
        summary.errors[exc.reason] += 1
        return Recanonicalised(raw_id, old_id, None, exc.reason)
    return Recanonicalised(raw_id, old_id, {"url_key": c.url_key, "url": c.url, "host": c.host,
                                            "domain": c.domain, "outlet": c.outlet, "is_article": c.is_article})


__all__ = ["STAGE", "RecanonSummary", "count_pending", "recanonicalize"]
