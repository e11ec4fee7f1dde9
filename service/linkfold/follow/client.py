"""The safe, polite HTTP client that link following and page fetching share.

Safe: every connection goes through the request-forgery guard (:mod:`.guard`) *inside the transport*:
the name is resolved once, every address is checked, and the socket is opened to the checked address,
so neither a hostile name nor a redirect to a private address nor DNS rebinding can reach the lab's
network. Proxies from the environment are ignored (they would bypass the guard). Redirects are never
followed by httpx itself: the caller sees every hop, and every hop passes the guard again.

Polite: a user agent with the lab's contact address, a global cap on requests in flight, a per-host cap
and a delay between two requests to the same host, robots.txt honoured before every GET
(:meth:`SafeClient.robots_allows`), retries on 429 and 503 that respect ``Retry-After`` (RFC 9110
§10.2.3), and jittered exponential backoff otherwise.

Bounded: a total deadline per request (a server that drips bytes slowly cannot hold a slot forever), a
response-size cap checked against ``Content-Length`` first and then while streaming, so a huge body is
never downloaded.

Single-URL failures are :class:`FetchError` with a stable ``failure`` class, which the stages store.
"""

from __future__ import annotations

import asyncio
import contextlib
import email.utils
import logging
import os
import random
import ssl
import time
from collections.abc import AsyncIterator, Awaitable, Callable, Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from enum import StrEnum
from typing import Any

import httpcore
import httpx

from .. import __version__
from ..canon import whatwg_href
from ..errors import ConfigError
from .guard import (
    AddressGuard,
    AddressRefused,
    ResolveFailed,
    Resolver,
    literal_address,
    parse_networks,
    system_resolver,
)
from .robots import ROBOTS_MAX_BYTES, RobotRules, parse_robots

log = logging.getLogger("linkfold")

#: The product token matched against ``User-agent`` lines of robots.txt (RFC 9309 §2.2.1).
PRODUCT_TOKEN = "linkfold"

#: RFC 9309 §2.3.1.2: crawlers SHOULD follow at least five consecutive redirects for robots.txt.
ROBOTS_MAX_REDIRECTS = 5

#: First retry delay of the jittered exponential backoff, seconds (common practice, no source).
BACKOFF_BASE = 1.0

#: A body we do not need is still read (and dropped) up to this size, to keep the connection.
DRAIN_MAX_BYTES = 16 * 1024

REDIRECT_STATUSES = frozenset({301, 302, 303, 307, 308})  # RFC 9110 §15.4.2–§15.4.9
RETRY_STATUSES = frozenset({429, 503})  # RFC 6585 §4, RFC 9110 §15.6.4: both may carry Retry-After


class Failure(StrEnum):
    """Why one URL could not be fetched or followed; stored as text, so keep the values stable."""

    DNS = "dns"                      # the name does not resolve
    CONNECT = "connect"              # connection refused, reset, or broken mid-response
    TIMEOUT = "timeout"              # no complete answer within http_timeout
    TLS = "tls"                      # TLS handshake failure (protocol, cipher, a connection cut in it)
    TLS_CERTIFICATE = "tls_certificate"  # the server's certificate failed the check (issuer, name, dates)
    PROTOCOL = "protocol"            # the server did not speak valid HTTP/1.1
    TOO_LARGE = "too_large"          # the body is over http_max_bytes
    REFUSED = "refused"              # the request-forgery guard refused the address
    ROBOTS = "robots"                # robots.txt disallows the GET
    NEVER_FOLLOW = "never_follow"    # the rules file lists the host in never_follow_hosts: not asked
    BAD_URL = "bad_url"              # not a fetchable http(s) URL
    HTTP_4XX = "http_4xx"            # the chain ended in a client error
    HTTP_5XX = "http_5xx"            # the chain ended in a server error (after retries)
    HTTP_OTHER = "http_other"        # 1xx or a 3xx we do not follow (300, 304, 305 …)
    LOOP = "loop"                    # a redirect led back to a URL already in the chain
    TOO_MANY_HOPS = "too_many_hops"  # more than max_hops redirects
    BAD_LOCATION = "bad_location"    # a redirect without a usable Location header


#: The refusal reason (``FetchError.reason``) of a URL on a host the rules file lists in never_follow_hosts.
NEVER_FOLLOW_REASON = "never_follow_hosts"

