"""Following, honestly reported (issue 15, item 6), on both backends against the loopback server.

* ``follow_report`` counts the links a dataset holds, not the URLs that chains passed through or ended
  at, and computes the dead share over them (failed / (resolved + failed), docs/following.md);
* a refusal says why (the guard's kind of address, robots.txt) and which setting would allow it, in the
  follow summary and in the report, without anyone reading tables;
* ``--retry-failed-now`` follows failed URLs whatever their schedule; ``--retry-failed`` only due ones.

Names are pinned to addresses in process (StaticResolver): no DNS query is made, and the backend fails
the test if anything but loopback is contacted. All hosts are invented (.test).
"""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa

from httpserver import LoopbackOnlyBackend
from httpserver import load_url_list as load
from httpserver import loopback_settings as settings_for
from linkfold.cli import main
from linkfold.errors import ConfigError
from linkfold.follow import FollowReport, follow_links, follow_report
from linkfold.store import tables as t
from linkfold.web import explain_refusal
from linkfold.web.guard import StaticResolver

NAMES = {"short.test": ["127.0.0.1"], "news.test": ["127.0.0.1"], "private.test": ["10.0.0.5"]}


def run(engine, db_url, **kw):
    backend = LoopbackOnlyBackend()
    settings = kw.pop("settings", None) or settings_for(db_url)
    summary = follow_links(engine, settings=settings, resolver=StaticResolver(NAMES), backend=backend, **kw)
    assert all(host.startswith("127.") for host, _ in backend.connected)
    return summary


@pytest.fixture
def sample(engine, tmp_path, server):
    s = lambda path: server.url(path, host="short.test")  # noqa: E731
    # Two short links whose chains pass through 3 and 2 more URLs, one dead link, one that leads to a
    # private address, and one link of another host that is never followed.
    urls = [s("/to?status=301&loc=/chain/2"), s("/chain/1"), s("/status/404"),
            s("/to?loc=http://private.test/x"), server.url("/final/story-1", host="news.test")]
    load(engine, tmp_path, "posts", urls)
    load(engine, tmp_path, "other", [s("/status/500")])
    return urls


def test_report_counts_the_links_held_not_the_ends_of_chains(engine, db_url, sample):
    run(engine, db_url, hosts=["short.test"])
    with engine.connect() as conn:
        outcomes = conn.execute(sa.select(sa.func.count()).select_from(t.follow_results)).scalar_one()
    report = follow_report(engine, dataset="posts")
    # The chains taught outcomes for their hops and ends too: more rows than links held.
    assert outcomes > 6
    assert (report.held, report.resolved, report.failed, report.refused) == (5, 2, {"http_4xx": 1},
                                                                              {"refused": 1})
    assert report.not_followed == 1  # the news.test link: not a shortener
    assert report.dead_share == pytest.approx(1 / 3)  # 1 failed of the 3 that answered or failed
    assert sum(r["urls"] for r in report.rows()) == report.held
    everything = follow_report(engine)  # every dataset's links: posts' and other's
    assert (everything.held, everything.failed) == (6, {"http_4xx": 1, "http_5xx": 1})
    assert everything.dead_share == pytest.approx(2 / 4)
    assert json.loads(json.dumps(report.as_dict()))["dead_share"] == pytest.approx(1 / 3)


def test_refusals_say_why_and_name_the_setting(engine, db_url, sample, server, tmp_path):
    summary = run(engine, db_url, hosts=["short.test"])
    assert dict(summary.refusals) == {"private": 1}
    text = "\n".join(summary.lines())
    assert "a private address" in text and "allow_networks" in text and "LINKFOLD_ALLOW_NETWORKS" in text
    report = follow_report(engine, dataset="posts")
    assert report.refusals == {"private": 1}
    assert {"state": "refused", "failure": "refused", "reason": "private", "urls": 1} in report.rows()
    assert "allow_networks" in "\n".join(report.lines())
    # Without allow_networks, the loopback server itself is refused as loopback, before any packet.
    seen = len(server.seen)
    closed = run(engine, db_url, hosts=["news.test"], settings=settings_for(db_url, allow_networks=()))
    assert dict(closed.refusals) == {"loopback": 1} and len(server.seen) == seen
    assert "a loopback address" in "\n".join(closed.lines())


def test_robots_refusals_are_told_apart(engine, db_url, tmp_path, server):
    # HEAD refused with 405, so the GET needs robots.txt, which disallows everything for linkfold.
    server.robots_status, server.robots_text = 200, "User-agent: *\nDisallow: /\n"
    load(engine, tmp_path, "r", [server.url("/nohead/405", host="short.test")])
    summary = run(engine, db_url, hosts=["short.test"])
    assert dict(summary.refusals) == {"robots_file": 1}
    assert follow_report(engine, dataset="r").refusals == {"robots_file": 1}
    assert "no setting overrides" in explain_refusal("robots_file")


