"""The fetch stage end to end on both backends, against the loopback server of the follow tests.

External references: RFC 9110 §15.4 (redirect statuses; the page is the final answer's), §10.2.2 and
RFC 3986 §5.2 (a relative Location resolves against the requested URL); RFC 9309 §2.2.2 (a Disallow rule
refuses the GET); RFC 1950 via the standard library's zlib and FIPS 180-4 SHA-256 via hashlib (what the
stored body is). The backoff schedule is the follow stage's (common practice, no source).
"""

from __future__ import annotations

import hashlib
import zlib
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa

from httpserver import PAGE, LoopbackOnlyBackend
from httpserver import load_url_list as load
from httpserver import loopback_settings as settings_for
from linkfold.canon import canonicalize, parse_rules
from linkfold.content.extracting import extract_pages
from linkfold.content.fetching import fetch_pages
from linkfold.content.stage import count_pending  # the per-stage counts by name, kept for one release
from linkfold.errors import ConfigError, NotFound
from linkfold.store import pages as sp
from linkfold.store import tables as t
from linkfold.store.rulesets import store_ruleset

NAMES = {"news.test": ["127.0.0.1"], "other.test": ["127.0.0.1"], "private.test": ["10.0.0.5"]}

# Invented site rules: on news.test, /final/story-<n> is an article (the ruleset's article patterns).
RULES = """
[site."news.test"]
article = ['^/final/story-\\d+$']
"""


def run(engine, db_url, **kw):
    backend = LoopbackOnlyBackend()
    settings = kw.pop("settings", None) or settings_for(db_url)
    summary = fetch_pages(engine, settings=settings, resolver=sp_resolver(), backend=backend, **kw)
    # The safety net under the guard: nothing but loopback was ever connected to.
    assert all(host.startswith("127.") for host, _ in backend.connected)
    return summary


def sp_resolver():
    from linkfold.web.guard import StaticResolver

    return StaticResolver(NAMES)


def cid(conn, url):
    key = canonicalize(url, _rules()).url_key
    return conn.execute(sa.select(t.canonical_urls.c.id).where(t.canonical_urls.c.url_key == key)).scalar_one()


def _rules():
    return parse_rules(RULES)


@pytest.fixture
def panel(engine, tmp_path, server):
    with engine.begin() as conn:
        store_ruleset(conn, _rules(), name="fetch-test")
    n = lambda path: server.url(path, host="news.test")  # noqa: E731
    urls = {"home": n("/final"), "story": n("/final/story-1"), "moved": n("/to?status=301&loc=/final/story-2"),
            "dead": n("/status/404"), "text": n("/robots.txt"), "private": "http://private.test/x",
            "busy": n("/unavailable")}
    load(engine, tmp_path, "panel-a", list(urls.values()))
    return urls


