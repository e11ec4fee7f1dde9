"""The follow stage end to end on both backends: ingest URLs, follow them against the loopback server,
check what is stored (links, results, attempts, runs)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa

from httpserver import LoopbackOnlyBackend
from httpserver import load_url_list as load
from httpserver import loopback_settings as settings_for
from linkfold.errors import ConfigError, NotFound
from linkfold.follow import follow_links
from linkfold.store import evidence as ev
from linkfold.store import tables as t
from linkfold.web import next_attempt
from linkfold.web.guard import StaticResolver

NAMES = {"short.test": ["127.0.0.1"], "news.test": ["127.0.0.1"], "private.test": ["10.0.0.5"]}


def run(engine, db_url, **kw):
    backend = kw.pop("backend", LoopbackOnlyBackend())
    settings = kw.pop("settings", None) or settings_for(db_url)
    summary = follow_links(engine, settings=settings, resolver=StaticResolver(NAMES), backend=backend, **kw)
    assert all(host.startswith("127.") for host, _ in backend.connected)
    return summary


def canonical_id(conn, url):
    from linkfold.canon import canonicalize

    key = canonicalize(url).url_key
    return conn.execute(sa.select(t.canonical_urls.c.id).where(t.canonical_urls.c.url_key == key)).scalar_one()


@pytest.fixture
def panel(engine, tmp_path, server):
    s = lambda path: server.url(path, host="short.test")  # noqa: E731
    urls = {"chain": s("/to?status=301&loc=/chain/2"), "dead": s("/status/404"),
            "private": s("/to?loc=http://private.test/x"), "loop": s("/loop/a"),
            "article": server.url("/final/story-1", host="news.test")}
    load(engine, tmp_path, "panel-a", list(urls.values()))
    return urls


def test_follow_stores_chains_outcomes_and_run(engine, db_url, server, panel):
    summary = run(engine, db_url, hosts=["short.test"])
    assert summary.selected == 4
    assert summary.resolved == 1
    assert dict(summary.failed) == {"http_4xx": 1, "loop": 1}
    assert dict(summary.refused) == {"refused": 1}
    assert summary.dead_share == pytest.approx(2 / 3)
    with engine.connect() as conn:
        start = canonical_id(conn, panel["chain"])
        result = ev.follow_result(conn, start)
        final = canonical_id(conn, server.url("/chain/0", host="short.test"))
        assert result["state"] == "resolved" and result["final_id"] == final and result["hops"] == 3
        assert result["via"] == "fetched" and result["attempts"] == 1 and result["next_attempt_at"] is None
        hops = [r for r in ev.links_of(conn, start) if r["src_id"] == start]
        assert [(h["kind"], h["hop"], h["status"], h["source"]) for h in hops] == [("redirect", 1, 301, "fetched")]
        # The whole chain is evidence: start -> /chain/2 -> /chain/1 -> /chain/0.
        assert conn.execute(sa.select(sa.func.count()).select_from(t.links)).scalar_one() == 3 + 2 + 1
        # The URLs the chain passed through are settled as well, so --all does not fetch them again.
        middle = ev.follow_result(conn, canonical_id(conn, server.url("/chain/1", host="short.test")))
        assert middle["via"] == "chain" and middle["final_id"] == final and middle["hops"] == 1
        dead = ev.follow_result(conn, canonical_id(conn, panel["dead"]))
        assert dead["state"] == "failed" and dead["failure"] == "http_4xx" and dead["http_status"] == 404
        assert dead["next_attempt_at"] > dead["last_attempt_at"]
        refused = ev.follow_result(conn, canonical_id(conn, panel["private"]))
        assert refused["state"] == "refused" and refused["next_attempt_at"] is None
        assert refused["final_id"] == canonical_id(conn, "http://private.test/x")
        run_row = conn.execute(sa.select(t.runs).where(t.runs.c.id == summary.run_id)).mappings().one()
        assert run_row["stage"] == "follow" and run_row["state"] == "ok"
        assert run_row["counts"]["resolved"] == 1 and run_row["counts"]["failed"] == {"http_4xx": 1, "loop": 1}
        # Hop URLs are raw URLs of their own, so a later stage can fetch what the server named.
        raws = set(conn.execute(sa.select(t.raw_urls.c.raw)).scalars())
        assert server.url("/chain/1", host="short.test") in raws


def test_second_run_has_nothing_pending(engine, db_url, panel):
    run(engine, db_url, hosts=["short.test"])
    assert run(engine, db_url, hosts=["short.test"]).selected == 0


def test_retry_failed_only_retries_due_failures(engine, db_url, panel):
    first = run(engine, db_url, hosts=["short.test"])
    assert run(engine, db_url, hosts=["short.test"], retry_failed=True).selected == 0  # not due yet
    later = datetime.now(UTC) + timedelta(days=400)
    again = run(engine, db_url, hosts=["short.test"], retry_failed=True, now=later)
    assert again.selected == 2 and dict(again.failed) == {"http_4xx": 1, "loop": 1}
    assert again.run_id != first.run_id
    with engine.connect() as conn:
        dead = canonical_id(conn, panel["dead"])
        result = ev.follow_result(conn, dead)
        assert result["attempts"] == 2 and result["run_id"] == again.run_id
        attempts = ev.follow_attempts_of(conn, dead)
        assert [a["run_id"] for a in attempts] == [first.run_id, again.run_id]
        # Backoff doubles: the second wait is twice the first (one day, then two, for a 4xx).
        assert result["next_attempt_at"] - result["last_attempt_at"] == timedelta(days=2)


def test_all_takes_every_url_not_yet_followed(engine, db_url, panel):
    run(engine, db_url, hosts=["short.test"])
    summary = run(engine, db_url, all_urls=True)
    # Only the article URL is left: every URL the chains met was settled by them.
    assert summary.selected == 1 and summary.resolved == 1


def test_dataset_filter(engine, db_url, tmp_path, server, panel):
    load(engine, tmp_path, "posts-b", [server.url("/status/500", host="short.test")])
    summary = run(engine, db_url, hosts=["short.test"], dataset="posts-b")
    assert summary.selected == 1 and dict(summary.failed) == {"http_5xx": 1}
    with pytest.raises(NotFound):
        run(engine, db_url, hosts=["short.test"], dataset="no-such-dataset")


def test_limit(engine, db_url, panel):
    assert run(engine, db_url, hosts=["short.test"], limit=2).selected == 2
    assert run(engine, db_url, hosts=["short.test"]).selected == 2


def test_default_hosts_come_from_the_ruleset(engine, db_url, panel):
    summary = run(engine, db_url)  # the default ruleset lists no shortener hosts
    assert summary.selected == 0 and "shortener_hosts" in summary.note


def test_hop_within_one_canonical_url_is_not_a_link(engine, db_url, tmp_path, server):
    # utm_source is a literal analytics parameter name that the canonicaliser drops (common practice),
    # so /clean?id=7&utm_source=feed and /clean?id=7 are one canonical URL: the hop is no evidence.
    load(engine, tmp_path, "c", [server.url("/clean?id=7&utm_source=feed", host="short.test")])
    summary = run(engine, db_url, hosts=["short.test"])
    assert summary.resolved == 1 and summary.links == 0 and summary.same_url_hops == 1
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(t.links)).scalar_one() == 0


def test_no_contact_fails_before_anything_is_written(engine, db_url, panel):
    with pytest.raises(ConfigError, match="contact"):
        run(engine, db_url, hosts=["short.test"], settings=settings_for(db_url, contact=""))
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(t.runs)
                            .where(t.runs.c.stage == "follow")).scalar_one() == 0


def test_all_and_hosts_together_is_an_error(engine, db_url):
    with pytest.raises(ConfigError):
        run(engine, db_url, hosts=["short.test"], all_urls=True)


def test_next_attempt_schedule():
    at = datetime(2026, 3, 1, tzinfo=UTC)
    assert next_attempt("timeout", 1, at) == at + timedelta(hours=1)
    assert next_attempt("timeout", 3, at) == at + timedelta(hours=4)
    assert next_attempt("http_4xx", 1, at) == at + timedelta(days=1)
    assert next_attempt("http_4xx", 30, at) == at + timedelta(days=90)  # capped
    assert next_attempt("http_4xx", 1, at, retry_after=7 * 86400) == at + timedelta(days=7)


def test_retry_refused_after_the_rule_changed(engine, db_url, tmp_path, server):
    load(engine, tmp_path, "e", [server.url("/to?loc=/final", host="short.test")])
    closed = run(engine, db_url, hosts=["short.test"], settings=settings_for(db_url, allow_networks=()))
    assert dict(closed.refused) == {"refused": 1} and server.seen == []
    assert run(engine, db_url, hosts=["short.test"], retry_failed=True,
               now=datetime.now(UTC) + timedelta(days=400)).selected == 0  # refusals have no schedule
    opened = run(engine, db_url, hosts=["short.test"], retry_refused=True)
    assert opened.selected == 1 and opened.resolved == 1
    with engine.connect() as conn:
        start = canonical_id(conn, server.url("/to?loc=/final", host="short.test"))
        assert [a["state"] for a in ev.follow_attempts_of(conn, start)] == ["refused", "resolved"]



def test_count_pending_agrees_with_the_selection(engine):
    # The nightly job asks how many URLs are pending without loading them: the count and the selection
    # must follow the same rule (never followed; restricted to hosts; none for an empty host list).
    from datetime import UTC, datetime

    from linkfold.store import evidence as ev
    from linkfold.store import tables as t

    now = datetime.now(UTC)
    with engine.begin() as conn:
        for i, host in enumerate(["short.test", "short.test", "daily.example"]):
            conn.execute(t.canonical_urls.insert().values(url_key=f"k{i:023d}", url=f"https://{host}/{i}",
                                                           host=host, created_at=now))
        first = conn.execute(sa.select(sa.func.min(t.canonical_urls.c.id))).scalar_one()
        conn.execute(t.follow_results.insert().values(canonical_id=first, state="resolved", via="fetched",
                                                      attempts=1, first_attempt_at=now, last_attempt_at=now))
    with engine.begin() as conn:
        for hosts in (None, ["short.test"], ["daily.example"], []):
            assert ev.count_pending(conn, hosts=hosts) == len(ev.select_pending(conn, hosts=hosts))
        assert ev.count_pending(conn, hosts=["short.test"]) == 1
