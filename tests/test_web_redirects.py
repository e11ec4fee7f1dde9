"""The one redirect loop (linkfold.web.redirects) in both of its modes, against the loopback server.

External references: RFC 9110 §15.4 (redirect statuses), §10.2.2 (Location is resolved against the
requested URL, and a Location without a fragment inherits the requested URL's), §7.1 (a fragment is never
sent); RFC 3986 §5.1 and §5.2.2 (the base's fragment plays no part in resolution: T.fragment is always
R.fragment), §5.4.1 (the worked examples over the base ``http://a/b/c/d;p?q``); RFC 9309 §2.2.2 (a
Disallow rule refuses the GET). The package's layering is checked against the flow in DESIGN.md.
"""

from __future__ import annotations

import ast
import dataclasses
from pathlib import Path

import pytest

from httpserver import PAGE, walk_chain
from linkfold.web import ClientConfig, Failure
from linkfold.web.redirects import State, defragment, next_url

CONFIG = ClientConfig(contact="mailto:lab@university.example", timeout=2.0, max_bytes=64 * 1024,
                      host_delay=0.0, retries=1, max_wait=5.0, allow_networks=("127.0.0.0/8",))
NAMES = {"news.test": ["127.0.0.1"], "private.test": ["10.0.0.5"]}
MODES = pytest.mark.parametrize("keep_body", [False, True], ids=["follow", "fetch"])


def walk(url, *, keep_body, max_hops=10, never_follow=None, **config):
    return walk_chain(url, config=dataclasses.replace(CONFIG, **config), names=NAMES, max_hops=max_hops,
                      keep_body=keep_body, never_follow=never_follow)


# --- the two modes ----------------------------------------------------------------------------------

def test_follow_mode_asks_head_and_reads_no_body(server):
    chain = walk(server.url("/to?status=301&loc=/final"), keep_body=False)
    assert chain.state is State.RESOLVED and chain.final_url == server.url("/final")
    assert [s.method for s in server.seen] == ["HEAD", "HEAD"]  # no robots.txt: HEAD needs none
    assert chain.reply is not None and chain.reply.body is None
    assert chain.requests == 2


def test_fetch_mode_gets_every_hop_after_robots_and_keeps_the_final_body(server):
    chain = walk(server.url("/to?status=301&loc=/final"), keep_body=True)
    assert chain.state is State.RESOLVED and chain.final_url == server.url("/final")
    assert [(s.method, s.path) for s in server.seen] == [
        ("GET", "/robots.txt"), ("GET", "/to?status=301&loc=/final"), ("GET", "/final")]  # one robots per origin
    assert [h.method for h in chain.hops] == ["GET"]
    assert chain.reply is not None and chain.reply.body == PAGE and not chain.reply.truncated


def test_fetch_mode_cuts_a_huge_body_instead_of_refusing_it(server):
    chain = walk(server.url("/huge"), keep_body=True, max_bytes=1000)
    assert chain.state is State.RESOLVED
    assert chain.reply is not None and chain.reply.truncated and len(chain.reply.body) == 1000


def test_fetch_mode_honours_robots_on_every_hop(server):
    server.robots_status = 200
    server.robots_text = "User-agent: *\nDisallow: /final\n"  # RFC 9309 §2.2.2
    chain = walk(server.url("/to?loc=/final/story-1"), keep_body=True)
    assert chain.state is State.REFUSED and chain.failure is Failure.ROBOTS and chain.reason == "robots_file"
    assert chain.final_url == server.url("/final/story-1") and len(chain.hops) == 1
    assert "/final/story-1" not in server.paths()


def test_fetch_mode_names_the_guard_not_robots_for_a_private_hop(server):
    chain = walk(server.url("/to?loc=http://private.test/a"), keep_body=True)
    assert chain.state is State.REFUSED and chain.failure is Failure.REFUSED and chain.reason == "private"


@MODES
@pytest.mark.parametrize(("path", "state", "failure"), [
    ("/to?status=308&loc=/final", State.RESOLVED, None),
    ("/loop/a", State.FAILED, Failure.LOOP),
    ("/chain/11", State.FAILED, Failure.TOO_MANY_HOPS),
    ("/status/404", State.FAILED, Failure.HTTP_4XX),
    ("/noloc", State.FAILED, Failure.BAD_LOCATION),
    ("/to?loc=http://10.0.0.9/", State.REFUSED, Failure.REFUSED),
])
def test_both_modes_end_a_chain_the_same_way(server, keep_body, path, state, failure):
    chain = walk(server.url(path), keep_body=keep_body)
    assert (chain.state, chain.failure) == (state, failure)


@MODES
def test_never_follow_refuses_a_hop_before_any_request_to_it(server, keep_body):
    def never(url):
        return "listed" if "news.test" in url else None

    chain = walk(server.url(f"/to?loc=http://news.test:{server.port}/final"), keep_body=keep_body,
                 never_follow=never)
    assert chain.state is State.REFUSED and chain.failure is Failure.NEVER_FOLLOW
    assert chain.reason == "never_follow_hosts" and all(s.host.startswith("127.") for s in server.seen)


# --- fragments ----------------------------------------------------------------------------------------