def test_fetch_stores_pages_failures_links_and_run(engine, db_url, server, panel):
    server.robots_status = 200  # an empty robots.txt, served as text/plain: nothing disallowed
    summary = run(engine, db_url)
    assert summary.selected == 7
    assert summary.fetched == 4 and summary.pages_stored == 4
    assert summary.not_html == 1  # /robots.txt answers text/plain
    assert dict(summary.failed) == {"http_4xx": 1, "http_5xx": 1}
    assert dict(summary.refused) == {"refused": 1}
    assert summary.redirect_links == 1
    with engine.connect() as conn:
        story = cid(conn, panel["story"])
        page = sp.pages_of(conn, story)[0]
        assert page["status"] == 200 and page["source"] == "fetch" and page["truncated"] is False
        # Only the headers that matter are kept (the server also sends Server and Date).
        assert page["headers"] == {"content-type": "text/html; charset=utf-8"}
        assert page["fetched_at"] is not None and page["run_id"] == summary.run_id
        raw = conn.execute(sa.select(t.pages.c.body).where(t.pages.c.id == page["id"])).scalar_one()
        # RFC 1950 zlib stream of exactly the bytes served; described by the SHA-256 of those bytes.
        assert zlib.decompress(raw) == PAGE
        assert page["body_size"] == len(PAGE) and page["body_sha256"] == hashlib.sha256(PAGE).hexdigest()

        # RFC 9110 §15.4.2: the moved URL's page is the 301's target, with its own canonical URL.
        moved, target = cid(conn, panel["moved"]), cid(conn, server.url("/final/story-2", host="news.test"))
        got = conn.execute(sa.select(t.pages).where(t.pages.c.canonical_id == moved)).mappings().one()
        assert got["final_url"] == server.url("/final/story-2", host="news.test")
        assert got["final_canonical_id"] == target and got["requested_url"] == panel["moved"]
        link = conn.execute(sa.select(t.links)).mappings().one()
        assert (link["kind"], link["src_id"], link["dst_id"], link["status"], link["source"]) == \
            ("redirect", moved, target, 301, "fetched")

        text = conn.execute(sa.select(t.pages).where(t.pages.c.canonical_id == cid(conn, panel["text"])))\
            .mappings().one()
        assert text["body_size"] == 0 and text["headers"]["content-type"] == "text/plain"

        dead = sp.fetch_result(conn, cid(conn, panel["dead"]))
        assert dead["state"] == "failed" and dead["failure"] == "http_4xx" and dead["http_status"] == 404
        assert dead["next_attempt_at"] - dead["last_attempt_at"] == timedelta(days=1)
        busy = sp.fetch_result(conn, cid(conn, panel["busy"]))
        assert busy["failure"] == "http_5xx" and busy["next_attempt_at"] - busy["last_attempt_at"] >= timedelta(hours=1)
        refused = sp.fetch_result(conn, cid(conn, "http://private.test/x"))
        assert refused["state"] == "refused" and refused["next_attempt_at"] is None
        ok = sp.fetch_result(conn, story)
        assert ok["state"] == "fetched" and ok["page_id"] == page["id"] and ok["attempts"] == 1

        run_row = conn.execute(sa.select(t.runs).where(t.runs.c.id == summary.run_id)).mappings().one()
        assert run_row["stage"] == "fetch" and run_row["state"] == "ok"
        assert run_row["counts"]["pages_stored"] == 4 and run_row["counts"]["failed"] == {"http_4xx": 1, "http_5xx": 1}
    # The request-forgery guard refused 10.0.0.5 before any socket: the server never saw it, and no
    # request carried anything but the lab's User-Agent.
    assert all(s.user_agent.startswith("linkfold/") and "lab@university.example" in s.user_agent
               for s in server.seen)


def test_articles_come_first_and_only_articles(engine, db_url, server, panel):
    first = run(engine, db_url, limit=1)
    with engine.connect() as conn:
        assert sp.fetch_result(conn, cid(conn, panel["story"]))["state"] == "fetched"
    only = run(engine, db_url, only_articles=True)
    assert only.selected == 0  # /final/story-1 was the only article URL still pending
    assert first.selected == 1


def test_nothing_pending_after_a_run_until_failures_are_due(engine, db_url, panel):
    run(engine, db_url)
    assert count_pending(engine)["fetch"] == 0
    assert run(engine, db_url).selected == 0
    # The redirect's target already has its page (served from it): it is not fetched again.
    later = datetime.now(UTC) + timedelta(days=400)
    # Due again: /status/404, /unavailable and /robots.txt (a 404 here: the server has none).
    assert count_pending(engine, now=later)["fetch"] == 3
    again = run(engine, db_url, now=later)
    assert again.selected == 3 and dict(again.failed) == {"http_4xx": 2, "http_5xx": 1}
    with engine.connect() as conn:
        dead = sp.fetch_result(conn, cid(conn, panel["dead"]))
        # Backoff doubles per attempt: one day, then two (follow stage's schedule).
        assert dead["attempts"] == 2 and dead["next_attempt_at"] - dead["last_attempt_at"] == timedelta(days=2)


