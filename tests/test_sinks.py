"""Redirect sinks and the rules file's host lists, on a generated messy scenario (both backends).

The scenario is invented (``*.example`` / ``*.test``, RFC 2606) and shaped like a lab's post archive:
200 ad-click URLs that all redirect to one subscribe page, 60 withdrawn articles redirected to a home
page, a site that declares its home page canonical on every page, consent redirects, short links (one
article shared by 70 posts, each with its own short link), ad-server and CDN URLs, and real articles,
copies and syndicated stories beside them. None of the sinks may join anything; the real evidence must.
"""

from __future__ import annotations

import json

import pytest
import sqlalchemy as sa

from dedupe_world import Texts, add_document, load_redirects, load_urls, settings
from linkfold.canon import canonicalize, default_rules, parse_rules
from linkfold.cli import main
from linkfold.dedupe.sinks import (
    End,
    SinkKind,
    counts_toward_fan_in,
    fan_in,
    is_home_page,
    link_joins,
    sink_kind,
)
from linkfold.dedupe.stage import run_dedupe, show_cluster
from linkfold.dedupe.stage.inspect import list_clusters
from linkfold.dedupe.stage.sinks import list_sinks
from linkfold.errors import RulesError
from linkfold.store import clusters as cs
from linkfold.store import evidence as ev
from linkfold.store import tables as t
from linkfold.store.rulesets import store_ruleset

RULES = r"""
name = "messy scenario"
shortener_hosts = ["short.test"]
never_article_hosts = ["adserve.example", "cdn.test"]
never_follow_hosts = ["tracker.test"]

[site."herald.example"]
outlet = "Herald"
article = ['^/news/\d{4}/[a-z0-9-]+$']

[site."ledger.test"]
outlet = "Ledger"
article = ['^/a/\d+$']
"""


# --- the pure rule ----------------------------------------------------------------------------------------
@pytest.mark.parametrize(("url", "home"), [
    ("https://daily.example/", True),
    ("http://daily.example:8080/", True),
    ("https://daily.example/news/1", False),
    ("https://daily.example/?p=12", False),       # a query can select an article
    ("https://daily.example/#!/news/1", False),   # so can a hashbang route
    ("https://daily.example/a/", False),
])
def test_home_page_by_shape(url, home):
    assert is_home_page(url) is home


def _end(url, host=None, is_article=None, never=False):
    return End(url, host or url.split("/")[2], is_article, never)


def test_fan_in_leaves_out_short_links_and_query_variants():
    target = _end("https://daily.example/news/1")
    short = _end("https://short.test/x1")
    variant = _end("https://daily.example/news/1?ref=feed")
    click = _end("https://click.offers.example/c/1")
    assert not counts_toward_fan_in(short, target, shortener_hosts=frozenset({"short.test"}))
    assert not counts_toward_fan_in(variant, target, shortener_hosts=frozenset())
    assert counts_toward_fan_in(click, target, shortener_hosts=frozenset({"short.test"}))
    assert fan_in([short, variant, click], target, shortener_hosts=frozenset({"short.test"})) == 1


def test_sink_kinds_nature_first_then_fan_in():
    assert sink_kind(_end("https://a.example/x", never=True), 0, limit=5) is SinkKind.NEVER_ARTICLE
    assert sink_kind(_end("https://a.example/subscribe", is_article=False), 0, limit=5) is SinkKind.NOT_ARTICLE
    assert sink_kind(_end("https://a.example/"), 99, limit=5) is SinkKind.HOME_PAGE
    assert sink_kind(_end("https://a.example/offer"), 6, limit=5) is SinkKind.FAN_IN
    assert sink_kind(_end("https://a.example/offer"), 5, limit=5) is None  # "above" the setting