BASE = "http://a/b/c/d;p?q"


@pytest.mark.parametrize(("location", "expected"), [
    # RFC 3986 §5.4.1 normal examples (base without a fragment): the reference's fragment is kept.
    ("g#s", "http://a/b/c/g#s"),
    ("g?y#s", "http://a/b/c/g?y#s"),
    ("#s", "http://a/b/c/d;p?q#s"),
    ("", "http://a/b/c/d;p?q"),
])
def test_location_resolves_by_rfc3986_examples(location, expected):
    assert next_url(BASE, location) == expected


@pytest.mark.parametrize(("location", "expected"), [
    # RFC 9110 §10.2.2: a Location without a fragment inherits the requested URL's ...
    ("g", "http://a/b/c/g#f"),
    ("http://x/y", "http://x/y#f"),
    # ... one with its own fragment keeps it (RFC 3986 §5.2.2: T.fragment = R.fragment) ...
    ("g#s", "http://a/b/c/g#s"),
    # ... and the base's fragment is no part of resolution (RFC 3986 §5.1, §5.2.2): "" is the document.
    ("", "http://a/b/c/d;p?q#f"),
])
def test_the_requested_urls_fragment_is_inherited_only_when_location_has_none(location, expected):
    assert next_url(BASE + "#f", location) == expected


def test_defragment():
    assert defragment("http://a/b?q#f#g") == "http://a/b?q"  # the first "#" starts it (RFC 3986 §3.5)
    assert defragment("http://a/b") == "http://a/b"


@MODES
def test_fragment_is_carried_along_but_never_sent(server, keep_body):
    # RFC 9110 §10.2.2 inherits "#top" onto the next hop; §7.1: the fragment is not part of the request.
    chain = walk(server.url("/to?loc=/final") + "#top", keep_body=keep_body)
    assert chain.state is State.RESOLVED and chain.final_url == server.url("/final") + "#top"
    assert "#" not in "".join(server.paths())


@MODES
def test_a_location_that_only_changes_the_fragment_is_a_loop(server, keep_body):
    # "#s" names the requested document itself (RFC 3986 §5.4.1); what goes on the wire is the same URL.
    chain = walk(server.url("/to?loc=%23s"), keep_body=keep_body)
    assert chain.state is State.FAILED and chain.failure is Failure.LOOP
    assert chain.final_url == server.url("/to?loc=%23s") + "#s"


# --- what a stage stores of a chain --------------------------------------------------------------------

def test_hop_links_keep_redirects_between_two_canonical_urls_only():
    from datetime import UTC, datetime

    from linkfold.store.evidence import UrlIds
    from linkfold.web.redirects import Chain, Hop
    from linkfold.web.runner import hop_links

    at = datetime(2031, 3, 1, tzinfo=UTC)
    hops = (Hop(1, "http://s.test/a", "https://s.test/a", 301, "HEAD", at),   # one canonical URL: no evidence
            Hop(2, "https://s.test/a", "https://news.test/x", 302, "HEAD", at),
            Hop(3, "https://news.test/x", "https://gone.test/", 302, "HEAD", at))  # an end not stored
    ids = {"http://s.test/a": UrlIds(1, 10), "https://s.test/a": UrlIds(1, 11), "https://news.test/x": UrlIds(2, 12)}
    chain = Chain(start="http://s.test/a", state=State.FAILED, final_url="https://gone.test/", hops=hops)
    rows, same = hop_links(chain, ids, run_id=7, detail={"stage": "fetch"})
    assert same == 1
    assert rows == [{"kind": "redirect", "src_id": 1, "dst_id": 2, "status": 302, "hop": 2, "source": "fetched",
                     "detail": {"method": "HEAD", "src_raw_id": 11, "dst_raw_id": 12, "stage": "fetch"},
                     "run_id": 7, "created_at": at}]


# --- layering -----------------------------------------------------------------------------------------

PACKAGE = Path(__file__).resolve().parent.parent / "service" / "linkfold"
STAGES = ("follow", "content", "ingest", "dedupe", "jobs", "api", "_commands", "outlets", "exposure", "network")


def _imports(path: Path) -> set[str]:
    """Every linkfold module a file imports (relative imports made absolute)."""
    parts = ["linkfold", *path.relative_to(PACKAGE).with_suffix("").parts]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = parts[:len(parts) - node.level]
                found.add(".".join(base + ([node.module] if node.module else [])))
            elif node.module:
                found.add(node.module)
        elif isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
    return {name for name in found if name.startswith("linkfold")}


def test_the_web_layer_imports_no_stage():
    for path in sorted((PACKAGE / "web").glob("*.py")):
        for name in _imports(path):
            top = name.split(".")[1] if "." in name else ""
            assert top not in STAGES, f"web/{path.name} imports {name}: the web layer sits below the stages"


def test_fetching_does_not_import_following():
    assert not {n for n in _imports(PACKAGE / "content" / "fetching.py") if n.startswith("linkfold.follow")}


def test_web_modules_stay_small():
    for path in sorted((PACKAGE / "web").glob("*.py")):
        assert len(path.read_text(encoding="utf-8").splitlines()) <= 500, path.name
