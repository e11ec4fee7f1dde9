"""The safe HTTP client against a real server on 127.0.0.1.

Names are resolved by a :class:`StaticResolver` (no DNS traffic) and every connection goes through
:class:`LoopbackOnlyBackend`, which fails the test if anything but loopback were ever contacted.
Sleeping is faked, so Retry-After and backoff cost no wall time.
"""

from __future__ import annotations

import asyncio
import dataclasses
from datetime import UTC, datetime

import pytest

from httpserver import LoopbackOnlyBackend, LoopbackServer
from linkfold import __version__
from linkfold.errors import ConfigError
from linkfold.web import ClientConfig, Failure, FetchError, SafeClient
from linkfold.web.guard import StaticResolver
from linkfold.web.retry import backoff_delay, parse_retry_after

CONTACT = "mailto:lab@university.example"
BASE = ClientConfig(contact=CONTACT, timeout=2.0, max_bytes=64 * 1024, concurrency=4, host_concurrency=2,
                    host_delay=0.0, retries=2, max_wait=5.0, allow_networks=("127.0.0.0/8",))
NAMES = {"short.test": ["127.0.0.1"], "private.test": ["10.0.0.5"], "mixed.test": ["127.0.0.1", "10.0.0.6"],
         "meta.test": ["169.254.169.254"]}


class FakeTime:
    """A monotonic clock that only moves when the client sleeps."""

    def __init__(self) -> None:
        self.now = 1000.0
        self.slept: list[float] = []

    def clock(self) -> float:
        return self.now

    async def sleep(self, seconds: float) -> None:
        self.slept.append(seconds)
        self.now += seconds
        await asyncio.sleep(0)


class Harness:
    def __init__(self, **config) -> None:
        self.config = dataclasses.replace(BASE, **config)
        self.time = FakeTime()
        self.backend = LoopbackOnlyBackend()
        self.resolver = StaticResolver(NAMES)

    def run(self, func):
        async def go():
            async with SafeClient(self.config, resolver=self.resolver, sleep=self.time.sleep,
                                  clock=self.time.clock, rand=lambda: 0.5, backend=self.backend) as client:
                return await func(client)
        return asyncio.run(go())

    def failure(self, func) -> FetchError:
        with pytest.raises(FetchError) as info:
            self.run(func)
        return info.value


def test_contact_is_required_before_any_request():
    with pytest.raises(ConfigError, match="contact"):
        SafeClient(dataclasses.replace(BASE, contact=" "))


def test_user_agent_and_host_header_with_a_pinned_address(server):
    h = Harness()
    reply = h.run(lambda c: c.request("GET", server.url("/final", host="short.test")))
    assert reply.status == 200 and reply.body.startswith(b"<!doctype html>")
    seen = server.seen[-1]
    # RFC 9110 §7.2: Host carries the name and the port of the target URI, not the address we pinned.
    assert seen.host == f"short.test:{server.port}"
    assert seen.user_agent == f"linkfold/{__version__} (+{CONTACT})"
    assert h.resolver.asked == ["short.test"]
    assert h.backend.connected == [("127.0.0.1", server.port)]


@pytest.mark.parametrize("host", ["private.test", "mixed.test", "meta.test"])
def test_names_resolving_to_private_addresses_are_refused_before_connecting(server, host):
    h = Harness()
    err = h.failure(lambda c: c.request("HEAD", server.url("/final", host=host)))
    assert err.failure is Failure.REFUSED
    assert h.backend.connected == [] and server.seen == []


@pytest.mark.parametrize("netloc", ["10.0.0.7", "[::ffff:10.0.0.1]", "169.254.169.254", "[fd00::1]",
                                    "0.0.0.0", "100.64.1.1"])
def test_private_literals_are_refused_without_resolving(netloc):
    h = Harness()
    err = h.failure(lambda c: c.request("HEAD", f"http://{netloc}/latest/meta-data/"))
    assert err.failure is Failure.REFUSED
    assert h.resolver.asked == [] and h.backend.connected == []


def test_loopback_is_refused_unless_allowed(server):
    h = Harness(allow_networks=())
    err = h.failure(lambda c: c.request("HEAD", server.url("/final")))
    assert err.failure is Failure.REFUSED and "loopback" in err.detail
    assert server.seen == []