def test_which_links_join():
    article = _end("https://a.example/n/1", is_article=True)
    old_form = _end("https://a.example/story.php?id=1", is_article=False)
    ad = _end("https://adserve.example/c?1", is_article=False, never=True)
    assert link_joins("redirect", old_form, article, None)       # an old URL form stands for its target
    assert not link_joins("redirect", old_form, article, SinkKind.FAN_IN)
    assert not link_joins("redirect", ad, article, None)         # nothing touching a never-article host
    assert not link_joins("same_text", article, ad, None)
    assert link_joins("same_text", article, old_form, None)      # text evidence is judged by its text


# --- host lists in the rules file ----------------------------------------------------------------------------
def test_host_lists_parse_and_cover_subdomains():
    rules = parse_rules(RULES, source="messy.toml")
    assert rules.never_article_hosts == {"adserve.example", "cdn.test"}
    assert rules.never_follow_hosts == {"tracker.test"}
    assert rules.never_article("img.cdn.test") and rules.never_article("cdn.test")
    assert not rules.never_article("notcdn.test") and not rules.never_article("test")
    assert rules.never_follows("a.b.tracker.test") and not rules.never_follows("herald.example")


def test_never_article_hosts_get_is_article_false_whatever_the_site_says():
    rules = parse_rules(RULES + '\n[site."cdn.test"]\narticle = [".*"]\n', source="messy.toml")
    assert canonicalize("https://img.cdn.test/p/1.jpg", rules).is_article is False
    assert canonicalize("https://adserve.example/click?id=4", rules).is_article is False
    assert canonicalize("https://herald.example/news/2031/x", rules).is_article is True
    assert canonicalize("https://courier.test/x", rules).is_article is None
    # A wrapper on an ad server stands for its target, which keeps its own verdict.
    wrapped = canonicalize("https://adserve.example/redirect?url=https%3A%2F%2Fherald.example%2Fnews%2F2031%2Fx",
                           rules)
    assert wrapped.host == "herald.example" and wrapped.is_article is True


def test_a_ruleset_without_host_lists_keeps_its_digest():
    # Rulesets stored before the lists existed must keep their identity (docs/canonical-form.md, digest).
    assert parse_rules('name = "plain"\n').digest == default_rules().digest
    assert "never_article_hosts" not in default_rules().normalised


@pytest.mark.parametrize(("text", "line", "message"), [
    ('name = "x"\nnever_article_hosts = ["https://ads.example/"]\n', 2, "not a host name"),
    ('name = "x"\n\nnever_follow_hosts = "tracker.test"\n', 3, "must be a list of strings"),
    ('never_follow_hosts = ["ok.test",\n  ""]\n', 2, "is empty"),
])
def test_host_list_errors_name_the_line(text, line, message):
    with pytest.raises(RulesError) as err:
        parse_rules(text, source="lab.toml")
    assert err.value.line == line and message in str(err.value)


