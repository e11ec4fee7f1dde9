"""The follow stage: pick pending canonical URLs, follow their chains concurrently, store the evidence.

The async client runs inside ``asyncio.run`` called from the sync function :func:`follow_links`; chains
complete in any order and are written to the database from the same (main) thread in batches, one
transaction each, so SQLite keeps its single writer and a crash loses at most the batch in flight
(its URLs stay pending and are picked up by the next run).

For each chain:

* every hop URL is canonicalised and stored as a raw URL and a canonical URL of its own;
* every observed redirect whose two ends have different canonical forms becomes a ``redirect`` link
  (hop number, status, run); a hop between two spellings of one canonical URL (http→https, a trailing
  slash) is no evidence and is counted, not stored;
* the start URL gets its outcome in ``follow_results`` (and an attempt row), with the time of the next
  attempt for ``--retry-failed`` when it failed;
* the later hops and the final URL get the same outcome (``via`` ``chain``, without a next attempt:
  they are settled again when the start URL is retried) unless they have an outcome of their own, so
  ``--all`` does not fetch them again;
* ``canonical_urls.final_id`` (what each link stands for, ``store/finals.py``) is brought up to date for
  those URLs and every URL that led to them, in the same transaction.
"""

from __future__ import annotations

import logging
from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import httpcore
from sqlalchemy.engine import Engine

from ..canon import Canonical, Canonicaliser
from ..errors import ConfigError, InvalidURL
from ..progress import SILENT, Progress
from ..settings import Settings
from ..store import evidence as ev
from ..store import finals
from ..store.datasets import get_dataset
from ..store.migrate import require_schema
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics
from ..web import Chain, ClientConfig, Failure, Resolver, State, explain_refusal
from ..web.runner import due_again, hop_links, never_follow_check, run_chains, tally

log = logging.getLogger("linkfold")

#: Chains written per transaction (at most ``batch_size`` from the settings).
WRITE_BATCH = 200

#: The run log's name of this stage.
STAGE = "follow"


@dataclass
class FollowSummary:
    """What one follow run did. ``failed`` and ``refused`` count by failure class."""

    selected: int = 0
    resolved: int = 0
    failed: Counter[str] = field(default_factory=Counter)
    refused: Counter[str] = field(default_factory=Counter)
    refusals: Counter[str] = field(default_factory=Counter)  # refused URLs by reason (private, robots_file …)
    skipped: int = 0  # URLs that could not be fetched at all (no http(s) form to request)
    links: int = 0
    same_url_hops: int = 0
    hop_errors: int = 0  # hop URLs the canonicaliser refused (the chain is kept up to there)
    requests: int = 0
    run_id: int | None = None
    note: str | None = None

    @property
    def attempted(self) -> int:
        return self.resolved + sum(self.failed.values()) + sum(self.refused.values())

    @property
    def dead_share(self) -> float | None:
        """Failed URLs as a share of those attempted (refused ones are not known to be dead)."""
        tried = self.resolved + sum(self.failed.values())
        return None if tried == 0 else sum(self.failed.values()) / tried

    def as_dict(self) -> dict[str, Any]:
        return {"selected": self.selected, "resolved": self.resolved, "failed": dict(sorted(self.failed.items())),
                "refused": dict(sorted(self.refused.items())), "refusals": dict(sorted(self.refusals.items())),
                "skipped": self.skipped, "links": self.links,
                "same_url_hops": self.same_url_hops, "hop_errors": self.hop_errors, "requests": self.requests,
                "dead_share": self.dead_share, "run_id": self.run_id}

    def lines(self) -> list[str]:
        out = []
        if self.note:
            out.append(self.note)
        out.append(f"followed {self.attempted:,} of {self.selected:,} selected URLs in {self.requests:,} "
                   f"requests (run {self.run_id})")
        out.append(f"  resolved: {self.resolved:,}")
        out.append(f"  failed:   {sum(self.failed.values()):,}" + _by_class(self.failed))
        out.append(f"  refused:  {sum(self.refused.values()):,}" + _by_class(self.refused))
        for reason, n in sorted(self.refusals.items(), key=lambda kv: -kv[1]):
            out.append(f"    {n:,}  {explain_refusal(reason)}")
        if self.skipped:
            out.append(f"  skipped:  {self.skipped:,} (no fetchable http(s) URL)")
        out.append(f"  redirect links written: {self.links:,}"
                   + (f" ({self.same_url_hops:,} hops within one canonical URL not stored)"
                      if self.same_url_hops else ""))
        if self.dead_share is not None:
            out.append(f"  dead links: {100 * self.dead_share:.1f}% of the URLs answered or failed")
        return out


def _by_class(counts: Counter[str]) -> str:
    return (" (" + ", ".join(f"{k} {v:,}" for k, v in sorted(counts.items())) + ")") if counts else ""