def test_retry_failed_now_ignores_the_schedule(engine, db_url, sample):
    run(engine, db_url, hosts=["short.test"])
    assert run(engine, db_url, hosts=["short.test"], retry_failed=True).selected == 0  # not due for a day
    now = run(engine, db_url, hosts=["short.test"], retry_failed=True, due_only=False)
    assert now.selected == 2 and dict(now.failed) == {"http_4xx": 1, "http_5xx": 1}
    with pytest.raises(ConfigError, match="failed URLs only"):
        run(engine, db_url, hosts=["short.test"], due_only=False)
    later = datetime.now(UTC) + timedelta(days=400)
    assert run(engine, db_url, hosts=["short.test"], retry_failed=True, now=later).selected == 2


def test_report_of_nothing_followed():
    report = FollowReport(dataset="d", held=3)
    assert report.dead_share is None and report.not_followed == 3
    assert "n/a" in "\n".join(report.lines())


@pytest.fixture
def cli_env(monkeypatch, db_url):
    for name, value in {"LINKFOLD_DATABASE_URL": db_url, "LINKFOLD_CONTACT": "mailto:lab@university.example",
                        "LINKFOLD_HTTP_HOST_DELAY": "0", "LINKFOLD_HTTP_RETRIES": "0",
                        "LINKFOLD_HTTP_TIMEOUT": "2"}.items():
        monkeypatch.setenv(name, value)
    monkeypatch.delenv("LINKFOLD_ALLOW_NETWORKS", raising=False)
    return db_url


def test_cli_says_why_without_reading_tables(cli_env, tmp_path, server, capsys):
    # IP literals only: the CLI uses the system resolver, and an IP literal is never looked up.
    path = tmp_path / "links.txt"
    path.write_text(server.url("/chain/1") + "\n" + server.url("/status/404") + "\n", encoding="utf-8")
    assert main(["-q", "datasets", "load", str(path), "--dataset", "posts"]) == 0
    assert main(["follow", "--hosts", "127.0.0.1"]) == 0
    err = capsys.readouterr().err
    assert "refused:  2 (refused 2)" in err and "a loopback address" in err and "allow_networks" in err
    assert server.seen == []  # refused before any connection
    assert main(["follow-report", "--dataset", "posts", "--format", "jsonl"]) == 0
    out, err = capsys.readouterr()
    rows = [json.loads(line) for line in out.splitlines()]
    assert {"state": "refused", "failure": "refused", "reason": "loopback", "urls": 2} in rows
    assert "2 links held" in err and "LINKFOLD_ALLOW_NETWORKS" in err
    # Allowed now: the same URLs, retried; the chain's end is not counted as a link the dataset holds.
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("LINKFOLD_ALLOW_NETWORKS", "127.0.0.0/8")
        assert main(["-q", "follow", "--hosts", "127.0.0.1", "--retry-refused"]) == 0
        assert main(["-q", "follow", "--hosts", "127.0.0.1", "--retry-failed-now"]) == 0
    assert main(["follow-report", "--dataset", "posts", "--format", "jsonl"]) == 0
    out, err = capsys.readouterr()
    rows = {(r["state"], r["failure"]): r["urls"] for r in map(json.loads, out.splitlines())}
    assert rows[("resolved", None)] == 1 and rows[("failed", "http_4xx")] == 1
    assert "dead share: 50.0%" in err


def test_never_follow_hosts_is_a_reason_of_its_own(engine, db_url, tmp_path, server):
    from linkfold.canon import parse_rules
    from linkfold.store.rulesets import store_ruleset

    with engine.begin() as conn:
        store_ruleset(conn, parse_rules('name = "lab"\nnever_follow_hosts = ["tracker.test"]\n', source="lab.toml"))
    load(engine, tmp_path, "t", [server.url("/final/x", host="pixel.tracker.test")])
    summary = run(engine, db_url, hosts=["pixel.tracker.test"])
    assert dict(summary.refused) == {"never_follow": 1} and dict(summary.refusals) == {"never_follow_hosts": 1}
    assert "never_follow_hosts" in "\n".join(summary.lines()) and server.seen == []
    report = follow_report(engine, dataset="t")
    assert {"state": "refused", "failure": "never_follow", "reason": "never_follow_hosts", "urls": 1} in report.rows()
