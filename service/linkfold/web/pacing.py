"""Politeness in time: a global cap on requests in flight, a per-host cap and a delay between two
requests to the same host (the settings ``http_concurrency``, ``http_host_concurrency`` and
``http_host_delay``).
"""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import AsyncIterator, Awaitable, Callable


class HostPacing:
    """Hands out request slots: at most ``host_concurrency`` per host and ``concurrency`` in all, with
    starts on one host at least ``host_delay`` seconds apart. ``clock`` and ``sleep`` are injectable so
    tests never wait for real."""

    def __init__(self, *, concurrency: int, host_concurrency: int, host_delay: float,
                 clock: Callable[[], float], sleep: Callable[[float], Awaitable[None]]) -> None:
        self.host_concurrency = host_concurrency
        self.host_delay = host_delay
        self._clock = clock
        self._sleep = sleep
        self._all = asyncio.Semaphore(concurrency)
        self._hosts: dict[str, asyncio.Semaphore] = {}
        self._next_start: dict[str, float] = {}

    @contextlib.asynccontextmanager
    async def slot(self, host: str) -> AsyncIterator[None]:
        # The host's slot first: a request waiting for a busy host must not hold a global slot.
        sem = self._hosts.get(host)
        if sem is None:
            sem = self._hosts[host] = asyncio.Semaphore(self.host_concurrency)
        async with sem:
            now = self._clock()
            start = max(now, self._next_start.get(host, now))
            self._next_start[host] = start + self.host_delay
            if start > now:
                await self._sleep(start - now)
            async with self._all:
                yield


__all__ = ["HostPacing"]
