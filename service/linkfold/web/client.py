"""The safe, polite HTTP client that link following and page fetching share.

Safe: every connection goes through the guarded transport (:mod:`.transport`, :mod:`.guard`), and
redirects are never followed by httpx itself: the caller sees every hop (:mod:`.redirects`), and every
hop passes the guard again.

Polite: a user agent with the lab's contact address, per-host pacing (:mod:`.pacing`), robots.txt
honoured before every GET (:meth:`SafeClient.require_robots`; the file is read by :mod:`.robots`),
retries on 429 and 503 that respect ``Retry-After`` and jittered backoff otherwise (:mod:`.retry`).

Bounded: a total deadline per request (a server that drips bytes slowly cannot hold a slot forever), a
response-size cap checked against ``Content-Length`` first and then while streaming, so a huge body is
never downloaded.

Single-URL failures are :class:`~.failures.FetchError` with a stable ``failure`` class, which the stages
store.
"""

from __future__ import annotations

import asyncio
import logging
import random
import time
from collections.abc import Awaitable, Callable
from dataclasses import dataclass

import httpcore
import httpx

from ..canon import whatwg_href
from .config import PRODUCT_TOKEN, ClientConfig
from .failures import REDIRECT_STATUSES, RETRY_STATUSES, TRANSIENT, Failure, FetchError, classify
from .guard import AddressGuard, Resolver, system_resolver
from .pacing import HostPacing
from .retry import backoff_delay, parse_retry_after
from .robots import ROBOTS_MAX_BYTES, RobotRules, parse_robots
from .transport import GuardedBackend, GuardedTransport

log = logging.getLogger("linkfold")

#: RFC 9309 §2.3.1.2: crawlers SHOULD follow at least five consecutive redirects for robots.txt.
ROBOTS_MAX_REDIRECTS = 5

#: A body we do not need is still read (and dropped) up to this size, to keep the connection.
DRAIN_MAX_BYTES = 16 * 1024


@dataclass(frozen=True)
class Reply:
    """One HTTP exchange: status, the headers that matter, and the body when it was asked for."""

    url: str
    method: str
    status: int
    headers: httpx.Headers
    body: bytes | None
    truncated: bool
    attempts: int
    #: Seconds the server asked us to wait (429/503 ``Retry-After``), when retries ran out.
    retry_after: float | None = None

    @property
    def location(self) -> str | None:
        return self.headers.get("location")