def canonical_hosts(hosts: Iterable[str]) -> frozenset[str]:
    """``--hosts`` values in the form canonical URLs store them (lower case, punycode, no port)."""
    from ..canon import canonicalize
    from ..canon.rules import normalise_rule_host

    out = set()
    for host in hosts:
        if not host.strip():
            continue
        norm = normalise_rule_host(host)
        if norm is None:
            # Not a name a rules file may hold: an IP literal, which the canonicaliser writes its own way.
            try:
                norm = canonicalize(f"http://{host.strip()}/").host
            except InvalidURL:
                raise ConfigError(f"--hosts: {host!r} is not a host name or an IP address") from None
        out.add(norm)
    return frozenset(out)


class _Writer:
    """Turns finished chains into rows, one transaction per batch."""

    def __init__(self, engine: Engine, canon: Canonicaliser, *, ruleset_id: int, run_id: int,
                 summary: FollowSummary) -> None:
        self.engine = engine
        self.canon = canon
        self.ruleset_id = ruleset_id
        self.run_id = run_id
        self.summary = summary

    def _canonical(self, url: str) -> Canonical | None:
        try:
            return self.canon(url)
        except InvalidURL as exc:
            log.info("hop URL %s cannot be canonicalised (%s); the chain is stored up to it", url[:200], exc)
            self.summary.hop_errors += 1
            return None

    def write(self, batch: Sequence[tuple[ev.Pending, Chain]]) -> None:
        urls: dict[str, Canonical] = {}
        for _item, chain in batch:
            for u in [chain.start, chain.final_url, *(h.src for h in chain.hops), *(h.dst for h in chain.hops)]:
                if u not in urls:
                    found = self._canonical(u)
                    if found is not None:
                        urls[u] = found
        with self.engine.begin() as conn:
            ids = ev.register_urls(conn, urls.items(), ruleset_id=self.ruleset_id)
            for item, chain in batch:
                # The chain starts at the canonical URL that was chosen, even when its raw URL would
                # canonicalise differently under today's ruleset.
                if chain.start in ids:
                    ids[chain.start] = ev.UrlIds(item.canonical_id, ids[chain.start].raw_id)
            links, outcomes, learned = [], [], []
            for item, chain in batch:
                links.extend(self._links(chain, ids))
                outcomes.append(self._outcome(conn, item, chain, ids))
                learned.extend(self._learned(chain, ids))
            touched = [o.canonical_id for o in outcomes + learned]
            before = finals.edges_of(conn, touched)
            self.summary.links += ev.add_links(conn, links)
            ev.record_outcomes(conn, outcomes, run_id=self.run_id)
            ev.record_outcomes(conn, learned, run_id=self.run_id, replace="learned")
            # Where each link now leads (store/finals.py), committed with the outcomes it is read from.
            finals.refresh_finals(conn, touched, edges_before=before)

    def _links(self, chain: Chain, ids: dict[str, ev.UrlIds]) -> list[dict[str, Any]]:
        rows, same = hop_links(chain, ids, run_id=self.run_id)
        self.summary.same_url_hops += same
        return rows

    def _outcome(self, conn, item: ev.Pending, chain: Chain, ids: dict[str, ev.UrlIds]) -> ev.Outcome:
        final = ids.get(chain.final_url)
        s = self.summary
        s.requests += chain.requests
        if chain.state is State.RESOLVED:
            s.resolved += 1
        tally(s, chain)
        due = None
        if chain.state is State.FAILED and chain.failure is not None:
            before = ev.follow_result(conn, item.canonical_id)
            due = due_again(chain, (before["attempts"] if before else 0) + 1)
        return ev.Outcome(canonical_id=item.canonical_id, state=chain.state.value, via="fetched", at=chain.at,
                          failure=chain.failure.value if chain.failure else None, http_status=chain.status,
                          final_id=final.canonical_id if final else None, hops=len(chain.hops),
                          next_attempt_at=due, detail=chain.detail, reason=chain.reason)

    def _learned(self, chain: Chain, ids: dict[str, ev.UrlIds]) -> list[ev.Outcome]:
        """Outcomes for the other URLs a chain requested: where the start led, they lead too.

        Hop i's source is i-1 hops in and ends where the start ended; the final URL is 0 hops from its
        end. Not for ``too_many_hops``: a URL further down might resolve within the limit on its own,
        and the URL where that chain stopped was never requested.
        """
        start = ids.get(chain.start)
        if start is None or chain.failure is Failure.TOO_MANY_HOPS:
            return []
        final = ids.get(chain.final_url)
        total = len(chain.hops)
        later = [(hop.src, total - hop.number + 1) for hop in chain.hops[1:]] + [(chain.final_url, 0)]
        out = []
        for url, left in later:
            got = ids.get(url)
            if got is not None and got.canonical_id != start.canonical_id:
                out.append(ev.Outcome(canonical_id=got.canonical_id, state=chain.state.value, via="chain",
                                      at=chain.at, failure=chain.failure.value if chain.failure else None,
                                      http_status=chain.status, final_id=final.canonical_id if final else None,
                                      hops=left, detail=chain.detail, reason=chain.reason))
        return out