#: Failures that a retry in the same run may cure (a later --retry-failed may cure any of them).
TRANSIENT = frozenset({Failure.CONNECT, Failure.TIMEOUT})


class FetchError(Exception):
    """One request failed; ``failure`` is the stored class, ``detail`` a short text for people, and
    ``reason`` a stable key for a refusal (``private``, ``loopback`` … from the guard, ``robots_file``,
    ``robots_unavailable``), so refusals can be counted and explained (:func:`explain_refusal`)."""

    def __init__(self, failure: Failure, detail: str, *, url: str | None = None,
                 reason: str | None = None) -> None:
        super().__init__(f"{failure.value}: {detail}")
        self.failure = failure
        self.detail = detail
        self.url = url
        self.reason = reason


@dataclass(frozen=True)
class ClientConfig:
    """What the client needs from the settings, checked once."""

    contact: str
    timeout: float = 15.0
    max_bytes: int = 5_000_000
    concurrency: int = 16
    host_concurrency: int = 2
    host_delay: float = 1.0
    retries: int = 3
    max_wait: float = 60.0
    allow_networks: tuple[str, ...] = ()
    ca_bundle: str = ""

    @classmethod
    def from_settings(cls, settings: Any) -> ClientConfig:
        return cls(contact=settings.contact, timeout=settings.http_timeout,
                   max_bytes=settings.http_max_bytes, concurrency=settings.http_concurrency,
                   host_concurrency=settings.http_host_concurrency, host_delay=settings.http_host_delay,
                   retries=max(0, settings.http_retries), max_wait=settings.http_max_wait,
                   allow_networks=tuple(settings.allow_networks), ca_bundle=settings.ca_bundle or "")

    def check(self) -> None:
        """Refuse to make requests without a way for site operators to reach the lab."""
        if not self.contact.strip():
            raise ConfigError("no contact address set: linkfold puts it in the User-Agent of every request "
                              "so site operators can reach the lab",
                              hint="set LINKFOLD_CONTACT=mailto:lab@university.example (or a web page)")
        parse_networks(self.allow_networks)
        self.ssl_context()  # a CA bundle that cannot be read is a configuration error, before any request

    def ssl_context(self) -> ssl.SSLContext:
        """The context every HTTPS connection verifies with: the ``ca_bundle`` setting (which defaults to
        the standard ``SSL_CERT_FILE`` / ``SSL_CERT_DIR``), else the bundled Mozilla list (certifi)."""
        path = self.ca_bundle.strip()
        if not path:
            # trust_env=False: the environment is read once, by the settings, not again behind their back.
            return httpx.create_ssl_context(trust_env=False)
        hint = "set ca_bundle (LINKFOLD_CA_BUNDLE) or SSL_CERT_FILE to a PEM file of CA certificates"
        if not os.path.exists(path):
            raise ConfigError(f"ca_bundle: {path} does not exist", hint=hint)
        try:
            if os.path.isdir(path):
                return ssl.create_default_context(capath=path)
            return ssl.create_default_context(cafile=path)
        except (ssl.SSLError, OSError) as exc:
            raise ConfigError(f"ca_bundle: {path} holds no CA certificate that can be read ({exc})",
                              hint=hint) from None

    @property
    def user_agent(self) -> str:
        return f"{PRODUCT_TOKEN}/{__version__} (+{self.contact})"


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


# --- the guarded transport --------------------------------------------------------------------------

class GuardedBackend(httpcore.AsyncNetworkBackend):
    """httpcore network backend that resolves and checks before it opens any socket.

    httpcore calls ``connect_tcp(host, port)`` with the URL's host; TLS is then started by httpcore with
    the URL's host as SNI and for certificate checks, so pinning the address here keeps both right.
    """

    def __init__(self, guard: AddressGuard, resolver: Resolver,
                 inner: httpcore.AsyncNetworkBackend | None = None) -> None:
        self.guard = guard
        self.resolver = resolver
        self.inner = inner or httpcore.AnyIOBackend()

    async def connect_tcp(self, host: str, port: int, timeout: float | None = None,
                          local_address: str | None = None,
                          socket_options: Any = None) -> httpcore.AsyncNetworkStream:
        literal = literal_address(host)
        addresses = [str(literal)] if literal is not None else await self.resolver(host, port)
        checked = self.guard.check_all(host, addresses)
        last: Exception | None = None
        for addr in checked:
            try:
                return await self.inner.connect_tcp(str(addr), port, timeout=timeout,
                                                    local_address=local_address,
                                                    socket_options=socket_options)
            except (httpcore.ConnectError, httpcore.ConnectTimeout) as exc:
                last = exc  # try the next checked address, as a browser would
        assert last is not None
        raise last

    async def connect_unix_socket(self, path: str, timeout: float | None = None,
                                  socket_options: Any = None) -> httpcore.AsyncNetworkStream:
        raise AddressRefused(path, "unix socket", "not a network address")

    async def sleep(self, seconds: float) -> None:
        await self.inner.sleep(seconds)