def test_environment_proxies_are_ignored(server, monkeypatch):
    # A proxy would receive the request instead of the guarded connection; it must never be used.
    monkeypatch.setenv("HTTP_PROXY", "http://10.9.9.9:3128")
    monkeypatch.setenv("ALL_PROXY", "http://10.9.9.9:3128")
    h = Harness()
    assert h.run(lambda c: c.request("HEAD", server.url("/final"))).status == 200
    assert h.backend.connected == [("127.0.0.1", server.port)]


def test_connections_are_reused_between_hops(server):
    # A body we do not need is drained when small, so httpcore can keep the connection (a new TCP and
    # TLS handshake per hop would cost the site and us).
    h = Harness()

    async def three(client):
        await client.request("HEAD", server.url("/chain/1"))
        await client.request("GET", server.url("/final"), read_body=False)  # small declared body
        await client.request("HEAD", server.url("/chain/0"))

    h.run(three)
    assert h.backend.connected == [("127.0.0.1", server.port)]


def test_cookies_are_never_kept_or_sent(server):
    # Browsing data is personal data: a site's cookie is state we neither store nor send back.
    h = Harness()

    async def two(client):
        await client.request("HEAD", server.url("/cookie"))
        await client.request("HEAD", server.url("/final"))

    h.run(two)
    assert [s.cookie for s in server.seen] == [None, None]


def test_unknown_name_is_a_dns_failure():
    err = Harness().failure(lambda c: c.request("HEAD", "http://nowhere.test/x"))
    assert err.failure is Failure.DNS


def test_slow_server_times_out(server):
    server.slow_seconds = 3.0
    h = Harness(timeout=0.3, retries=0)
    err = h.failure(lambda c: c.request("GET", server.url("/slow")))
    assert err.failure is Failure.TIMEOUT


def test_timeouts_are_retried_with_backoff(server):
    server.slow_seconds = 3.0
    h = Harness(timeout=0.2, retries=2)
    err = h.failure(lambda c: c.request("HEAD", server.url("/slow")))
    assert err.failure is Failure.TIMEOUT
    assert server.paths() == ["/slow"] * 3
    assert h.time.slept == [backoff_delay(0, rand=lambda: 0.5), backoff_delay(1, rand=lambda: 0.5)]


def test_huge_body_stops_at_the_cap(server):
    h = Harness(max_bytes=256 * 1024)
    err = h.failure(lambda c: c.request("GET", server.url("/huge")))
    assert err.failure is Failure.TOO_LARGE
    # The server would send 1 GB; far less left it before the client hung up (socket buffers only).
    assert server.huge_written < 200_000_000


def test_declared_length_over_the_cap_is_refused_before_reading(server):
    err = Harness().failure(lambda c: c.request("GET", server.url("/huge-declared")))
    assert err.failure is Failure.TOO_LARGE and "Content-Length" in err.detail


def test_truncating_read_keeps_exactly_the_cap(server):
    reply = Harness().run(lambda c: c.request("GET", server.url("/huge"), max_bytes=100_000, truncate=True))
    assert reply.truncated and len(reply.body) == 100_000


def test_redirect_bodies_are_not_read(server):
    reply = Harness().run(lambda c: c.request("GET", server.url("/huge"), read_body=False))
    assert reply.status == 200 and reply.body is None


def test_429_with_retry_after_is_retried_after_the_asked_wait(server):
    h = Harness(retries=3)
    reply = h.run(lambda c: c.request("HEAD", server.url("/busy/a?n=2&after=1")))
    assert reply.status == 200 and reply.attempts == 3
    # RFC 9110 §10.2.3 / RFC 6585 §4: wait at least the asked delay-seconds (+ ≤10 % jitter).
    assert len(h.time.slept) == 2 and all(1.0 <= s <= 1.1 for s in h.time.slept)


def test_retry_after_longer_than_max_wait_gives_up_at_once(server):
    h = Harness(max_wait=5.0)
    reply = h.run(lambda c: c.request("HEAD", server.url("/busy/b?n=9&after=3600")))
    assert reply.status == 429 and reply.retry_after == 3600.0 and reply.attempts == 1
    assert h.time.slept == []


