"""The fetch stage: GET pending canonical URLs through the safe client and store the pages.

The requests are the shared layer's (:mod:`linkfold.web`): its client, request-forgery guard, robots.txt
handling, politeness, caps and failure classes, and its one redirect loop in its ``keep_body`` mode (every
hop a GET that robots.txt allows first, RFC 9309; the final body kept, cut at ``http_max_bytes`` and
flagged ``truncated``). This module adds only what storing a page needs:

* each hop between two canonical URLs is stored as a ``redirect`` link, with the same source
  (``fetched``) as the follow stage's, so one redirect seen by both is one row;
* a 2xx answer becomes a page: status, the headers in :data:`~linkfold.content.KEPT_HEADERS`, the final
  URL, the body (the start of an article is what extraction needs), compressed. A 2xx answer that is not
  HTML is stored without its body: extraction then marks it ``not_html``, and no PDF or video is kept
  that nothing reads;
* anything else is a failure in ``fetch_results`` with the shared failure class and retry schedule.

The async client runs inside ``asyncio.run`` from the sync :func:`fetch_pages`; results are written from
the main thread in batches, one transaction each, so SQLite keeps a single writer and a killed run loses at
most the batch in flight (those URLs stay pending).
"""

from __future__ import annotations

import logging
from collections import Counter
from collections.abc import Sequence
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
from ..store import pages as sp
from ..store.datasets import get_dataset
from ..store.migrate import require_schema
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics
from ..web import Chain, ClientConfig, Resolver, State, explain_refusal
from ..web.runner import due_again, hop_links, never_follow_check, run_chains, tally
from .mediatype import is_html
from .pages import keep_headers

log = logging.getLogger("linkfold")

#: URLs written per transaction (at most ``batch_size`` from the settings): a batch holds bodies.
WRITE_BATCH = 100

#: The ``source`` of a fetched page.
FETCH_SOURCE = "fetch"

#: The run log's name of this stage.
STAGE = "fetch"


def _stored_state(chain: Chain) -> str:
    """``fetch_results.state``: a chain that resolved is a page ``fetched``; the others keep their name."""
    return "fetched" if chain.state is State.RESOLVED else chain.state.value


@dataclass
class FetchSummary:
    """What one fetch run did. ``failed`` and ``refused`` count by failure class."""

    selected: int = 0
    fetched: int = 0
    pages_stored: int = 0  # new page rows (a body already stored for the URL is not stored twice)
    not_html: int = 0  # 2xx answers stored without their body
    truncated: int = 0
    failed: Counter[str] = field(default_factory=Counter)
    refused: Counter[str] = field(default_factory=Counter)
    refusals: Counter[str] = field(default_factory=Counter)  # refused URLs by reason (private, robots_file …)
    skipped: int = 0  # URLs with no http(s) form to request
    redirect_links: int = 0
    requests: int = 0
    run_id: int | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"selected": self.selected, "fetched": self.fetched, "pages_stored": self.pages_stored,
                "not_html": self.not_html, "truncated": self.truncated,
                "failed": dict(sorted(self.failed.items())), "refused": dict(sorted(self.refused.items())),
                "refusals": dict(sorted(self.refusals.items())), "skipped": self.skipped, "redirect_links": self.redirect_links, "requests": self.requests,
                "run_id": self.run_id}

    def lines(self) -> list[str]:
        if not self.selected:
            return ["fetch: nothing pending"]
        out = [f"fetched {self.fetched:,} of {self.selected:,} selected URLs in {self.requests:,} requests "
               f"(run {self.run_id})",
               f"  pages stored: {self.pages_stored:,}"
               + (f" ({self.not_html:,} not HTML, kept without body)" if self.not_html else "")
               + (f" ({self.truncated:,} cut at the size cap)" if self.truncated else ""),
               f"  failed:       {sum(self.failed.values()):,}" + _by_class(self.failed),
               f"  refused:      {sum(self.refused.values()):,}" + _by_class(self.refused)]
        out += [f"    {n:,}  {explain_refusal(reason)}"
                for reason, n in sorted(self.refusals.items(), key=lambda kv: -kv[1])]
        if self.skipped:
            out.append(f"  skipped:      {self.skipped:,} (no fetchable http(s) URL)")
        out.append(f"  redirect links written: {self.redirect_links:,}")
        return out


def _by_class(counts: Counter[str]) -> str:
    return (" (" + ", ".join(f"{k} {v:,}" for k, v in sorted(counts.items())) + ")") if counts else ""