# httpcore's exceptions as httpx's, so callers handle one family (httpx maps them the same way).
_EXCEPTIONS: tuple[tuple[type[Exception], type[httpx.HTTPError]], ...] = (
    (httpcore.ConnectTimeout, httpx.ConnectTimeout),
    (httpcore.ReadTimeout, httpx.ReadTimeout),
    (httpcore.WriteTimeout, httpx.WriteTimeout),
    (httpcore.PoolTimeout, httpx.PoolTimeout),
    (httpcore.ConnectError, httpx.ConnectError),
    (httpcore.ReadError, httpx.ReadError),
    (httpcore.WriteError, httpx.WriteError),
    (httpcore.RemoteProtocolError, httpx.RemoteProtocolError),
    (httpcore.LocalProtocolError, httpx.LocalProtocolError),
    (httpcore.UnsupportedProtocol, httpx.UnsupportedProtocol),
    (httpcore.ProxyError, httpx.ProxyError),
    (httpcore.TimeoutException, httpx.TimeoutException),
    (httpcore.NetworkError, httpx.NetworkError),
    (httpcore.ProtocolError, httpx.ProtocolError),
)


_HTTPCORE_ERRORS = (httpcore.TimeoutException, httpcore.NetworkError, httpcore.ProtocolError,
                   httpcore.UnsupportedProtocol, httpcore.ProxyError)


@contextlib.contextmanager
def _mapped() -> Iterator[None]:
    try:
        yield
    except _HTTPCORE_ERRORS as exc:
        for source, target in _EXCEPTIONS:  # ordered: subclasses before their bases
            if isinstance(exc, source):
                raise target(str(exc)) from exc
        raise


class _ResponseStream(httpx.AsyncByteStream):
    def __init__(self, stream: Any) -> None:
        self._stream = stream

    async def __aiter__(self) -> AsyncIterator[bytes]:
        with _mapped():
            async for part in self._stream:
                yield part

    async def aclose(self) -> None:
        if hasattr(self._stream, "aclose"):
            with _mapped():
                await self._stream.aclose()


class GuardedTransport(httpx.AsyncBaseTransport):
    """An httpx transport over an httpcore pool whose every connection passes :class:`GuardedBackend`."""

    def __init__(self, backend: GuardedBackend, *, max_connections: int,
                 ssl_context: ssl.SSLContext | None = None) -> None:
        self._pool = httpcore.AsyncConnectionPool(
            ssl_context=ssl_context or httpx.create_ssl_context(trust_env=False),
            max_connections=max_connections,
            max_keepalive_connections=max_connections,
            keepalive_expiry=5.0,
            http1=True,
            http2=False,
            network_backend=backend,
        )

    async def handle_async_request(self, request: httpx.Request) -> httpx.Response:
        req = httpcore.Request(
            method=request.method,
            url=httpcore.URL(scheme=request.url.raw_scheme, host=request.url.raw_host,
                             port=request.url.port, target=request.url.raw_path),
            headers=request.headers.raw,
            content=request.stream,  # type: ignore[arg-type]
            extensions=request.extensions,
        )
        with _mapped():
            resp = await self._pool.handle_async_request(req)
        return httpx.Response(status_code=resp.status, headers=resp.headers,
                              stream=_ResponseStream(resp.stream), extensions=resp.extensions)

    async def aclose(self) -> None:
        await self._pool.aclose()


# --- retry timing -------------------------------------------------------------------------------------