def count_pending(engine: Engine, *, settings: Settings | None = None, hosts: Iterable[str] | None = None) -> int:
    """Canonical URLs never followed on ``hosts`` (default: the ruleset's shortener hosts; 0 when it lists
    none), as :func:`follow_links` would choose them by default."""
    with engine.connect() as conn:
        if hosts is None:
            _version, rules = latest_ruleset(conn)
            chosen = frozenset(rules.shortener_hosts)
        else:
            chosen = canonical_hosts(hosts)
        return ev.count_pending(conn, hosts=chosen) if chosen else 0


def follow_links(engine: Engine, *, settings: Settings, dataset: str | None = None,
                 hosts: Iterable[str] | None = None, all_urls: bool = False, limit: int | None = None,
                 retry_failed: bool = False, retry_refused: bool = False, due_only: bool = True,
                 resolver: Resolver | None = None, progress: Progress = SILENT,
                 now: datetime | None = None,
                 backend: httpcore.AsyncNetworkBackend | None = None,
                 parent_run: int | None = None) -> FollowSummary:
    """Follow pending canonical URLs (see the module doc) and return the counts.

    Which URLs: without ``all_urls``, those on ``hosts`` or, when ``hosts`` is not given, on the
    ruleset's shortener hosts; with ``all_urls``, every URL. Then only those never followed, or with
    ``retry_failed`` only the failed ones that are due (``now`` overrides the clock for that choice; with
    ``due_only=False`` every failed one, now, whatever its schedule), or with ``retry_refused`` only the
    refused ones.
    ``resolver`` and ``backend`` replace DNS and the socket layer (tests, lab pinning). ``parent_run`` is
    the run this one is a step of (a job's), recorded as its parent.
    """
    require_schema(engine)
    if all_urls and hosts:
        raise ConfigError("give either --all or --hosts, not both")
    if retry_failed and retry_refused:
        raise ConfigError("give either --retry-failed or --retry-refused, not both")
    if not due_only and not retry_failed:
        raise ConfigError("retrying now applies to failed URLs only (--retry-failed-now)")
    if limit is not None and limit <= 0:
        raise ConfigError(f"--limit must be a positive number (got {limit})")
    config = ClientConfig.from_settings(settings)
    config.check()  # before anything is read or written
    summary = FollowSummary()
    with engine.begin() as conn:
        ruleset_id, rules = latest_ruleset(conn)
        dataset_id = get_dataset(conn, dataset)["id"] if dataset else None
        chosen: frozenset[str] | None
        if all_urls:
            chosen = None
        elif hosts is not None:
            chosen = canonical_hosts(hosts)
        else:
            chosen = frozenset(rules.shortener_hosts)
            if not chosen:
                summary.note = ("the ruleset lists no shortener hosts: add them to shortener_hosts in the "
                                "rules file, or pass --hosts, or --all")
        items = ev.select_pending(conn, hosts=chosen, dataset_id=dataset_id, retry_failed=retry_failed,
                                  retry_refused=retry_refused, now=now, limit=limit, due_only=due_only)
    summary.selected = len(items)
    if not items:
        return summary
    canon = Canonicaliser(rules, cache_size=settings.canon_cache_size)
    refuse = never_follow_check(rules)
    batch_size = max(1, min(settings.batch_size, WRITE_BATCH))
    progress.start("follow", total=len(items))
    with recording_run(engine, STAGE, parent_id=parent_run) as run:
        summary.run_id = run.id
        writer = _Writer(engine, canon, ruleset_id=ruleset_id, run_id=run.id, summary=summary)

        def write(batch: list[tuple[ev.Pending, Chain]]) -> None:
            writer.write(batch)
            run.counts = summary.as_dict()

        def skip(_item: ev.Pending) -> None:
            summary.skipped += 1

        try:
            run_chains(items, config=config, keep_body=False, max_hops=settings.max_hops, never_follow=refuse,
                       write=write, batch_size=batch_size, progress=progress, on_skip=skip, resolver=resolver,
                       backend=backend)
        finally:
            run.counts = summary.as_dict()
            progress.finish()
    refresh_statistics(engine, ["canonical_urls", "follow_attempts"], changed={
        "links": summary.links, "follow_results": summary.selected})
    return summary


__all__ = ["STAGE", "FollowSummary", "canonical_hosts", "count_pending", "follow_links"]