class SafeClient:
    """Async HTTP client for untrusted URLs. Use as ``async with SafeClient(config) as client``.

    ``resolver``, ``sleep``, ``clock`` and ``backend`` are injectable so tests decide refusals without
    DNS, never sleep for real, and can watch every connection the client opens.
    """

    def __init__(self, config: ClientConfig, *, resolver: Resolver | None = None,
                 sleep: Callable[[float], Awaitable[None]] | None = None,
                 clock: Callable[[], float] | None = None,
                 rand: Callable[[], float] = random.random,
                 backend: httpcore.AsyncNetworkBackend | None = None) -> None:
        config.check()
        self.config = config
        self.guard = AddressGuard.from_settings(config.allow_networks)
        self.backend = GuardedBackend(self.guard, resolver or system_resolver, backend)
        self._sleep = sleep or asyncio.sleep
        self._rand = rand
        self._pacing = HostPacing(concurrency=config.concurrency, host_concurrency=config.host_concurrency,
                                  host_delay=config.host_delay, clock=clock or time.monotonic,
                                  sleep=self._sleep)
        self._robots: dict[str, RobotRules] = {}
        self._robots_locks: dict[str, asyncio.Lock] = {}
        # The transport is used directly, not through httpx.AsyncClient: the client keeps a cookie jar
        # (state we must not keep from untrusted sites, and personal data besides) and, even with
        # redirects off, parses every Location eagerly, so a Location it cannot parse (``mailto:x@y``)
        # raises after the response arrived and leaves it unclosed (httpx 0.28).
        self._transport = GuardedTransport(self.backend, max_connections=config.concurrency,
                                           ssl_context=config.ssl_context())
        self._headers = {"User-Agent": config.user_agent, "Accept": "*/*",
                         "Accept-Encoding": "gzip, deflate"}
        self._timeouts = httpx.Timeout(config.timeout).as_dict()

    async def __aenter__(self) -> SafeClient:
        return self

    async def __aexit__(self, *exc: object) -> None:
        await self.aclose()

    async def aclose(self) -> None:
        await self._transport.aclose()

    # -- requests --
    async def _once(self, method: str, url: str, *, read_body: bool, max_bytes: int,
                    truncate: bool) -> Reply:
        # The URL as the WHATWG parser reads it, as a browser would request it: httpx reads "2130706433" or
        # "%31%32%37.0.0.1" as a host name and would hand it to the resolver; our parser makes it the
        # address it stands for, which the guard then checks without asking any resolver.
        whatwg = whatwg_href(url)
        if whatwg is None:
            raise FetchError(Failure.BAD_URL, "not a URL the WHATWG URL parser accepts", url=url)
        try:
            host = httpx.URL(whatwg).host.lower()
        except httpx.InvalidURL as exc:
            raise FetchError(Failure.BAD_URL, str(exc), url=url) from None
        if not host:
            raise FetchError(Failure.BAD_URL, "no host", url=url)
        async with self._pacing.slot(host):
            try:
                async with asyncio.timeout(self.config.timeout):
                    request = httpx.Request(method, whatwg, headers=self._headers,
                                            extensions={"timeout": self._timeouts})
                    response = await self._transport.handle_async_request(request)
                    response.request = request
                    try:
                        body, truncated = (None, False)
                        if read_body:
                            body, truncated = await self._read_capped(response, url, max_bytes, truncate)
                        else:
                            await self._drain_small(response, method)
                    finally:
                        await response.aclose()
            except FetchError:
                raise
            except Exception as exc:
                raise classify(exc, url) from exc
        return Reply(url=url, method=method, status=response.status_code, headers=response.headers,
                     body=body, truncated=truncated, attempts=1)

    async def _drain_small(self, response: httpx.Response, method: str) -> None:
        """Read and drop a body we do not need when it is small, so the connection can be used again.

        httpcore returns a connection to the pool only once the response was read to its end; closing
        it early means a new TCP connection (and, for https, a new handshake) for the next hop. A large
        or unannounced body is not worth reading: the connection is closed instead.
        """
        declared = response.headers.get("content-length", "")
        if method == "HEAD" or (declared.isdigit() and int(declared) <= DRAIN_MAX_BYTES):
            async for _chunk in response.aiter_raw():
                pass

    async def _read_capped(self, response: httpx.Response, url: str, max_bytes: int,
                           truncate: bool) -> tuple[bytes, bool]:
        declared = response.headers.get("content-length", "")
        if declared.isdigit() and int(declared) > max_bytes and not truncate:
            raise FetchError(Failure.TOO_LARGE, f"Content-Length {declared} is over the cap of "
                                                f"{max_bytes} bytes", url=url)
        chunks: list[bytes] = []
        size = 0
        # The cap counts decoded bytes, so a small compressed body cannot unpack into a huge one.
        async for chunk in response.aiter_bytes():
            size += len(chunk)
            if size > max_bytes:
                if not truncate:
                    raise FetchError(Failure.TOO_LARGE, f"body is over the cap of {max_bytes} bytes",
                                     url=url)
                chunks.append(chunk[:max_bytes - (size - len(chunk))])
                return b"".join(chunks), True
            chunks.append(chunk)
        return b"".join(chunks), False

    async def request(self, method: str, url: str, *, read_body: bool = True, max_bytes: int | None = None,
                      truncate: bool = False) -> Reply:
        """One request with retries on 429/503 and on connection failures.

        Returns the last :class:`Reply` (which may still be a 429/503 when retries ran out or the
        server asked for a wait longer than ``max_wait``; ``retry_after`` then says how long).
        Raises :class:`FetchError` for transport failures after retries.
        """
        cap = self.config.max_bytes if max_bytes is None else max_bytes
        attempts = 0
        while True:
            attempts += 1
            try:
                reply = await self._once(method, url, read_body=read_body, max_bytes=cap, truncate=truncate)
            except FetchError as exc:
                if exc.failure in TRANSIENT and attempts <= self.config.retries:
                    delay = backoff_delay(attempts - 1, cap=self.config.max_wait, rand=self._rand)
                    log.debug("%s %s: %s; retry in %.1fs", method, url, exc, delay)
                    await self._sleep(delay)
                    continue
                raise
            if reply.status not in RETRY_STATUSES:
                return _with_attempts(reply, attempts)
            asked = parse_retry_after(reply.headers.get("retry-after"))
            if attempts > self.config.retries or (asked is not None and asked > self.config.max_wait):
                return _with_attempts(reply, attempts, retry_after=asked)
            if asked is not None:
                # Wait at least what the server asked, plus a little jitter so we do not all return at once.
                delay = asked + self._rand() * min(1.0, asked / 10)
            else:
                delay = backoff_delay(attempts - 1, cap=self.config.max_wait, rand=self._rand)
            log.debug("%s %s: HTTP %d; retry in %.1fs", method, url, reply.status, delay)
            await self._sleep(delay)

    async def get(self, url: str, *, max_bytes: int | None = None, check_robots: bool = True) -> Reply:
        """A GET that honours robots.txt first (raises ``FetchError(ROBOTS)`` when disallowed)."""
        if check_robots:
            await self.require_robots(url)
        return await self.request("GET", url, max_bytes=max_bytes)

    # -- robots.txt --
    async def robots_rules(self, url: str) -> RobotRules:
        """The robots.txt rules of ``url``'s origin, fetched once per origin for this client's life."""
        parsed = httpx.URL(url)
        origin = f"{parsed.scheme}://{parsed.netloc.decode('ascii')}"
        rules = self._robots.get(origin)
        if rules is None:
            lock = self._robots_locks.setdefault(origin, asyncio.Lock())
            async with lock:  # one fetch per origin, however many GETs wait for it
                rules = self._robots.get(origin)
                if rules is None:
                    rules = await self._fetch_robots(origin)
                    self._robots[origin] = rules
        return rules

    async def robots_allows(self, url: str) -> bool:
        rules = await self.robots_rules(url)
        return rules.allows(httpx.URL(url).raw_path.decode("ascii"))

    async def require_robots(self, url: str, *, context: str = "") -> None:
        """Raise ``FetchError(ROBOTS)`` unless robots.txt allows a GET of ``url``; say why."""
        rules = await self.robots_rules(url)
        if not rules.allows(httpx.URL(url).raw_path.decode("ascii")):
            why = "disallows this URL for linkfold" if rules.basis == "file" else rules.basis
            raise FetchError(Failure.ROBOTS, f"{context}robots.txt {why}", url=url,
                             reason="robots_file" if rules.basis == "file" else "robots_unavailable")

    async def _fetch_robots(self, origin: str) -> RobotRules:
        """RFC 9309 §2.3.1: 2xx parse, 4xx allow all, 5xx or unreachable disallow all."""
        from ..canon import resolve_reference

        url = origin + "/robots.txt"
        for _ in range(ROBOTS_MAX_REDIRECTS + 1):
            try:
                reply = await self.request("GET", url, max_bytes=ROBOTS_MAX_BYTES, truncate=True)
            except FetchError as exc:
                log.info("robots.txt of %s unreachable (%s): treating the site as disallowed", origin, exc)
                return RobotRules.disallow_all(f"unreachable ({exc}): everything disallowed, RFC 9309 "
                                               "§2.3.1.4")
            if reply.status in REDIRECT_STATUSES and reply.location:
                url = resolve_reference(url, reply.location)
                continue
            if 200 <= reply.status < 300:
                text = (reply.body or b"").decode("utf-8", errors="replace")  # §2.3: UTF-8
                return parse_robots(text, PRODUCT_TOKEN)
            if reply.status == 429:
                # Common practice, no source: "too many requests" means the server is unavailable to us,
                # not that the file is missing, so it counts as unreachable rather than as a 4xx.
                return RobotRules.disallow_all("answered 429: everything disallowed")
            if 400 <= reply.status < 500:
                return RobotRules.allow_all()
            return RobotRules.disallow_all(f"answered {reply.status}: everything disallowed, RFC 9309 "
                                           "§2.3.1.4")
        # §2.3.1.2: past the redirect limit the file MAY be treated as unavailable (4xx).
        return RobotRules.allow_all()


def _with_attempts(reply: Reply, attempts: int, retry_after: float | None = None) -> Reply:
    return Reply(url=reply.url, method=reply.method, status=reply.status, headers=reply.headers,
                 body=reply.body, truncated=reply.truncated, attempts=attempts, retry_after=retry_after)


__all__ = ["DRAIN_MAX_BYTES", "ROBOTS_MAX_REDIRECTS", "Reply", "SafeClient"]