def test_robots_disallow_is_a_refusal(engine, db_url, server, panel):
    # RFC 9309 §2.2.2: the longest match wins, so /final/story-1 is disallowed while /final is allowed.
    server.robots_status = 200
    server.robots_text = "User-agent: *\nAllow: /final\nDisallow: /final/story\n"
    summary = run(engine, db_url, only_articles=True)
    assert dict(summary.refused) == {"robots": 1} and dict(summary.refusals) == {"robots_file": 1}
    assert "no setting overrides a site's robots.txt" in "\n".join(summary.lines())
    assert "/final/story-1" not in server.paths("GET")
    with engine.connect() as conn:
        r = sp.fetch_result(conn, cid(conn, panel["story"]))
        assert r["state"] == "refused" and r["failure"] == "robots"
    # After the site's rules change, --retry-refused fetches it.
    server.robots_text = "User-agent: *\nAllow: /\n"
    assert run(engine, db_url, only_articles=True).selected == 0
    again = run(engine, db_url, retry_refused=True)
    assert again.selected == 1 and again.fetched == 1
    assert "/final/story-1" in server.paths("GET")


def test_body_over_the_cap_is_cut_and_flagged(engine, db_url, tmp_path, server):
    load(engine, tmp_path, "big", [server.url("/huge", host="news.test")])
    summary = run(engine, db_url, settings=settings_for(db_url, http_max_bytes=100_000))
    assert summary.fetched == 1 and summary.truncated == 1
    with engine.connect() as conn:
        page = conn.execute(sa.select(t.pages)).mappings().one()
        assert page["truncated"] is True and page["body_size"] == 100_000
        assert len(zlib.decompress(page["body"])) == 100_000
    assert server.huge_written < 50_000_000  # the endless body was not read to the end


def test_a_followed_short_link_is_not_fetched_itself(engine, db_url, tmp_path, server):
    from linkfold.follow import follow_links

    short = server.url("/to?loc=/final/story-9", host="news.test")
    load(engine, tmp_path, "s", [short])
    follow_links(engine, settings=settings_for(db_url), hosts=["news.test"], resolver=sp_resolver(),
                 backend=LoopbackOnlyBackend())
    summary = run(engine, db_url)
    assert summary.selected == 1  # the target, not the short link that the follow stage resolved
    with engine.connect() as conn:
        page = conn.execute(sa.select(t.pages)).mappings().one()
        assert page["canonical_id"] == cid(conn, server.url("/final/story-9", host="news.test"))


def test_fetched_page_extracts_as_too_short(engine, db_url, server, panel):
    server.robots_status = 200  # so /robots.txt is a text/plain page
    run(engine, db_url)
    summary = extract_pages(engine, settings=settings_for(db_url))
    # The loopback page says "ok": stored with its reason, not dropped; the text/plain page is not_html.
    assert summary.selected == 4 and summary.usable == 0
    assert dict(summary.no_text) == {"too_short": 3, "not_html": 1}


def test_cookies_are_neither_stored_nor_sent(engine, db_url, tmp_path, server):
    load(engine, tmp_path, "c", [server.url("/cookie", host="news.test"), server.url("/final/after", host="news.test")])
    run(engine, db_url)
    assert all(s.cookie is None for s in server.seen)
    with engine.connect() as conn:
        for headers in conn.execute(sa.select(t.pages.c.headers)).scalars():
            assert "set-cookie" not in headers


def test_no_contact_fails_before_anything_is_written(engine, db_url, panel):
    with pytest.raises(ConfigError, match="contact"):
        run(engine, db_url, settings=settings_for(db_url, contact=""))
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(t.runs)
                            .where(t.runs.c.stage == "fetch")).scalar_one() == 0


def test_dataset_filter_and_bad_limit(engine, db_url, tmp_path, server, panel):
    load(engine, tmp_path, "posts-b", [server.url("/final/story-5", host="other.test")])
    assert run(engine, db_url, dataset="posts-b").selected == 1
    with pytest.raises(NotFound):
        run(engine, db_url, dataset="no-such-dataset")
    with pytest.raises(ConfigError):
        run(engine, db_url, limit=0)