def test_503_until_retries_run_out(server):
    h = Harness(retries=2)
    reply = h.run(lambda c: c.request("HEAD", server.url("/unavailable")))
    assert reply.status == 503 and reply.attempts == 3 and reply.retry_after == 1.0
    assert server.paths() == ["/unavailable"] * 3


def test_connection_refused_is_retried_then_reported():
    h = Harness(retries=1)
    with LoopbackServer() as closed:
        port = closed.port
    err = h.failure(lambda c: c.request("HEAD", f"http://127.0.0.1:{port}/"))
    assert err.failure is Failure.CONNECT and len(h.time.slept) == 1


def test_tls_failure_is_its_own_class(server):
    # Speaking TLS to a plain-HTTP server fails the handshake.
    err = Harness(retries=0).failure(lambda c: c.request("HEAD", f"https://127.0.0.1:{server.port}/"))
    assert err.failure is Failure.TLS


def test_per_host_delay_spaces_requests_to_one_host(server):
    h = Harness(host_delay=1.5)

    async def three(client):
        await client.request("HEAD", server.url("/final"))
        await client.request("HEAD", server.url("/final", host="short.test"))  # another host: no wait
        await client.request("HEAD", server.url("/final"))

    h.run(three)
    assert h.time.slept == [1.5]


@pytest.mark.parametrize(("hosts", "caps"), [
    (["short.test"] * 3, {"host_concurrency": 1, "concurrency": 8}),
    (["a.test", "b.test", "c.test"], {"host_concurrency": 3, "concurrency": 1}),
])
def test_concurrency_caps(server, hosts, caps):
    server.slow_seconds = 0.2
    h = Harness(**caps)
    h.resolver = StaticResolver({name: ["127.0.0.1"] for name in hosts})

    async def many(client):
        await asyncio.gather(*(client.request("HEAD", server.url("/slow", host=name)) for name in hosts))

    h.run(many)
    assert server.paths() == ["/slow"] * 3
    assert server.max_active == 1  # the server never saw two of them at once


def test_robots_disallow_blocks_get_and_is_fetched_once_per_origin(server):
    server.robots_status = 200
    server.robots_text = "User-agent: linkfold\nDisallow: /final\n\nUser-agent: *\nDisallow: /\n"
    h = Harness()

    async def two(client):
        with pytest.raises(FetchError) as info:
            await client.get(server.url("/final"))
        assert info.value.failure is Failure.ROBOTS
        return await client.get(server.url("/chain/0"))

    assert h.run(two).status == 200
    assert server.paths().count("/robots.txt") == 1
    assert "/final" not in server.paths()


@pytest.mark.parametrize(("status", "allowed", "source"), [
    (404, True, "RFC 9309 §2.3.1.3: unavailable (4xx) means no restriction"),
    (403, True, "RFC 9309 §2.3.1.3: 401/403 are 'unavailable' too"),
    (500, False, "RFC 9309 §2.3.1.4: unreachable (5xx) means complete disallow"),
    (429, False, "common practice, no source: too many requests counts as unreachable"),
])
def test_robots_status_meaning(server, status, allowed, source):
    server.robots_status = status
    server.robots_text = "User-agent: *\nDisallow: /\n"
    assert Harness(retries=0).run(lambda c: c.robots_allows(server.url("/final"))) is allowed, source


def test_retry_after_forms():
    now = datetime(1999, 12, 31, 23, 58, 59, tzinfo=UTC)
    assert parse_retry_after("120") == 120.0  # RFC 9110 §10.2.3 example: delay-seconds
    assert parse_retry_after("Fri, 31 Dec 1999 23:59:59 GMT", now) == 60.0  # RFC 9110 §10.2.3 example
    assert parse_retry_after("Friday, 31-Dec-99 23:59:59 GMT", now) == 60.0  # RFC 9110 §5.6.7 obsolete form
    assert parse_retry_after("Fri, 31 Dec 1999 23:00:00 GMT", now) == 0.0  # in the past
    assert parse_retry_after("soon") is None
    assert parse_retry_after(None) is None


def test_backoff_is_capped_and_jittered():
    assert backoff_delay(0, rand=lambda: 0.0) == 0.5 and backoff_delay(0, rand=lambda: 1.0) == 1.0
    assert backoff_delay(3, rand=lambda: 0.0) == 4.0
    assert backoff_delay(20, cap=60.0, rand=lambda: 1.0) == 60.0