def test_rules_check_shows_the_host_lists(tmp_path, capsys):
    path = tmp_path / "messy.toml"
    path.write_text(RULES, encoding="utf-8")
    assert main(["rules", "check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "OK" in out
    assert "never_follow_hosts (1, subdomains included): tracker.test" in out
    assert "never_article_hosts (2, subdomains included): adserve.example, cdn.test" in out


# --- the messy scenario, end to end ---------------------------------------------------------------------------
def _store_rules(engine):
    with engine.begin() as conn:
        store_ruleset(conn, parse_rules(RULES, source="messy.toml"))


def _declare(engine, pairs):
    """Declared canonicals as the content stage writes them (kind ``declared``, same outlet)."""
    from datetime import UTC, datetime

    with engine.begin() as conn:
        ids = dict(conn.execute(sa.select(t.canonical_urls.c.url, t.canonical_urls.c.id)).all())
        ev.add_links(conn, [{"kind": "declared", "src_id": ids[a], "dst_id": ids[b], "source": "extract",
                             "detail": {"via": "rel_canonical"}, "created_at": datetime.now(UTC)}
                            for a, b in pairs])


ADS = [f"https://click.offers.example/c/{i}" for i in range(200)]
SUBSCRIBE = "https://courier.test/subscribe"
WITHDRAWN = [f"https://herald.example/news/2030/gone-{i}" for i in range(60)]
HERALD_HOME = "https://herald.example/"
GAZETTE = [f"https://gazette.test/p/{i}" for i in range(30)]
GAZETTE_HOME = "https://gazette.test/"
CONSENT_FROM = [f"https://ledger.test/a/{i}" for i in range(5)]
CONSENT = "https://ledger.test/consent"
STORIES = [f"https://herald.example/news/2031/story-{i}" for i in range(20)]
SHORT = [f"https://short.test/s{i}" for i in range(20)]
POPULAR = "https://herald.example/news/2031/popular"
SHARED = [f"https://short.test/p{i}" for i in range(70)]
AD_SERVER = "https://adserve.example/click?id=1"
CDN = "https://img.cdn.test/p/2.jpg"


@pytest.fixture
def messy(engine, tmp_path):
    _store_rules(engine)
    texts = Texts(11)
    urls = [*ADS, SUBSCRIBE, *WITHDRAWN, HERALD_HOME, *GAZETTE, GAZETTE_HOME, "https://gazette.test/p/amp/5",
            *CONSENT_FROM, CONSENT, *STORIES, *SHORT, POPULAR, *SHARED, AD_SERVER, CDN,
            "https://herald.example/news/2031/story-2-copy", "https://ledger.test/a/900"]
    load_urls(engine, urls, tmp_path, dataset="posts")
    pairs = ([(a, SUBSCRIBE) for a in ADS] + [(w, HERALD_HOME) for w in WITHDRAWN]
             + [(c, CONSENT) for c in CONSENT_FROM] + list(zip(SHORT, STORIES, strict=True))
             + [(s, POPULAR) for s in SHARED] + [(AD_SERVER, STORIES[1])])
    load_redirects(engine, pairs, tmp_path)
    _declare(engine, [(g, GAZETTE_HOME) for g in GAZETTE] + [("https://gazette.test/p/amp/5", GAZETTE[5])])
    # Texts: a near-exact copy on one outlet, a syndicated copy on another, a CDN URL carrying the same text.
    story2, story3 = texts.article(300), texts.article(300)
    add_document(engine, "herald.example/news/2031/story-2", " ".join(story2), title="Two")
    add_document(engine, "herald.example/news/2031/story-2-copy", " ".join(story2), title="Two")
    add_document(engine, "img.cdn.test/p/2.jpg", " ".join(story2), title="Two")
    add_document(engine, "herald.example/news/2031/story-3", " ".join(story3), title="Three")
    add_document(engine, "ledger.test/a/900", " ".join(texts.copy(story3, 0.03)), title="Three")
    summary = run_dedupe(engine, settings=settings())
    return summary


def _ids(engine, level):
    cm, c = t.cluster_members, t.canonical_urls
    with engine.connect() as conn:
        return dict(conn.execute(sa.select(c.c.url, cm.c.cluster_id).select_from(cm.join(c, c.c.id == cm.c.canonical_id))
                                 .where(cm.c.level == level)).all())


def _apart(ids, urls):
    return len({ids[u] for u in urls}) == len(urls)


def test_sinks_never_join_and_real_evidence_still_does(engine, messy):
    art, story = _ids(engine, "article"), _ids(engine, "story")
    # Sinks: every source keeps its own article and story ID, and the sink its own. For the site that
    # declares its home page canonical on every page, RFC 6596 §3: the canonical target "MUST identify
    # content that is either duplicative or a superset of the content at the context (referring) IRI".
    for sources, sink in ((ADS, SUBSCRIBE), (WITHDRAWN, HERALD_HOME), (GAZETTE, GAZETTE_HOME),
                          (CONSENT_FROM, CONSENT)):
        assert _apart(art, [*sources, sink]), sink
        assert _apart(story, [*sources, sink]), sink
    # Real redirects: each short link is its article; 70 posts' short links to one article are that article.
    for s, a in zip(SHORT, STORIES, strict=True):
        assert art[s] == art[a] and story[s] == story[a]
    assert {art[s] for s in SHARED} == {art[POPULAR]}
    # A same-outlet declared canonical that is not a home page still joins (an AMP page and its original).
    assert art["https://gazette.test/p/amp/5"] == art[GAZETTE[5]]
    # Text evidence: a same-outlet copy is one article, a syndicated copy one story.
    assert art["https://herald.example/news/2031/story-2-copy"] == art[STORIES[2]]
    assert story["https://ledger.test/a/900"] == story[STORIES[3]] != story[STORIES[2]]
    assert art["https://ledger.test/a/900"] != art[STORIES[3]]
    # Never-article hosts: is_article false, and no link touching them joins (redirect or same text).
    assert art[AD_SERVER] != art[STORIES[1]] and art[CDN] != art[STORIES[2]] and story[CDN] != story[STORIES[2]]
    with engine.connect() as conn:
        flags = dict(conn.execute(sa.select(t.canonical_urls.c.url, t.canonical_urls.c.is_article)
                                  .where(t.canonical_urls.c.url.in_([AD_SERVER, CDN, STORIES[0]]))).all())
        # The evidence is kept with its kind.
        n_ads = conn.execute(sa.select(sa.func.count()).select_from(t.links).join(
            t.canonical_urls, t.canonical_urls.c.id == t.links.c.dst_id)
            .where(t.canonical_urls.c.url == SUBSCRIBE, t.links.c.kind == "redirect")).scalar_one()
    assert flags == {AD_SERVER: False, CDN: False, STORIES[0]: True}
    assert n_ads == 200
    # Links met and left unused: ad clicks, withdrawn, home-page canonicals, consent, the ad server's redirect
    # (article level); the CDN URL's two same-text links to the copies on another outlet (story level).
    assert (messy.articles.sink_links, messy.stories.sink_links) == (200 + 60 + 30 + 5 + 1, 2)


def test_sinks_are_listed_with_their_fan_in(engine, messy):
    found = {s.url: s for s in list_sinks(engine, settings=settings())}
    # RFC 6596 §3: a canonical target "MUST identify content that is either duplicative or a superset of
    # the content at the context (referring) IRI"; a site's home page is neither for its articles.
    assert (found[GAZETTE_HOME].kind, found[GAZETTE_HOME].fan_in) == (SinkKind.HOME_PAGE, 30)
    assert (found[SUBSCRIBE].kind, found[SUBSCRIBE].fan_in) == (SinkKind.FAN_IN, 200)
    assert (found[HERALD_HOME].kind, found[HERALD_HOME].fan_in) == (SinkKind.HOME_PAGE, 60)
    assert (found[CONSENT].kind, found[CONSENT].fan_in) == (SinkKind.NOT_ARTICLE, 5)
    # 70 short links are not a fan-in: a platform gives every post its own short link.
    assert POPULAR not in found and STORIES[1] not in found
    assert next(iter(found)) == SUBSCRIBE  # largest fan-in first
    assert {s.url for s in list_sinks(engine, settings=settings(), dataset="posts")} == set(found)


def test_sinks_show_in_the_cluster_views(engine, messy):
    art = _ids(engine, "article")
    detail = show_cluster(engine, art[ADS[0]], settings=settings())
    assert [(s["url"], s["sink"], s["fan_in"], s["member"]) for s in detail.sinks] == [
        (SUBSCRIBE, "fan_in", 200, False)]
    own = show_cluster(engine, art[SUBSCRIBE], settings=settings())
    assert own.sinks[0]["member"] and own.sinks[0]["sources"] == 200 and len(own.members) == 1
    rows = {r.id: r for r in list_clusters(engine, min_size=1, settings=settings())}
    assert rows[art[WITHDRAWN[0]]].sinks[0]["url"] == HERALD_HOME
    assert rows[art[WITHDRAWN[0]]].sinks[0]["fan_in"] == 60
    assert rows[art[STORIES[0]]].sinks == []


def test_follow_report_and_clusters_commands_show_sinks(engine, db_url, messy, monkeypatch, capsys):
    monkeypatch.setenv("LINKFOLD_DATABASE_URL", db_url)
    capsys.readouterr()
    assert main(["follow-report", "--dataset", "posts"]) == 0
    out, err = capsys.readouterr()
    assert "sinks, largest fan-in first" in out
    line = next(x for x in out.splitlines() if x.startswith(SUBSCRIBE))
    assert line.split()[1:] == ["fan_in", "200", "200", "click.offers.example"]
    assert "4 sink(s)" in err
    assert main(["follow-report", "--sinks", "--format", "jsonl"]) == 0
    rows = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert rows[0] == {"url": SUBSCRIBE, "sink": "fan_in", "fan_in": 200, "sources": 200,
                       "top_source_host": "click.offers.example", "top_host_sources": 200}
    assert main(["clusters", "--min-size", "1", "--format", "jsonl"]) == 0
    listed = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    near = [r for r in listed if r["sinks"] and r["sinks"][0]["url"] == SUBSCRIBE]
    assert len(near) == 201 and all(r["sinks"][0]["fan_in"] == 200 for r in near)
    art = _ids(engine, "article")
    assert main(["clusters", "show", art[GAZETTE[0]]]) == 0
    shown = capsys.readouterr().out
    assert f"{GAZETTE_HOME}  [home_page; fan-in 30 of 30 sources; led to by 1 member(s)]" in shown


def test_api_and_pages_show_sinks(engine, db_url, messy):
    from linkfold.api import create_app
    from test_api_support import AsgiClient, settings_for

    api = AsgiClient(create_app(settings_for(db_url, open_reads=True), engine=engine))
    art = _ids(engine, "article")
    answer = api.get(f"/v1/articles/{art[ADS[3]]}").json()
    assert answer["sinks"] == [{"url": SUBSCRIBE, "sink": "fan_in", "fan_in": 200, "sources": 200,
                                "top_source_host": "click.offers.example", "top_host_sources": 200,
                                "member": False, "members_leading_here": 1}]
    listed = api.get("/v1/clusters", params={"min_size": 1, "limit": 1000}).json()["clusters"]
    assert sum(1 for row in listed if [s["url"] for s in row["sinks"]] == [HERALD_HOME]) == 61
    page = api.get(f"/clusters/{art[WITHDRAWN[0]]}").text
    assert 'id="sinks"' in page and HERALD_HOME in page and "home_page" in page


# --- incremental: a target crosses the fan-in limit later ------------------------------------------------------
def test_merges_through_a_target_that_becomes_a_sink_are_split_next_run(engine, tmp_path):
    _store_rules(engine)
    limit = settings(sink_fan_in=10)
    offer = "https://courier.test/offer"
    first = [f"https://promo.offers.example/c/{i}" for i in range(8)]
    load_urls(engine, [*first, offer], tmp_path, dataset="week-1")
    load_redirects(engine, [(u, offer) for u in first], tmp_path)
    run_dedupe(engine, settings=limit)
    before = _ids(engine, "article")
    assert len({before[u] for u in [*first, offer]}) == 1  # fan-in 8 ≤ 10: one article, as the evidence says
    joined = before[offer]

    later = [f"https://promo.offers.example/c/{i}" for i in range(8, 14)]
    load_urls(engine, later, tmp_path, dataset="week-2")
    load_redirects(engine, [(u, offer) for u in later], tmp_path)
    summary = run_dedupe(engine, settings=limit)
    after, stories = _ids(engine, "article"), _ids(engine, "story")
    everything = [*first, *later, offer]
    assert _apart(after, everything) and _apart(stories, everything)  # fan-in 14 > 10: a sink, all apart
    assert summary.articles.split == len(first)  # the founder keeps the ID, the 8 others split off
    with engine.connect() as conn:
        events = conn.execute(sa.select(t.id_events.c.cluster_id, t.id_events.c.other_id)
                              .where(t.id_events.c.event == "split_from")).all()
        assert {other for _, other in events if other == joined} == {joined}
        assert sum(1 for _, other in events if other == joined) == len(first)
        # Every ID ever issued still resolves to a live ID.
        for (issued,) in conn.execute(sa.select(t.cluster_ids.c.id)):
            res = cs.resolve(conn, issued)
            assert res is not None and cs.id_rows(conn, [res.current])[res.current]["state"] == "live"
    # A third run with nothing new changes nothing.
    again = run_dedupe(engine, settings=limit)
    assert again.articles.split == again.articles.merged == again.articles.minted == 0
    assert _ids(engine, "article") == after


# --- never_follow_hosts in the follow stage ---------------------------------------------------------------------
def test_never_follow_hosts_are_not_asked(engine, db_url, tmp_path, server):
    from httpserver import LoopbackOnlyBackend, load_url_list, loopback_settings
    from linkfold.follow import follow_links
    from linkfold.web.guard import StaticResolver
    from linkfold.web.runner import never_follow_check

    _store_rules(engine)
    rules = parse_rules(RULES, source="messy.toml")
    check = never_follow_check(rules)
    assert check is not None and never_follow_check(default_rules()) is None
    assert "never_follow_hosts" in (check("http://www.tracker.test:8080/x?y=1") or "")
    assert check("https://short.test/x") is None and check("not a url") is None

    into_tracker = server.url("/to?loc=" + server.url("/final/1", host="pix.tracker.test"), host="short.test")
    fine = server.url("/final/2", host="short.test")
    direct = server.url("/final/3", host="tracker.test")
    load_url_list(engine, tmp_path, "posts", [into_tracker, fine, direct])
    # Both names point at the loopback server: a request to either would be seen there.
    names = {"short.test": ["127.0.0.1"], "tracker.test": ["127.0.0.1"], "pix.tracker.test": ["127.0.0.1"]}
    summary = follow_links(engine, settings=loopback_settings(db_url), hosts=["short.test", "tracker.test"],
                           resolver=StaticResolver(names), backend=LoopbackOnlyBackend())
    assert summary.selected == 3 and summary.resolved == 1
    assert dict(summary.refused) == {"never_follow": 2} and not summary.failed
    assert not [s for s in server.seen if "tracker.test" in s.host]
    assert "refused:  2 (never_follow 2)" in "\n".join(summary.lines())
    with engine.connect() as conn:
        states = {r.url.split("/")[2]: (r.state, r.failure) for r in conn.execute(
            sa.select(t.canonical_urls.c.url, t.follow_results.c.state, t.follow_results.c.failure)
            .join(t.follow_results, t.follow_results.c.canonical_id == t.canonical_urls.c.id)
            .where(t.follow_results.c.via == "fetched"))}
        # The redirect into the never-follow host is kept as evidence; the host itself was never asked.
        hops = conn.execute(sa.select(sa.func.count()).select_from(t.links).where(t.links.c.kind == "redirect")
                            ).scalar_one()
    assert states[f"tracker.test:{server.port}"] == ("refused", "never_follow")
    assert hops == 1


def test_never_follow_hosts_are_not_fetched_either(engine, db_url, tmp_path, server):
    from httpserver import LoopbackOnlyBackend, load_url_list, loopback_settings
    from linkfold.content.fetching import fetch_pages
    from linkfold.web.guard import StaticResolver

    _store_rules(engine)
    load_url_list(engine, tmp_path, "panel", [server.url("/final/1", host="www.tracker.test"),
                                              server.url("/to?loc=" + server.url("/final/2", host="tracker.test"),
                                                         host="news.test")])
    names = {"news.test": ["127.0.0.1"], "tracker.test": ["127.0.0.1"], "www.tracker.test": ["127.0.0.1"]}
    summary = fetch_pages(engine, settings=loopback_settings(db_url), resolver=StaticResolver(names),
                          backend=LoopbackOnlyBackend())
    assert dict(summary.refused) == {"never_follow": 2}
    assert not [s for s in server.seen if "tracker.test" in s.host]


def test_a_new_sink_policy_reclusters_what_it_touches(engine, tmp_path):
    from linkfold.dedupe.stage import count_pending

    _store_rules(engine)
    offer = "https://courier.test/offer"
    clicks = [f"https://promo.offers.example/c/{i}" for i in range(30)]
    ad = "https://ads.partner.test/c?1"
    load_urls(engine, [*clicks, offer, ad, STORIES[0]], tmp_path, dataset="week-1")
    load_redirects(engine, [(u, offer) for u in clicks] + [(ad, STORIES[0])], tmp_path)
    loose = settings(sink_fan_in=100)
    run_dedupe(engine, settings=loose)
    assert len({_ids(engine, "article")[u] for u in [*clicks, offer]}) == 1
    assert count_pending(engine, settings=loose) == 0

    # A lower limit, no new data: the next run finds the changed policy and splits, and nothing else.
    strict = settings(sink_fan_in=20)
    assert count_pending(engine, settings=strict) == 1
    summary = run_dedupe(engine, settings=strict)
    ids = _ids(engine, "article")
    assert _apart(ids, [*clicks, offer]) and summary.articles.split == 30
    assert ids[ad] == ids[STORIES[0]] and count_pending(engine, settings=strict) == 0

    # Back to the loose limit: the evidence joins them again (merges, recorded), every ID still resolving.
    summary = run_dedupe(engine, settings=loose)
    assert len({_ids(engine, "article")[u] for u in [*clicks, offer]}) == 1 and summary.articles.merged == 30

    # A ruleset that lists the ad host as a never-article host: its redirect stops joining.
    with engine.begin() as conn:
        more = RULES.replace('"cdn.test"]', '"cdn.test", "partner.test"]')
        store_ruleset(conn, parse_rules(more, source="messy-2.toml"))
    assert count_pending(engine, settings=loose) == 1
    run_dedupe(engine, settings=loose)
    ids = _ids(engine, "article")
    assert ids[ad] != ids[STORIES[0]]
    with engine.connect() as conn:
        for (issued,) in conn.execute(sa.select(t.cluster_ids.c.id)):
            assert cs.resolve(conn, issued) is not None


def test_a_registry_clustered_before_sinks_existed_is_split_by_the_next_run(engine, tmp_path):
    # Such a registry has clusters but no remembered sink policy: the next run seeds every possible sink.
    from linkfold.dedupe.stage import count_pending
    from linkfold.dedupe.stage.sinks import FAN_IN_MARK, RULES_MARK

    _store_rules(engine)
    load_urls(engine, [*WITHDRAWN[:10], HERALD_HOME, *ADS[:60], SUBSCRIBE], tmp_path, dataset="old")
    load_redirects(engine, [(w, HERALD_HOME) for w in WITHDRAWN[:10]] + [(a, SUBSCRIBE) for a in ADS[:60]], tmp_path)
    # A limit no target reaches stands in for the code before sinks: the ad clicks join their target.
    run_dedupe(engine, settings=settings(sink_fan_in=1000))
    with engine.begin() as conn:
        ids = _ids(engine, "article")
        assert _apart(ids, [*WITHDRAWN[:10], HERALD_HOME])  # a home page is a sink whatever the limit
        assert len({ids[a] for a in [*ADS[:60], SUBSCRIBE]}) == 1
        conn.execute(t.stage_marks.delete().where(t.stage_marks.c.name.in_([FAN_IN_MARK, RULES_MARK])))
    assert count_pending(engine, settings=settings()) == 1
    summary = run_dedupe(engine, settings=settings())
    assert _apart(_ids(engine, "article"), [*ADS[:60], SUBSCRIBE]) and summary.articles.split == 60
    assert count_pending(engine, settings=settings()) == 0
