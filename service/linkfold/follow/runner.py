"""Many requests at once, results written in batches: the loop that following and fetching share.

Requests run concurrently on one event loop (the safe client enforces the per-host and global limits);
each finished item is handed to the caller's ``write`` in batches, on the thread that called
:func:`run_requests` (SQLite has one writer, so writes never happen inside the workers). What finished
before an interruption or an error is written too, and a batch that failed to write is not retried on
the way out.
"""

from __future__ import annotations

import asyncio
from collections.abc import Awaitable, Callable, Sequence
from typing import TypeVar

import httpcore

from ..progress import Progress
from .client import ClientConfig, SafeClient
from .guard import Resolver

T = TypeVar("T")
R = TypeVar("R")


def request_url(raw: str | None, canonical: str | None) -> str | None:
    """The URL to request for a pending item: the first raw URL seen for it, trimmed, else the canonical
    URL (docs/following.md: a canonical fold can name a URL the server does not answer)."""
    for candidate in (raw, canonical):
        if candidate and candidate.strip().lower().startswith(("http://", "https://")):
            return candidate.strip()
    return None


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