class _Writer:
    def __init__(self, engine: Engine, canon: Canonicaliser, *, ruleset_id: int, run_id: int,
                 summary: FetchSummary) -> None:
        self.engine = engine
        self.canon = canon
        self.ruleset_id = ruleset_id
        self.run_id = run_id
        self.summary = summary

    def _canonical(self, url: str) -> Canonical | None:
        try:
            return self.canon(url)
        except InvalidURL as exc:
            log.info("URL %s met while fetching cannot be canonicalised (%s)", url[:200], exc)
            return None

    def write(self, batch: Sequence[tuple[sp.FetchPending, Chain]]) -> None:
        s = self.summary
        urls: dict[str, Canonical] = {}
        for _item, got in batch:
            for u in [got.final_url, *(h.src for h in got.hops), *(h.dst for h in got.hops)]:
                if u not in urls and (found := self._canonical(u)) is not None:
                    urls[u] = found
        with self.engine.begin() as conn:
            ids = ev.register_urls(conn, urls.items(), ruleset_id=self.ruleset_id)
            links: list[dict[str, Any]] = []
            rows: dict[int, dict[str, Any]] = {}
            for item, got in batch:
                s.requests += got.requests
                links.extend(self._links(got, ids))
                if got.state is State.RESOLVED:
                    rows[item.canonical_id] = self._page_row(item, got, ids)
            s.redirect_links += ev.add_links(conn, links)
            new, page_ids = sp.store_pages(conn, list(rows.values()))
            s.pages_stored += new
            attempts = sp.fetch_attempts(conn, [item.canonical_id for item, _ in batch])
            outcomes = []
            for item, got in batch:
                page_id = None
                if got.state is State.RESOLVED:
                    s.fetched += 1
                    page_id = page_ids.get((item.canonical_id, rows[item.canonical_id]["body_sha256"]))
                tally(s, got)
                due = due_again(got, attempts.get(item.canonical_id, 0) + 1)
                outcomes.append(sp.FetchOutcome(canonical_id=item.canonical_id, state=_stored_state(got), at=got.at,
                                                failure=got.failure.value if got.failure else None,
                                                http_status=got.status, page_id=page_id, next_attempt_at=due,
                                                detail=got.detail))
            sp.record_fetch_outcomes(conn, outcomes, run_id=self.run_id)

    def _links(self, got: Chain, ids: dict[str, ev.UrlIds]) -> list[dict[str, Any]]:
        return hop_links(got, ids, run_id=self.run_id, detail={"stage": "fetch"})[0]

    def _page_row(self, item: sp.FetchPending, got: Chain, ids: dict[str, ev.UrlIds]) -> dict[str, Any]:
        assert got.reply is not None
        headers = keep_headers(list(got.reply.headers.multi_items()))
        body = got.reply.body or b""
        truncated = got.reply.truncated
        if not is_html(headers.get("content-type"), body):
            self.summary.not_html += 1
            body, truncated = b"", False
        elif truncated:
            self.summary.truncated += 1
        final = ids.get(got.final_url)
        return sp.page_row(canonical_id=item.canonical_id, requested_url=got.start, final_url=got.final_url,
                           final_canonical_id=final.canonical_id if final else None, status=got.status,
                           headers=headers, body=body, truncated=truncated, source=FETCH_SOURCE,
                           fetched_at=got.at, run_id=self.run_id)


def count_pending(engine: Engine, *, settings: Settings | None = None, now: datetime | None = None) -> int:
    """Canonical URLs to fetch: without a page, never tried or failed with the next attempt due (``now``
    overrides the clock for that)."""
    with engine.connect() as conn:
        return sp.count_fetch_pending(conn, now=now)


def fetch_pages(engine: Engine, *, settings: Settings, dataset: str | None = None, only_articles: bool = False,
                limit: int | None = None, retry_refused: bool = False, resolver: Resolver | None = None,
                progress: Progress = SILENT, now: datetime | None = None,
                backend: httpcore.AsyncNetworkBackend | None = None,
                parent_run: int | None = None) -> FetchSummary:
    """Fetch pending canonical URLs (see :func:`linkfold.store.pages.select_fetch_pending`) and store pages.

    ``dataset`` keeps URLs sighted in that dataset; ``only_articles`` those matching the ruleset's article
    patterns; ``limit`` stops after that many URLs; ``retry_refused`` fetches the refused ones again (after
    ``allow_networks`` or a site's robots.txt changed). ``now`` overrides the clock for choosing failed URLs
    that are due; ``resolver`` and ``backend`` replace DNS and the socket layer (tests, lab pinning).
    ``parent_run`` is the run this one is a step of (a job's), recorded as its parent.
    """
    require_schema(engine)
    if limit is not None and limit <= 0:
        raise ConfigError(f"--limit must be a positive number (got {limit})")
    config = ClientConfig.from_settings(settings)
    config.check()  # before anything is read or written: no contact, no requests
    summary = FetchSummary()
    with engine.begin() as conn:
        ruleset_id, rules = latest_ruleset(conn)
        dataset_id = get_dataset(conn, dataset)["id"] if dataset else None
        items = sp.select_fetch_pending(conn, dataset_id=dataset_id, only_articles=only_articles,
                                        retry_refused=retry_refused, now=now, limit=limit)
    summary.selected = len(items)
    if not items:
        return summary
    refuse = never_follow_check(rules)
    canon = Canonicaliser(rules, cache_size=settings.canon_cache_size)
    batch_size = max(1, min(settings.batch_size, WRITE_BATCH))
    progress.start("fetch", total=len(items))
    with recording_run(engine, STAGE, parent_id=parent_run) as run:
        summary.run_id = run.id
        writer = _Writer(engine, canon, ruleset_id=ruleset_id, run_id=run.id, summary=summary)

        def write(batch: list[tuple[sp.FetchPending, Chain]]) -> None:
            writer.write(batch)
            run.counts = summary.as_dict()

        def skip(_item: sp.FetchPending) -> None:
            summary.skipped += 1

        try:
            run_chains(items, config=config, keep_body=True, max_hops=settings.max_hops, never_follow=refuse,
                       write=write, batch_size=batch_size, progress=progress, on_skip=skip, resolver=resolver,
                       backend=backend)
        finally:
            run.counts = summary.as_dict()
            progress.finish()
    refresh_statistics(engine, ["canonical_urls", "links"], changed={"pages": summary.pages_stored,
                                                                   "fetch_results": summary.selected})
    return summary


__all__ = ["FETCH_SOURCE", "STAGE", "FetchSummary", "count_pending", "fetch_pages"]
