"""Following one redirect chain against the loopback server (no database)."""

from __future__ import annotations

import dataclasses

import pytest

from httpserver import walk_chain
from linkfold.errors import InvalidURL
from linkfold.web import ClientConfig, Failure
from linkfold.web.redirects import State, next_url

CONFIG = ClientConfig(contact="mailto:lab@university.example", timeout=2.0, max_bytes=64 * 1024,
                      host_delay=0.0, retries=1, max_wait=5.0, allow_networks=("127.0.0.0/8",))
NAMES = {"short.test": ["127.0.0.1"], "news.test": ["127.0.0.1"], "private.test": ["10.0.0.5"]}


def follow(url, *, max_hops=10, **config):
    return walk_chain(url, config=dataclasses.replace(CONFIG, **config), names=NAMES, max_hops=max_hops)


@pytest.mark.parametrize("status", [301, 302, 303, 307, 308])  # RFC 9110 §15.4.2–§15.4.9
def test_every_redirect_status_is_followed(server, status):
    chain = follow(server.url(f"/to?status={status}&loc=/final"))
    assert chain.state is State.RESOLVED and chain.status == 200
    assert chain.final_url == server.url("/final")
    assert [(h.number, h.status, h.method) for h in chain.hops] == [(1, status, "HEAD")]


@pytest.mark.parametrize(("location", "final_path"), [
    ("/final", "/final"),            # RFC 3986 §4.2 absolute-path reference
    ("final/x", "/final/x"),         # RFC 3986 §5.2.3 merge with the base path "/to"
    ("./final", "/final"),           # RFC 3986 §5.2.4 dot segments removed
    ("../../final", "/final"),       # RFC 3986 §5.4.2: ".." above the root stays at the root
    ("/a/./b/../../final", "/final"),
])
def test_relative_locations_resolve_by_rfc3986(server, location, final_path):
    chain = follow(server.url(f"/to?loc={location}"))
    assert chain.state is State.RESOLVED
    assert chain.final_url == server.url(final_path)


def test_network_path_reference_changes_host_and_keeps_port(server):
    # RFC 3986 §4.2: "//host:port/path" keeps only the scheme of the base.
    chain = follow(server.url(f"/to?loc=//news.test:{server.port}/final"))
    assert chain.final_url == server.url("/final", host="news.test")
    assert server.seen[-1].host == f"news.test:{server.port}"


def test_relative_chain_of_ten_hops_resolves(server):
    chain = follow(server.url("/chain/10"), max_hops=10)
    assert chain.state is State.RESOLVED and len(chain.hops) == 10
    assert chain.final_url == server.url("/chain/0")
    assert [h.number for h in chain.hops] == list(range(1, 11))


def test_more_hops_than_allowed(server):
    chain = follow(server.url("/chain/11"), max_hops=10)
    assert chain.state is State.FAILED and chain.failure is Failure.TOO_MANY_HOPS
    assert len(chain.hops) == 11 and server.paths().count("/chain/0") == 0


def test_loop_is_detected(server):
    chain = follow(server.url("/loop/a"))
    assert chain.state is State.FAILED and chain.failure is Failure.LOOP
    assert [h.dst for h in chain.hops] == [server.url("/loop/b"), server.url("/loop/a")]
    assert chain.final_url == server.url("/loop/a")


@pytest.mark.parametrize("refusal", [405, 501, 403, 400])  # RFC 9110 §15.5.6 / §15.6.2, and misbehaviour
def test_head_refused_falls_back_to_get(server, refusal):
    chain = follow(server.url(f"/nohead/{refusal}"))
    assert chain.state is State.RESOLVED and chain.final_url == server.url("/final/after-get")
    assert [s.method for s in server.seen if s.path.startswith("/nohead")] == ["HEAD", "GET"]
    assert chain.hops[0].method == "GET"


def test_get_fallback_honours_robots(server):
    server.robots_status = 200
    server.robots_text = "User-agent: *\nDisallow: /nohead/\n"
    chain = follow(server.url("/nohead/405"))
    assert chain.state is State.REFUSED and chain.failure is Failure.ROBOTS
    assert server.paths("GET") == ["/robots.txt"]


def test_unreachable_robots_refuses_the_get_and_says_why(server):
    server.robots_status = 500  # RFC 9309 §2.3.1.4: unreachable robots.txt means complete disallow
    chain = follow(server.url("/nohead/405"))
    assert chain.failure is Failure.ROBOTS and "answered 500" in chain.detail


@pytest.mark.parametrize(("path", "failure"), [
    ("/status/404", Failure.HTTP_4XX), ("/status/410", Failure.HTTP_4XX), ("/status/500", Failure.HTTP_5XX),
    ("/noloc", Failure.BAD_LOCATION), ("/to?loc=javascript:alert(1)", Failure.BAD_LOCATION),
    ("/to?loc=mailto:desk@news.test", Failure.BAD_LOCATION), ("/to?loc=http://", Failure.BAD_LOCATION),
])
def test_dead_ends(server, path, failure):
    chain = follow(server.url(path))
    assert chain.state is State.FAILED and chain.failure is failure


def test_dead_link_after_a_redirect_keeps_the_hop(server):
    chain = follow(server.url("/to?status=301&loc=/status/404"))
    assert chain.failure is Failure.HTTP_4XX and chain.status == 404
    assert chain.final_url == server.url("/status/404") and len(chain.hops) == 1


@pytest.mark.parametrize("target", ["http://private.test/article", "http://10.0.0.9/", "http://[::ffff:192.168.0.1]/",
                                    "http://169.254.169.254/latest/meta-data/"])
def test_redirect_to_a_private_address_is_refused(server, target):
    chain = follow(server.url(f"/to?loc={target}"))
    assert chain.state is State.REFUSED and chain.failure is Failure.REFUSED
    assert chain.final_url == target and chain.hops[0].dst == target


def test_utf8_location_is_read_as_utf8(server):
    chain = follow(server.url("/to?loc=/final/%C3%BCber"))  # the server sends the raw UTF-8 bytes
    assert chain.state is State.RESOLVED
    assert chain.final_url == server.url("/final/über")
    assert server.paths()[-1] == "/final/%C3%BCber"  # RFC 3987 §3.1: IRI to URI by UTF-8 percent-encoding


def test_timeout_and_long_retry_after(server):
    server.slow_seconds = 3.0
    assert follow(server.url("/slow"), timeout=0.3, retries=0).failure is Failure.TIMEOUT
    chain = follow(server.url("/busy/x?n=5&after=7200"))
    assert chain.failure is Failure.HTTP_4XX and chain.status == 429 and chain.retry_after == 7200.0


# RFC 9110 §10.2.2 fragment examples (reproduced from memory of the RFC text).
def test_fragment_is_inherited_when_location_has_none():
    assert next_url("http://www.example.org/~tim", "/People.html#tim") == \
        "http://www.example.org/People.html#tim"
    assert next_url("http://www.example.org/index.html#larry", "http://www.example.net/index.html") == \
        "http://www.example.net/index.html#larry"


def test_next_url_refuses_non_http():
    with pytest.raises(InvalidURL):
        next_url("http://short.test/a", "ftp://files.test/x")
