"""Sinks over the database: which stored targets are sinks, for clustering and for the reports.

The rule is pure (:mod:`linkfold.dedupe.sinks`); this module reads the facts it needs — each target's
URL, host and ``is_article``, its distinct sources, the current ruleset's shortener and never-article
hosts — and caches the verdicts for one run. Nothing about sinks is stored: a sink is recomputed from
the evidence and the rules whenever it is needed, so a new ruleset or setting takes effect by itself
on the regions clustered next (on all of them with ``linkfold dedupe --full``).
"""

from __future__ import annotations

import json
import logging
import zlib
from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.engine import Connection, Engine

from ...canon import Ruleset
from ...settings import Settings
from ...store import evidence as ev
from ...store.clock import now
from ...store.clusters import any_clustered, get_mark, set_mark
from ...store.datasets import get_dataset
from ...store.rulesets import current_ruleset
from ..sinks import End, SinkKind, fan_in, sink_kind

log = logging.getLogger("linkfold")

#: The default of the ``sink_fan_in`` setting (kept here too for callers without settings).
DEFAULT_FAN_IN = 50
#: ``stage_marks`` rows that remember the sink policy the clusters were last made under.
FAN_IN_MARK = "dedupe.sink_fan_in"
RULES_MARK = "dedupe.sink_rules"
#: Bump when the sink rule itself (linkfold.dedupe.sinks) changes what is a sink.
SINK_RULE_VERSION = 1


@dataclass(frozen=True)
class Sink:
    """A sink: the target, why it is one, its fan-in (sources that count), all its distinct sources, and
    the host most of them are on (a real article made a ``fan_in`` sink by an unlisted per-post link
    wrapper shows that wrapper here: list it in ``shortener_hosts``)."""

    canonical_id: int
    url: str
    kind: SinkKind
    fan_in: int
    sources: int
    top_source_host: str | None = None
    top_host_sources: int = 0

    def as_dict(self) -> dict[str, Any]:
        return {"url": self.url, "sink": self.kind.value, "fan_in": self.fan_in, "sources": self.sources,
                "top_source_host": self.top_source_host, "top_host_sources": self.top_host_sources}


def end_of(facts: ev.UrlFacts, rules: Ruleset) -> End:
    return End(facts.url, facts.host, facts.is_article, rules.never_article(facts.host))


@dataclass
class SinkJudge:
    """Sink verdicts for one run: the fan-in limit, the ruleset's host lists, and a cache by target id."""

    limit: int
    rules: Ruleset
    known: dict[int, SinkKind | None] = field(default_factory=dict)

    @classmethod
    def load(cls, conn: Connection, settings: Settings | None = None) -> SinkJudge:
        limit = int(settings.sink_fan_in) if settings is not None else DEFAULT_FAN_IN
        return cls(limit=limit, rules=current_ruleset(conn))

    def end(self, facts: ev.UrlFacts) -> End:
        return end_of(facts, self.rules)

    def kinds(self, conn: Connection, targets: Mapping[int, End]) -> dict[int, SinkKind | None]:
        """The sink kind (or None) of each target. The target's nature is judged first; the fan-in is
        counted only when it can matter (more distinct sources than the limit at all)."""
        out: dict[int, SinkKind | None] = {}
        unknown: dict[int, End] = {}
        for cid, end in targets.items():
            if cid in self.known:
                out[cid] = self.known[cid]
                continue
            kind = sink_kind(end, 0, limit=self.limit)
            if kind is None:
                unknown[cid] = end
            else:
                out[cid] = self.known[cid] = kind
        if unknown:
            crowded = [cid for cid, n in ev.pointing_counts(conn, unknown).items() if n > self.limit]
            sources = ev.pointing_sources(conn, crowded) if crowded else {}
            for cid, end in unknown.items():
                n = fan_in([self.end(f) for f in sources.get(cid, ())], end,
                           shortener_hosts=self.rules.shortener_hosts)
                out[cid] = self.known[cid] = sink_kind(end, n, limit=self.limit)
        return out


def rules_mark(rules: Ruleset) -> int:
    """The parts of a ruleset that decide sinks (and the rule's version) as a number for ``stage_marks``."""
    text = json.dumps([SINK_RULE_VERSION, sorted(rules.shortener_hosts), sorted(rules.never_article_hosts)])
    return zlib.crc32(text.encode("utf-8"))