def parse_retry_after(value: str | None, now: datetime | None = None) -> float | None:
    """Seconds to wait from a ``Retry-After`` value: delay-seconds or an HTTP-date (RFC 9110 §10.2.3).

    ``None`` when absent or unreadable; a date in the past gives 0.
    """
    if value is None:
        return None
    text = value.strip()
    if text.isdigit():
        return float(int(text))
    try:
        when = email.utils.parsedate_to_datetime(text)  # IMF-fixdate and the two obsolete forms
    except (TypeError, ValueError, IndexError):
        return None
    if when.tzinfo is None:
        when = when.replace(tzinfo=UTC)  # RFC 9110 §5.6.7: HTTP-dates are in GMT
    now = now or datetime.now(UTC)
    return max(0.0, (when - now).total_seconds())


def backoff_delay(attempt: int, *, base: float = BACKOFF_BASE, cap: float = 60.0,
                  rand: Callable[[], float] = random.random) -> float:
    """Delay before retry number ``attempt`` (0-based): exponential, capped, with "equal jitter".

    Half the exponential step is fixed and half is random, so clients that failed together do not
    retry together (common practice, no source).
    """
    step = min(cap, base * (2 ** attempt))
    return step / 2 + rand() * step / 2


def _tls_failure(exc: BaseException) -> Failure | None:
    """``TLS_CERTIFICATE`` when a certificate check failed anywhere in the exception's chain, ``TLS`` for
    any other TLS error, else None."""
    seen: set[int] = set()
    cur: BaseException | None = exc
    found = None
    while cur is not None and id(cur) not in seen:
        if isinstance(cur, ssl.SSLCertVerificationError | ssl.CertificateError):
            return Failure.TLS_CERTIFICATE
        if isinstance(cur, ssl.SSLError):
            found = Failure.TLS
        seen.add(id(cur))
        cur = cur.__cause__ or cur.__context__
    return found


def classify(exc: BaseException, url: str) -> FetchError:
    """A transport exception as a stored failure class."""
    if isinstance(exc, FetchError):
        return exc
    if isinstance(exc, AddressRefused):
        return FetchError(Failure.REFUSED, str(exc), url=url, reason=exc.kind)
    if isinstance(exc, ResolveFailed):
        return FetchError(Failure.DNS, str(exc), url=url)
    if isinstance(exc, TimeoutError | httpx.TimeoutException):
        return FetchError(Failure.TIMEOUT, f"no complete answer in time ({type(exc).__name__})", url=url)
    tls = _tls_failure(exc)
    if tls is Failure.TLS_CERTIFICATE:
        return FetchError(tls, f"{exc or type(exc).__name__} (when the issuer is a CA you trust, a lab's "
                               "own for instance, name it in ca_bundle: LINKFOLD_CA_BUNDLE or SSL_CERT_FILE)",
                          url=url)
    if tls is not None:
        return FetchError(tls, str(exc) or type(exc).__name__, url=url)
    if isinstance(exc, httpx.ProtocolError):
        return FetchError(Failure.PROTOCOL, str(exc) or type(exc).__name__, url=url)
    if isinstance(exc, httpx.UnsupportedProtocol | httpx.InvalidURL):
        return FetchError(Failure.BAD_URL, str(exc), url=url)
    if isinstance(exc, httpx.TransportError | OSError):
        return FetchError(Failure.CONNECT, str(exc) or type(exc).__name__, url=url)
    raise exc


# --- the client -----------------------------------------------------------------------------------------

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
        self._clock = clock or time.monotonic
        self._rand = rand
        self._all = asyncio.Semaphore(config.concurrency)
        self._hosts: dict[str, asyncio.Semaphore] = {}
        self._next_start: dict[str, float] = {}
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

    # -- politeness --
    @contextlib.asynccontextmanager
    async def _slot(self, host: str) -> AsyncIterator[None]:
        # The host's slot first: a request waiting for a busy host must not hold a global slot.
        sem = self._hosts.get(host)
        if sem is None:
            sem = self._hosts[host] = asyncio.Semaphore(self.config.host_concurrency)
        async with sem:
            now = self._clock()
            start = max(now, self._next_start.get(host, now))
            self._next_start[host] = start + self.config.host_delay
            if start > now:
                await self._sleep(start - now)
            async with self._all:
                yield

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
        async with self._slot(host):
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


__all__ = [
    "NEVER_FOLLOW_REASON",
    "PRODUCT_TOKEN",
    "REDIRECT_STATUSES",
    "ClientConfig",
    "Failure",
    "FetchError",
    "GuardedBackend",
    "GuardedTransport",
    "Reply",
    "SafeClient",
    "backoff_delay",
    "classify",
    "parse_retry_after",
]
