"""The fetch stage: GET pending canonical URLs through the safe client and store the pages.

The client, its request-forgery guard, robots.txt handling, politeness, caps and failure classes are the
follow stage's (:mod:`linkfold.follow.client`); this module adds only what fetching a page needs:

* every hop is a GET that robots.txt must allow first (RFC 9309), since the body of the last one is kept;
* redirects (RFC 9110 §15.4) are followed hop by hop with the follow stage's rules for ``Location``,
  loops and ``max_hops``; each hop between two canonical URLs is stored as a ``redirect`` link, with the
  same source (``fetched``) as the follow stage's, so one redirect seen by both is one row;
* a 2xx answer becomes a page: status, the headers in :data:`~linkfold.content.KEPT_HEADERS`, the final
  URL, the body up to ``http_max_bytes`` (cut there and flagged ``truncated`` rather than refused, since
  the start of an article is what extraction needs), compressed. A 2xx answer that is not HTML is stored
  without its body: extraction then marks it ``not_html``, and no PDF or video is kept that nothing reads;
* anything else is a failure in ``fetch_results`` with the follow stage's class and backoff schedule.

The async client runs inside ``asyncio.run`` from the sync :func:`fetch_pages`; results are written from
the main thread in batches, one transaction each, so SQLite keeps a single writer and a killed run loses at
most the batch in flight (those URLs stay pending).
"""

from __future__ import annotations

import logging
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

import httpcore
import httpx
from sqlalchemy.engine import Engine

from ..canon import Canonical, Canonicaliser
from ..errors import ConfigError, InvalidURL
from ..follow.chain import REFUSALS, Hop, decode_location, next_url
from ..follow.client import (
    NEVER_FOLLOW_REASON,
    REDIRECT_STATUSES,
    ClientConfig,
    Failure,
    FetchError,
    Reply,
    SafeClient,
    classify,
)
from ..follow.guard import AddressRefused, ResolveFailed, Resolver, literal_address
from ..follow.report import explain_refusal
from ..follow.runner import request_url, run_requests
from ..follow.stage import never_follow_check, next_attempt
from ..progress import SILENT, Progress
from ..store import evidence as ev
from ..store import pages as sp
from ..store.registry import get_dataset
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics
from .mediatype import is_html
from .pages import keep_headers

log = logging.getLogger("linkfold")

#: URLs written per transaction (at most ``batch_size`` from the settings): a batch holds bodies.
WRITE_BATCH = 100

#: The ``source`` of a fetched page.
FETCH_SOURCE = "fetch"


@dataclass(frozen=True)
class Fetched:
    """How one GET chain ended. ``reply`` is the 2xx answer whose body is the page."""

    start: str
    state: str  # fetched | failed | refused
    final_url: str
    hops: tuple[Hop, ...] = ()
    failure: Failure | None = None
    detail: str | None = None
    status: int | None = None
    retry_after: float | None = None
    reply: Reply | None = None
    requests: int = 0
    at: datetime = field(default_factory=lambda: datetime.now(UTC))
    reason: str | None = None  # a refusal's stable key (FetchError.reason)


def _defragment(url: str) -> str:
    return url.split("#", 1)[0]


async def _guard_check(client: SafeClient, url: str) -> None:
    """Raise the guard's refusal for ``url``'s host, if it has one.

    The client treats a robots.txt it cannot reach as "disallow all" (RFC 9309 §2.3.1.4), and a robots.txt
    on a refused address is unreachable, so without this a private address would be stored as a robots
    refusal. Asked only after robots.txt said no, so the common path resolves each name once.
    """
    parsed = httpx.URL(url)
    host = parsed.host
    port = parsed.port or (443 if parsed.scheme == "https" else 80)
    literal = literal_address(host)
    try:
        addresses = [str(literal)] if literal is not None else await client.backend.resolver(host, port)
        client.guard.check_all(host, addresses)
    except (AddressRefused, ResolveFailed) as exc:
        raise classify(exc, url) from None


