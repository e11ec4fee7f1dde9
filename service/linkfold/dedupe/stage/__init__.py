"""The dedupe stage: sign, match, verify and cluster what is pending, over the database.

:func:`run_dedupe` runs the four steps in order, each resumable on its own (docs/dedupe.md, "The
stage"): signing and matching move their marks batch by batch, clustering recomputes the regions of its
seeds one transaction at a time and moves its marks at the end, so a killed run is picked up by the next
one and gives the same result. The maths lives in the pure modules of :mod:`linkfold.dedupe`; this
package only reads and writes rows around it.

Two dedupe runs at once would mint IDs for one cluster twice, so :func:`run_dedupe` holds the registry
lock (:mod:`linkfold.store.locks`), called from the CLI, the API or a script alike; inside the nightly
job, which holds the lock already, it runs under the job's hold.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.engine import Engine

from ...executor import Executor
from ...progress import SILENT, Progress
from ...settings import Settings
from ...store import pending as pq
from ...store.canonicals import all_canonical_ids
from ...store.locks import hold_lock
from ...store.migrate import require_schema
from ...store.runs import recording_run
from ...store.stats import refresh_statistics
from .. import SignatureParams, Thresholds
from .decisions import Decision, DecisionResult, list_decisions, record_decision, resolve_ref
from .inspect import (
    ClusterDetail,
    ClusterRow,
    list_clusters,
    resolve_cluster_id,
    show_cluster,
    similarity_values,
    thresholds_report,
)
from .matching import MatchCounts, count_unmatched, match_pending
from .regions import (
    ClusterCounts,
    advance_marks,
    cluster_seeds,
    count_pending_clustering,
    pending_ranges,
    seeds_of,
)
from .signing import MATCHED, SignCounts, count_unsigned, refresh_signatures, settings_changed, sign_pending
from .sinks import Sink, list_sinks, policy_changed, policy_seeds, record_policy

log = logging.getLogger("linkfold")

#: The run log's name of this stage.
STAGE = "dedupe"


@dataclass
class DedupeSummary:
    run_id: int | None = None
    full: bool = False
    signing: SignCounts = field(default_factory=SignCounts)
    matching: MatchCounts = field(default_factory=MatchCounts)
    articles: ClusterCounts = field(default_factory=lambda: ClusterCounts("article"))
    stories: ClusterCounts = field(default_factory=lambda: ClusterCounts("story"))
    seconds: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        return {"run_id": self.run_id, "full": self.full, "signing": vars(self.signing), "matching": vars(self.matching),
                "articles": self.articles.as_dict(), "stories": self.stories.as_dict(),
                "seconds": round(self.seconds, 3)}

    def lines(self) -> list[str]:
        s, m, a, st = self.signing, self.matching, self.articles, self.stories
        out = [f"signed {s.signed:,} documents ({s.empty:,} without shingles; {s.rebanded + s.resigned:,} "
               f"brought to new settings)",
               f"matched {m.matched:,} documents: {m.candidates:,} candidate pairs, {m.same_text:,} same text, "
               f"{m.similar_text:,} similar, {m.rejected:,} rejected; {m.links_written:,} new links",
               f"articles: {a.members:,} URLs in touched regions, {a.minted:,} new IDs, {a.merged:,} merged, "
               f"{a.split:,} split off, {a.moved:,} URLs moved",
               f"stories: {st.members:,} URLs in touched regions, {st.minted:,} new IDs, {st.merged:,} merged, "
               f"{st.split:,} split off, {st.moved:,} URLs moved",
               f"links kept as evidence but not used (into a sink, or touching a never-article host): "
               f"{a.sink_links + st.sink_links:,}",
               f"done in {self.seconds:.1f} s"]
        if m.oversize_buckets:
            out.append(f"  skipped {m.oversize_buckets:,} band-key bucket(s) larger than lsh_max_bucket "
                       f"(largest {m.largest_bucket:,})")
        for conflict in a.conflicts + st.conflicts:
            out.append(f"  conflict: {conflict}")
        return out


def count_pending(engine: Engine, *, settings: Settings | None = None) -> int:
    """Rows the dedupe stage has not yet taken into account (0: a run would change nothing)."""
    with engine.connect() as conn:
        n = count_unsigned(conn) + count_unmatched(conn) + count_pending_clustering(conn)
        if settings is not None and settings_changed(conn, SignatureParams.from_settings(settings)):
            n += 1
        if settings is not None and policy_changed(conn, settings):
            n += 1
        return n


def run_dedupe(engine: Engine, *, settings: Settings, full: bool = False, parent_run: int | None = None,
               progress: Progress = SILENT, executor: Executor | None = None) -> DedupeSummary:
    """Sign, match, verify and cluster everything pending; with ``full``, match every current document
    again and recluster the whole registry (after lowering a threshold; also the benchmark baseline).

    Holds the registry lock for the run: raises :class:`~linkfold.errors.LockHeld`, naming the holder,
    while another process holds it. ``parent_run`` is the run this one is a step of (a job's).
    Signing goes through ``executor`` (default: the one the settings choose for the work pending).
    """
    require_schema(engine)
    with hold_lock(engine, reentrant=True):
        return _run_dedupe(engine, settings=settings, full=full, parent_run=parent_run, progress=progress,
                           executor=executor)


def _run_dedupe(engine: Engine, *, settings: Settings, full: bool, parent_run: int | None,
                progress: Progress, executor: Executor | None) -> DedupeSummary:
    params = SignatureParams.from_settings(settings)
    thresholds = Thresholds.from_settings(settings)
    summary = DedupeSummary(full=full)
    started = time.monotonic()
    with recording_run(engine, STAGE, parent_id=parent_run) as run:
        summary.run_id = run.id
        with engine.connect() as conn:
            changed = settings_changed(conn, params)
        if changed:
            log.info("signature settings changed to %s: bringing stored signatures up to date", params.band_token)
            summary.signing = refresh_signatures(engine, params, run_id=run.id, batch_size=settings.batch_size,
                                                 progress=progress)
        elif full:
            with engine.begin() as conn:
                pq.reset(conn, MATCHED, run_id=run.id)
        signed = sign_pending(engine, params, run_id=run.id, batch_size=settings.batch_size, progress=progress,
                              settings=settings, executor=executor)
        summary.signing.signed += signed.signed
        summary.signing.empty += signed.empty
        summary.signing.superseded += signed.superseded
        summary.signing.titled += signed.titled
        run.counts = summary.as_dict()
        summary.matching = match_pending(engine, params, thresholds, max_bucket=settings.lsh_max_bucket,
                                         run_id=run.id, progress=progress)
        run.counts = summary.as_dict()
        story_extra: set[int]
        with engine.connect() as conn:
            pending = pending_ranges(conn)
            if full:
                article_seeds, story_extra = all_canonical_ids(conn), set()
            else:
                article_seeds, story_extra = seeds_of(conn, pending)
                article_seeds |= policy_seeds(conn, settings)  # a new sink policy reclusters what it touches
        summary.articles, region = cluster_seeds(engine, "article", article_seeds, thresholds, run_id=run.id,
                                                 progress=progress, settings=settings)
        summary.stories, _ = cluster_seeds(engine, "story", region | story_extra, thresholds, run_id=run.id,
                                           progress=progress, settings=settings)
        with engine.begin() as conn:
            advance_marks(conn, pending, run_id=run.id)
            record_policy(conn, settings, run_id=run.id)
        summary.seconds = time.monotonic() - started
        run.counts = summary.as_dict()
    # A first run writes signatures, band keys and IDs for every document at once.
    refresh_statistics(engine, ["signatures", "band_keys", "links", "cluster_ids", "cluster_members",
                                "id_events"], changed={"signatures": summary.signing.signed})
    log.info("dedupe: %s", summary.as_dict())
    return summary


__all__ = [
    "STAGE",
    "ClusterCounts",
    "ClusterDetail",
    "ClusterRow",
    "Decision",
    "DecisionResult",
    "DedupeSummary",
    "MatchCounts",
    "SignCounts",
    "Sink",
    "count_pending",
    "list_clusters",
    "list_decisions",
    "list_sinks",
    "record_decision",
    "resolve_cluster_id",
    "resolve_ref",
    "run_dedupe",
    "show_cluster",
    "similarity_values",
    "thresholds_report",
]