def policy_changed(conn: Connection, settings: Settings | None = None) -> bool:
    """Whether the sink policy differs from the one the registry's clusters were made under (False while
    there are no clusters yet)."""
    judge = SinkJudge.load(conn, settings)
    if get_mark(conn, FAN_IN_MARK) == judge.limit and get_mark(conn, RULES_MARK) == rules_mark(judge.rules):
        return False
    return any_clustered(conn)


def policy_seeds(conn: Connection, settings: Settings | None = None) -> set[int]:
    """Canonical URLs to cluster again because the sink policy changed since the last run (empty when it
    did not, and on a registry that has no clusters yet).

    A new ``sink_fan_in``, new host lists or a new sink rule can make a sink of a target that joined its
    sources before (or the reverse), so every target whose verdict could have changed is seeded: every
    target with more distinct sources than the lower of the old and new limits, every non-article and
    home-page target, and every link end on a never-article host. Their regions take in the clusters
    joined through them, which are then split (or joined) like any other region.
    """
    if not policy_changed(conn, settings):
        return set()
    judge = SinkJudge.load(conn, settings)
    old_limit, old_rules = get_mark(conn, FAN_IN_MARK), get_mark(conn, RULES_MARK)
    lowest = judge.limit if old_limit is None else min(int(old_limit), judge.limit)
    seeds = set(ev.pointed_targets(conn, min_sources=lowest))
    seeds |= ev.link_ends_on_hosts(conn, judge.rules.never_article_hosts)
    log.info("sink policy changed (sink_fan_in %s → %s, host lists %s): %d URLs to cluster again",
             old_limit, judge.limit, "changed" if old_rules != rules_mark(judge.rules) else "unchanged",
             len(seeds))
    return seeds


def record_policy(conn: Connection, settings: Settings | None, *, run_id: int | None) -> None:
    """Remember the sink policy the clusters are now made under (after a run's clustering)."""
    judge = SinkJudge.load(conn, settings)
    set_mark(conn, FAN_IN_MARK, judge.limit, run_id=run_id, now=now())
    set_mark(conn, RULES_MARK, rules_mark(judge.rules), run_id=run_id, now=now())


def describe_sinks(conn: Connection, judge: SinkJudge, ids: Iterable[int]) -> dict[int, Sink]:
    """The sinks among ``ids``, with their fan-in and number of sources (for reports)."""
    facts = ev.url_facts(conn, ids)
    ends = {cid: judge.end(f) for cid, f in facts.items()}
    kinds = judge.kinds(conn, ends)
    sinks = [cid for cid, kind in kinds.items() if kind is not None]
    sources = ev.pointing_sources(conn, sinks) if sinks else {}
    out: dict[int, Sink] = {}
    for cid in sinks:
        srcs = [judge.end(f) for f in sources.get(cid, ())]
        n = fan_in(srcs, ends[cid], shortener_hosts=judge.rules.shortener_hosts)
        kind = kinds[cid]
        assert kind is not None
        top = Counter(s.host for s in srcs).most_common(1)
        out[cid] = Sink(cid, facts[cid].url, kind, n, len(srcs), top[0][0] if top else None, top[0][1] if top else 0)
    return out


def list_sinks(engine: Engine, *, settings: Settings | None = None, dataset: str | None = None,
               limit: int | None = None) -> list[Sink]:
    """Every sink among the targets of redirect and declared-canonical links (with ``dataset``, those
    reached from that dataset's URLs), largest fan-in first."""
    with engine.connect() as conn:
        judge = SinkJudge.load(conn, settings)
        dataset_id = get_dataset(conn, dataset)["id"] if dataset else None
        candidates = ev.pointed_targets(conn, min_sources=judge.limit, dataset_id=dataset_id)
        found = describe_sinks(conn, judge, candidates)
    rows = sorted(found.values(), key=lambda s: (-s.fan_in, -s.sources, s.url))
    return rows[:limit] if limit else rows


__all__ = ["DEFAULT_FAN_IN", "FAN_IN_MARK", "RULES_MARK", "SINK_RULE_VERSION", "Sink", "SinkJudge", "describe_sinks",
           "end_of", "list_sinks", "policy_changed", "policy_seeds", "record_policy", "rules_mark"]