async def fetch_one(client: SafeClient, start: str, *, max_hops: int,
                    now: Callable[[], datetime] = lambda: datetime.now(UTC),
                    never_follow: Callable[[str], str | None] | None = None) -> Fetched:
    """GET ``start``, following redirects, robots.txt checked before every hop; never raises for one URL.
    ``never_follow(url)`` names why a URL must not be asked (its host is in ``never_follow_hosts``)."""
    url = start
    visited = {_defragment(url)}
    hops: list[Hop] = []
    requests = 0
    began = now()

    def stop(state: str, failure: Failure | None, detail: str | None, *, final: str, status: int | None = None,
             retry_after: float | None = None, reply: Reply | None = None, reason: str | None = None) -> Fetched:
        return Fetched(start=start, state=state, final_url=final, hops=tuple(hops), failure=failure,
                       detail=detail, status=status, retry_after=retry_after, reply=reply, requests=requests,
                       at=began, reason=reason)

    while True:
        why = never_follow(url) if never_follow is not None else None
        if why is not None:
            return stop("refused", Failure.NEVER_FOLLOW, why, final=url, reason=NEVER_FOLLOW_REASON)
        try:
            if not await client.robots_allows(url):
                await _guard_check(client, url)  # a refused address is "refused", not a robots verdict
                await client.require_robots(url)  # raises, saying whether the file or its absence said no
            reply = await client.request("GET", url, truncate=True)
        except FetchError as exc:
            return stop("refused" if exc.failure in REFUSALS else "failed", exc.failure, exc.detail, final=url,
                        reason=exc.reason)
        except httpx.InvalidURL as exc:
            return stop("failed", Failure.BAD_URL, str(exc), final=url)
        requests += reply.attempts
        status = reply.status
        if status in REDIRECT_STATUSES:
            location = decode_location(reply)
            if not location:
                return stop("failed", Failure.BAD_LOCATION, f"HTTP {status} without a Location header",
                            final=url, status=status)
            try:
                target = next_url(url, location)
            except InvalidURL as exc:
                return stop("failed", Failure.BAD_LOCATION, f"Location {location[:200]!r}: {exc}", final=url,
                            status=status)
            hops.append(Hop(len(hops) + 1, url, target, status, "GET", now()))
            if _defragment(target) in visited:
                return stop("failed", Failure.LOOP, f"hop {len(hops)} leads back to {target[:200]}",
                            final=target, status=status)
            if len(hops) > max_hops:
                return stop("failed", Failure.TOO_MANY_HOPS, f"more than {max_hops} redirects", final=target,
                            status=status)
            visited.add(_defragment(target))
            url = target
            continue
        if 200 <= status < 300:
            return stop("fetched", None, None, final=url, status=status, reply=reply)
        if 400 <= status < 500:
            failure = Failure.HTTP_4XX
        elif 500 <= status < 600:
            failure = Failure.HTTP_5XX
        else:
            failure = Failure.HTTP_OTHER
        return stop("failed", failure, f"HTTP {status}", final=url, status=status, retry_after=reply.retry_after)


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

    def counts(self) -> dict[str, Any]:
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

    def write(self, batch: Sequence[tuple[sp.FetchPending, Fetched]]) -> None:
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
                if got.state == "fetched":
                    rows[item.canonical_id] = self._page_row(item, got, ids)
            s.redirect_links += ev.add_links(conn, links)
            new, page_ids = sp.store_pages(conn, list(rows.values()))
            s.pages_stored += new
            attempts = sp.fetch_attempts(conn, [item.canonical_id for item, _ in batch])
            outcomes = []
            for item, got in batch:
                page_id = None
                if got.state == "fetched":
                    s.fetched += 1
                    page_id = page_ids.get((item.canonical_id, rows[item.canonical_id]["body_sha256"]))
                elif got.state == "refused":
                    s.refused[got.failure.value if got.failure else "unknown"] += 1
                    s.refusals[got.reason or "unknown"] += 1
                else:
                    s.failed[got.failure.value if got.failure else "unknown"] += 1
                due = None
                if got.state == "failed" and got.failure is not None:
                    due = next_attempt(got.failure, attempts.get(item.canonical_id, 0) + 1, got.at, got.retry_after)
                outcomes.append(sp.FetchOutcome(canonical_id=item.canonical_id, state=got.state, at=got.at,
                                                failure=got.failure.value if got.failure else None,
                                                http_status=got.status, page_id=page_id, next_attempt_at=due,
                                                detail=got.detail))
            sp.record_fetch_outcomes(conn, outcomes, run_id=self.run_id)

    def _links(self, got: Fetched, ids: dict[str, ev.UrlIds]) -> list[dict[str, Any]]:
        rows = []
        for hop in got.hops:
            src, dst = ids.get(hop.src), ids.get(hop.dst)
            if src is None or dst is None or src.canonical_id == dst.canonical_id:
                continue
            rows.append({"kind": "redirect", "src_id": src.canonical_id, "dst_id": dst.canonical_id,
                         "status": hop.status, "hop": hop.number, "source": "fetched",
                         "detail": {"method": hop.method, "src_raw_id": src.raw_id, "dst_raw_id": dst.raw_id,
                                    "stage": "fetch"},
                         "run_id": self.run_id, "created_at": hop.at})
        return rows

    def _page_row(self, item: sp.FetchPending, got: Fetched, ids: dict[str, ev.UrlIds]) -> dict[str, Any]:
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


def fetch_pages(engine: Engine, *, settings: Any, dataset: str | None = None, only_articles: bool = False,
                limit: int | None = None, retry_refused: bool = False, resolver: Resolver | None = None,
                progress: Progress = SILENT, now: datetime | None = None,
                backend: httpcore.AsyncNetworkBackend | None = None,
                parent_id: int | None = None) -> FetchSummary:
    """Fetch pending canonical URLs (see :func:`linkfold.store.pages.select_fetch_pending`) and store pages.

    ``dataset`` keeps URLs sighted in that dataset; ``only_articles`` those matching the ruleset's article
    patterns; ``limit`` stops after that many URLs; ``retry_refused`` fetches the refused ones again (after
    ``allow_networks`` or a site's robots.txt changed). ``now`` overrides the clock for choosing failed URLs
    that are due; ``resolver`` and ``backend`` replace DNS and the socket layer (tests, lab pinning).
    """
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
    with recording_run(engine, "fetch", parent_id=parent_id) as run:
        summary.run_id = run.id
        writer = _Writer(engine, canon, ruleset_id=ruleset_id, run_id=run.id, summary=summary)

        def write(batch: list[tuple[sp.FetchPending, Fetched]]) -> None:
            writer.write(batch)
            run.counts = summary.counts()

        async def fetch(client: SafeClient, item: sp.FetchPending) -> Fetched | None:
            url = request_url(item.raw, item.url)
            return None if url is None else await fetch_one(client, url, max_hops=settings.max_hops,
                                                            never_follow=refuse)

        def skip(_item: sp.FetchPending) -> None:
            summary.skipped += 1

        try:
            run_requests(items, config=config, resolver=resolver, backend=backend, request=fetch,
                         write=write, batch_size=batch_size, progress=progress, on_skip=skip)
        finally:
            run.counts = summary.counts()
            progress.finish()
    refresh_statistics(engine, ["canonical_urls", "links"], changed={"pages": summary.pages_stored,
                                                                   "fetch_results": summary.selected})
    return summary


__all__ = ["FETCH_SOURCE", "FetchSummary", "Fetched", "fetch_one", "fetch_pages"]
