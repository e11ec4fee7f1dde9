"""What every requesting stage does around the one redirect loop, written once.

Following and fetching both: pick the URL to request for each pending item (:func:`request_url`), refuse
hosts the rules file lists (:func:`never_follow_check`), walk many chains at once on one event loop
(:func:`run_chains`; the safe client enforces the per-host and global limits), hand finished chains to
the stage's writer in batches, and count each outcome and schedule the next attempt of a failure the same
way (:func:`tally`, :func:`due_again`).

Writes happen in batches on the thread that called :func:`run_chains` (SQLite has one writer, so never
inside the workers). What finished before an interruption or an error is written too, and a batch that
failed to write is not retried on the way out.
"""

from __future__ import annotations

import asyncio
from collections import Counter
from collections.abc import Awaitable, Callable, Mapping, Sequence
from datetime import datetime
from typing import Any, Protocol, TypeVar
from urllib.parse import urlsplit

import httpcore

from ..canon import Ruleset
from ..progress import Progress
from .client import SafeClient
from .config import ClientConfig
from .guard import Resolver
from .redirects import Chain, State, follow_chain
from .retry import next_attempt


class PendingURL(Protocol):
    """What a stage's pending item offers: its canonical URL and the first raw URL stored for it."""

    @property
    def url(self) -> str: ...

    @property
    def raw(self) -> str | None: ...


class StoredIds(Protocol):
    """The ids a URL was stored under (``store.evidence.UrlIds``)."""

    @property
    def canonical_id(self) -> int: ...

    @property
    def raw_id(self) -> int: ...


class OutcomeCounts(Protocol):
    """A stage summary's counters of chains that did not resolve."""

    failed: Counter[str]
    refused: Counter[str]
    refusals: Counter[str]


T = TypeVar("T")
R = TypeVar("R")
P = TypeVar("P", bound=PendingURL)


def request_url(raw: str | None, canonical: str | None) -> str | None:
    """The URL to request for a pending item: the first raw URL seen for it, trimmed, else the canonical
    URL (docs/following.md: a canonical fold can name a URL the server does not answer)."""
    for candidate in (raw, canonical):
        if candidate and candidate.strip().lower().startswith(("http://", "https://")):
            return candidate.strip()
    return None


def never_follow_check(rules: Ruleset) -> Callable[[str], str | None] | None:
    """A check for :func:`follow_chain`: why a URL's host must not be asked (the ruleset lists it, or a
    parent domain of it, in ``never_follow_hosts``), else None. None when the list is empty.

    The host is the one the request would go to, not the canonical URL's: a wrapper URL is asked at the
    wrapper's host even though it canonicalises to its target.
    """
    if not rules.never_follow_hosts:
        return None
    from ..canon.rules import normalise_rule_host

    def check(url: str) -> str | None:
        try:
            host = urlsplit(url).hostname
        except ValueError:
            return None
        norm = normalise_rule_host(host) if host else None
        if norm is not None and rules.never_follows(norm):
            return f"{norm} is listed in never_follow_hosts (rules file); no request sent"
        return None

    return check


def tally(counts: OutcomeCounts, chain: Chain) -> None:
    """Count a chain that did not resolve: by failure class, and a refusal also by its reason."""
    if chain.state is State.RESOLVED:
        return
    failure = chain.failure.value if chain.failure else "unknown"
    if chain.state is State.REFUSED:
        counts.refused[failure] += 1
        counts.refusals[chain.reason or "unknown"] += 1
    else:
        counts.failed[failure] += 1


def due_again(chain: Chain, attempts: int) -> datetime | None:
    """When a failed chain's start URL is due again after ``attempts`` attempts (this one included);
    None for a resolved or refused one (a refusal is retried only when asked: ``--retry-refused``)."""
    if chain.state is not State.FAILED or chain.failure is None:
        return None
    return next_attempt(chain.failure, attempts, chain.at, chain.retry_after)


