"""Sinks over the database: which stored targets are sinks, for clustering and for the reports.

The rule is pure (:mod:`linkfold.dedupe.sinks`); this module reads the facts it needs — each target's
URL, host and ``is_article``, its distinct sources, the current ruleset's shortener and never-article
hosts — and caches the verdicts for one run. Nothing about sinks is stored: a sink is recomputed from
the evidence and the rules whenever it is needed, so a new ruleset or setting takes effect by itself
on the regions clustered next (on all of them with ``linkfold dedupe --full``).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.engine import Connection, Engine

from ...canon import Ruleset
from ...store import evidence as ev
from ...store.registry import get_dataset
from ...store.rulesets import current_ruleset
from ..sinks import End, SinkKind, fan_in, sink_kind

#: The default of the ``sink_fan_in`` setting (kept here too for callers without settings).
DEFAULT_FAN_IN = 50


@dataclass(frozen=True)
class Sink:
    """A sink: the target, why it is one, its fan-in (sources that count) and all its distinct sources."""

    canonical_id: int
    url: str
    kind: SinkKind
    fan_in: int
    sources: int

    def as_dict(self) -> dict[str, Any]:
        return {"url": self.url, "sink": self.kind.value, "fan_in": self.fan_in, "sources": self.sources}


def end_of(facts: ev.UrlFacts, rules: Ruleset) -> End:
    return End(facts.url, facts.host, facts.is_article, rules.never_article(facts.host))


@dataclass
class SinkJudge:
    """Sink verdicts for one run: the fan-in limit, the ruleset's host lists, and a cache by target id."""

    limit: int
    rules: Ruleset
    known: dict[int, SinkKind | None] = field(default_factory=dict)

    @classmethod
    def load(cls, conn: Connection, settings: Mapping[str, Any] | None = None) -> SinkJudge:
        limit = int(settings["sink_fan_in"]) if settings is not None else DEFAULT_FAN_IN
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
        out[cid] = Sink(cid, facts[cid].url, kind, n, len(srcs))
    return out


def list_sinks(engine: Engine, *, settings: Mapping[str, Any] | None = None, dataset: str | None = None,
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


__all__ = ["DEFAULT_FAN_IN", "Sink", "SinkJudge", "describe_sinks", "end_of", "list_sinks"]