def hop_links(chain: Chain, ids: Mapping[str, StoredIds], *, run_id: int,
              detail: Mapping[str, Any] | None = None) -> tuple[list[dict[str, Any]], int]:
    """The ``links`` rows (kind ``redirect``, source ``fetched``) for a chain's observed redirects, and the
    number of hops left out because both ends are one canonical URL (http→https, a trailing slash: no
    evidence). A hop with an end that could not be stored (not in ``ids``) is left out too. ``detail``
    adds keys to each row's detail (the fetch stage names itself)."""
    rows, same = [], 0
    for hop in chain.hops:
        src, dst = ids.get(hop.src), ids.get(hop.dst)
        if src is None or dst is None:
            continue
        if src.canonical_id == dst.canonical_id:
            same += 1
            continue
        rows.append({"kind": "redirect", "src_id": src.canonical_id, "dst_id": dst.canonical_id,
                     "status": hop.status, "hop": hop.number, "source": "fetched",
                     "detail": {"method": hop.method, "src_raw_id": src.raw_id, "dst_raw_id": dst.raw_id,
                                **(detail or {})},
                     "run_id": run_id, "created_at": hop.at})
    return rows, same


async def _drain(client: SafeClient, items: Sequence[T], *, parallel: int,
                 request: Callable[[SafeClient, T], Awaitable[R | None]],
                 on_done: Callable[[T, R | None], None]) -> None:
    queue: asyncio.Queue[T] = asyncio.Queue()
    for item in items:
        queue.put_nowait(item)

    async def worker() -> None:
        while True:
            try:
                item = queue.get_nowait()
            except asyncio.QueueEmpty:
                return
            on_done(item, await request(client, item))

    await asyncio.gather(*(worker() for _ in range(max(1, min(parallel, len(items))))))


def run_requests(items: Sequence[T], *, config: ClientConfig, resolver: Resolver | None,
                 backend: httpcore.AsyncNetworkBackend | None,
                 request: Callable[[SafeClient, T], Awaitable[R | None]],
                 write: Callable[[list[tuple[T, R]]], None], batch_size: int, progress: Progress,
                 on_skip: Callable[[T], None]) -> None:
    """Run ``request`` for every item (``None`` means the item was skipped) and ``write`` the results in
    batches of ``batch_size``; ``progress`` advances once per finished item."""
    pending: list[tuple[T, R]] = []

    def done(item: T, result: R | None) -> None:
        progress.advance(1)
        if result is None:
            on_skip(item)
            return
        pending.append((item, result))
        if len(pending) >= batch_size:
            batch = list(pending)
            pending.clear()  # a batch that fails to write is not written again on the way out
            write(batch)

    async def go() -> None:
        async with SafeClient(config, resolver=resolver, backend=backend) as client:
            await _drain(client, items, parallel=config.concurrency, request=request, on_done=done)

    try:
        asyncio.run(go())
    finally:
        if pending:
            batch = list(pending)
            pending.clear()
            write(batch)


def run_chains(items: Sequence[P], *, config: ClientConfig, keep_body: bool, max_hops: int,
               never_follow: Callable[[str], str | None] | None, write: Callable[[list[tuple[P, Chain]]], None],
               batch_size: int, progress: Progress, on_skip: Callable[[P], None],
               resolver: Resolver | None = None, backend: httpcore.AsyncNetworkBackend | None = None) -> None:
    """Walk the chain of every pending item's URL (:func:`follow_chain` with ``keep_body``) and ``write``
    the finished chains in batches; an item with no http(s) URL to request goes to ``on_skip``."""

    async def walk(client: SafeClient, item: P) -> Chain | None:
        url = request_url(item.raw, item.url)
        if url is None:
            return None
        return await follow_chain(client, url, max_hops=max_hops, keep_body=keep_body, never_follow=never_follow)

    run_requests(items, config=config, resolver=resolver, backend=backend, request=walk, write=write,
                 batch_size=batch_size, progress=progress, on_skip=on_skip)


__all__ = ["OutcomeCounts", "PendingURL", "StoredIds", "due_again", "hop_links", "never_follow_check",
           "request_url", "run_chains", "run_requests", "tally"]
