"""What a link stands for (issue 15, item 2): the final columns of every sighting, on both backends.

An invented scenario on reserved names (RFC 2606/6761): two shortener hosts, an outlet whose article URLs
the site rules describe, an ad-click host that leads to the outlet's subscribe page, a redirect wrapper,
and short links that are followed, fail, are never followed, or lead to another short link. Following
goes through the real follow stage against the loopback server, imports through the real redirect
import; the view, the export (CSV, JSON lines, Parquet read back), lookup, the HTTP API and the Python
client must give the same names and values.
"""

from __future__ import annotations

import csv
import io
import json

import pytest
import sqlalchemy as sa

from httpserver import LoopbackOnlyBackend
from httpserver import load_url_list as load
from httpserver import loopback_settings as settings_for
from linkfold.canon import Canonicaliser, parse_rules
from linkfold.follow import follow_links, import_redirects
from linkfold.ingest import export_dataset, lookup
from linkfold.store import finals
from linkfold.store import tables as t
from linkfold.store.rulesets import store_ruleset
from linkfold.web.guard import StaticResolver

FINALS = ("final_url", "final_domain", "final_outlet", "final_is_article")
RULES = """
name = "finals scenario"
shortener_hosts = ["short.test", "tiny.test"]

[site."news.test"]
outlet = "Tidewater News"
article = ['^/final/story-[0-9]+$']
"""
# tiny.test is not resolvable: following it fails (a DNS failure), as a dead shortener would.
NAMES = {"short.test": ["127.0.0.1"], "ads.test": ["127.0.0.1"], "news.test": ["127.0.0.1"]}


def _follow(engine, db_url, **kw):
    backend = LoopbackOnlyBackend()
    summary = follow_links(engine, settings=settings_for(db_url), resolver=StaticResolver(NAMES), backend=backend,
                           **kw)
    assert all(host.startswith("127.") for host, _ in backend.connected)
    return summary


@pytest.fixture
def world(engine, db_url, tmp_path, server):
    """Load the scenario, import one (short, short) pair, follow short links and ad clicks."""
    rules = parse_rules(RULES)
    with engine.begin() as conn:
        store_ruleset(conn, rules)
    news = lambda path: server.url(path, host="news.test")  # noqa: E731
    to = lambda host, target, status=301: server.url(f"/to?status={status}&loc={target}", host=host)  # noqa: E731
    urls = {
        "followed": to("short.test", news("/final/story-1")),
        "dead": server.url("/status/404", host="short.test"),
        "unresolvable": "http://tiny.test/f4il",
        "chain": "http://tiny.test/c7ain",  # imported: -> another short link, which is followed later
        "second": to("short.test", news("/final/story-2"), status=302),
        "wrapper": "http://out.test/redirect?url=" + news("/final/story-3").replace(":", "%3A").replace("/", "%2F"),
        "plain": news("/final/story-4"),
        "adclick": to("ads.test", news("/final/subscribe"), status=302),
        "never": "http://tiny.test/n3ver",
    }
    # "never" is loaded in a second dataset after following, so no run ever selected it.
    load(engine, tmp_path, "posts", [u for k, u in urls.items() if k not in ("second", "never")])
    pairs = tmp_path / "pairs.csv"
    pairs.write_text(f"short,expanded\n{urls['chain']},{urls['second']}\n", encoding="utf-8")
    imported = import_redirects(engine, pairs)
    assert imported.links == 1 and imported.settled == 1
    canon = Canonicaliser(rules)
    with engine.connect() as conn:  # after the import the chain leads to a short link not yet followed
        assert _finals_by_key(conn, canon(urls["chain"]).url_key)["final_url"] is None
    _follow(engine, db_url, hosts=["short.test", "tiny.test"])
    _follow(engine, db_url, hosts=["ads.test"])
    load(engine, tmp_path, "later", [urls["never"], urls["followed"]])
    return {"urls": urls, "canon": canon, "news": news}


def _finals_by_key(conn, key):
    c = t.canonical_urls
    cid = conn.execute(sa.select(c.c.id).where(c.c.url_key == key)).scalar_one()
    return finals.finals_of(conn, [cid])[cid]


def _expected(world) -> dict[str, tuple]:
    """(final_url, final_domain, final_outlet, final_is_article) of each scenario URL."""
    canon, news = world["canon"], world["news"]

    def on_news(path, is_article):
        c = canon(news(path))
        assert c.outlet == "Tidewater News" and c.domain == "news.test"
        return (c.url, "news.test", "Tidewater News", is_article)

    nothing = (None, None, None, None)
    return {
        "followed": on_news("/final/story-1", True),   # a short link followed: its target's columns
        "dead": nothing,                               # followed, the shortener answered 404
        "unresolvable": nothing,                       # followed, failed before any answer
        "chain": on_news("/final/story-2", True),      # short link -> short link -> article
        "wrapper": on_news("/final/story-3", True),    # unwrapped by the canonicaliser already
        "plain": on_news("/final/story-4", True),      # never redirected: stands for itself
        "adclick": on_news("/final/subscribe", False),  # leads to a page that is not an article
        "never": nothing,                              # a short link nobody followed yet
    }


def _view_rows(engine, dataset):
    cols = ", ".join(FINALS)
    with engine.connect() as conn:
        return {raw: tuple(rest) for raw, *rest in conn.execute(sa.text(
            f"SELECT raw_url, {cols} FROM sighting_links WHERE dataset = :d"), {"d": dataset})}


def test_view_gives_what_each_link_stands_for(world, engine):
    urls, expected = world["urls"], _expected(world)
    rows = _view_rows(engine, "posts") | _view_rows(engine, "later")
    for name, url in urls.items():
        if name == "second":
            continue  # met only as an imported URL and a hop, never sighted
        got = rows[url]
        assert got[:3] == expected[name][:3], name
        # SQLite hands a view's truth values back as 0/1.
        assert (None if got[3] is None else bool(got[3])) == expected[name][3], name


def test_wrapper_canonical_url_already_is_the_target(world, engine):
    # Redirect wrappers: the default rule unwraps /redirect?url=<absolute URL> (docs/canonical-form.md).
    wrapped = world["canon"](world["urls"]["wrapper"])
    assert wrapped.host == "news.test" and wrapped.url == world["canon"](world["news"]("/final/story-3")).url
    with engine.connect() as conn:
        assert conn.execute(sa.text("SELECT canonical_url = final_url FROM sighting_links WHERE raw_url = :r"),
                            {"r": world["urls"]["wrapper"]}).scalar_one()


def test_a_short_link_keeps_its_own_columns_beside_the_final_ones(world, engine):
    with engine.connect() as conn:
        row = conn.execute(sa.text("SELECT domain, outlet, final_domain FROM sighting_links WHERE raw_url = :r "
                                   "AND dataset = 'later'"),
                           {"r": world["urls"]["followed"]}).one()
    assert row == ("short.test", "short.test", "news.test")


def test_export_in_every_format_agrees_with_the_view(world, engine, tmp_path):
    pq = pytest.importorskip("pyarrow.parquet")
    view = _view_rows(engine, "posts")
    out = io.StringIO()
    export_dataset(engine, "posts", fmt="csv", out=out)
    records = list(csv.DictReader(io.StringIO(out.getvalue())))
    assert list(records[0])[-4:] == list(FINALS)
    for r in records:
        want = view[r["raw_url"]]
        assert [r[k] or None for k in FINALS[:3]] == list(want[:3])
        assert r["final_is_article"] == ("" if want[3] is None else ("true" if want[3] else "false"))
    out = io.StringIO()
    export_dataset(engine, "posts", fmt="jsonl", out=out)
    for line in out.getvalue().splitlines():
        r = json.loads(line)
        want = view[r["raw_url"]]
        assert [r[k] for k in FINALS] == [*want[:3], None if want[3] is None else bool(want[3])]
    export_dataset(engine, "posts", fmt="parquet", out=tmp_path / "posts.parquet")
    table = pq.read_table(tmp_path / "posts.parquet")
    assert table.schema.field("final_is_article").type == "bool"
    for r in table.to_pylist():
        want = view[r["raw_url"]]
        assert [r[k] for k in FINALS] == [*want[:3], None if want[3] is None else bool(want[3])]


def test_lookup_gives_the_same_final_fields(world, engine):
    urls, expected = world["urls"], _expected(world)
    names = [n for n in urls if n != "second"]
    answers = list(lookup(engine, [urls[n] for n in names]))
    for name, answer in zip(names, answers, strict=True):
        assert tuple(answer[k] for k in FINALS) == expected[name], name
    # Never loaded: a plain URL stands for itself, a short link for nothing known yet.
    fresh, short = lookup(engine, [world["news"]("/final/story-99"), "http://short.test/unseen"])
    assert fresh["seen"] is False and fresh["final_url"] == fresh["canonical"] and fresh["final_is_article"] is True
    assert short["seen"] is False and short["canonical"] and [short[k] for k in FINALS] == [None] * 4


def test_api_and_client_give_the_same_final_fields(world, engine, db_url, tmp_path):
    from linkfold.api import create_app
    from linkfold.client import FINAL_FIELDS, Client, add_ids
    from linkfold.store.tokens import create_token
    from test_api_support import AsgiClient, LiveServer
    from test_api_support import settings_for as api_settings

    assert FINAL_FIELDS == FINALS
    urls, expected = world["urls"], _expected(world)
    token = create_token(engine, scope="read", note="finals tests").secret
    api = AsgiClient(create_app(api_settings(db_url), engine=engine), token=token)
    answer = api.get("/v1/lookup", params={"q": urls["adclick"]}).json()
    assert tuple(answer[k] for k in FINALS) == expected["adclick"]
    batch = api.post("/v1/lookup", json={"urls": [urls["chain"], urls["never"]]})
    lines = [json.loads(x) for x in batch.text.splitlines()]
    assert [tuple(a[k] for k in FINALS) for a in lines] == [expected["chain"], expected["never"]]
    schema = api.get("/v1/openapi.json").json()["components"]["schemas"]["LookupAnswer"]["properties"]
    assert set(FINALS) <= set(schema)

    pd = pytest.importorskip("pandas")
    names = ["followed", "never", "adclick", "plain"]
    frame = pd.DataFrame({"link": [urls[n] for n in names]})
    with LiveServer(db_url, cwd=tmp_path) as server, Client(server.url, token=token) as lf:
        out = add_ids(frame, "link", client=lf)
        one = lf.lookup(urls["followed"])
    assert list(out.columns) == ["link", "article_id", "story_id", *FINALS]
    for i, name in enumerate(names):
        assert tuple(out.loc[i, k] for k in FINALS) == expected[name], name
    assert tuple(one[k] for k in FINALS) == expected["followed"]


def test_a_later_import_moves_the_links_that_led_to_it(engine, db_url, tmp_path, server):
    """Chains of chains in the other order: a short link is followed and its chain stops at a second short
    link that cannot be fetched; an imported pair later says where that one leads, and so both do."""
    with engine.begin() as conn:
        store_ruleset(conn, parse_rules(RULES))
    news = server.url("/final/story-5", host="news.test")
    first = server.url("/to?status=301&loc=http://tiny.test/s3cond", host="short.test")
    load(engine, tmp_path, "posts", [first])
    # tiny.test does not resolve: the chain fails at the second short link; nothing is known yet.
    _follow(engine, db_url, hosts=["short.test"])
    canon = Canonicaliser(parse_rules(RULES))
    with engine.connect() as conn:
        assert _finals_by_key(conn, canon(first).url_key)["final_url"] is None
    pairs = tmp_path / "pairs.jsonl"
    pairs.write_text(json.dumps({"short": "http://tiny.test/s3cond", "expanded": news}) + "\n", encoding="utf-8")
    import_redirects(engine, pairs)
    with engine.connect() as conn:
        assert _finals_by_key(conn, canon("http://tiny.test/s3cond").url_key)["final_url"] == canon(news).url
        assert _finals_by_key(conn, canon(first).url_key)["final_url"] == canon(news).url
    assert _view_rows(engine, "posts")[first][:3] == (canon(news).url, "news.test", "Tidewater News")


def test_imported_pairs_in_a_cycle_have_no_end(engine, tmp_path):
    with engine.begin() as conn:
        store_ruleset(conn, parse_rules(RULES))
    a, b = "http://tiny.test/aaa", "http://tiny.test/bbb"
    load(engine, tmp_path, "posts", [a, b])
    (tmp_path / "one.csv").write_text(f"short,expanded\n{a},{b}\n", encoding="utf-8")
    (tmp_path / "two.csv").write_text(f"short,expanded\n{b},{a}\n", encoding="utf-8")
    import_redirects(engine, tmp_path / "one.csv")
    import_redirects(engine, tmp_path / "two.csv")
    with engine.connect() as conn:
        stored = dict(conn.execute(sa.select(t.canonical_urls.c.url, t.canonical_urls.c.final_id)).all())
    canon = Canonicaliser(parse_rules(RULES))
    assert stored[canon(a).url] is None and stored[canon(b).url] is None
    assert [r[0] for r in _view_rows(engine, "posts").values()] == [None, None]


def test_end_of_walks_and_stops_on_cycles():
    # Pure: the walk that final_id stores. (target, resolved) per URL with an outcome leading elsewhere.
    edges = {1: (2, True), 2: (3, True), 4: (5, True), 5: (4, True),
             7: (8, False), 8: (9, True), 10: (11, False), 12: (13, True), 13: (14, False)}
    assert finals.end_of(1, edges) == 3 and finals.end_of(2, edges) == 3
    assert finals.end_of(3, edges) is None  # leads nowhere else: stands for itself
    assert finals.end_of(4, edges) is None  # a cycle of imported pairs
    assert finals.end_of(7, edges) == 9  # stopped at 8, which is resolved beyond
    assert finals.end_of(10, edges) is None  # stopped, nothing known beyond
    assert finals.end_of(12, edges) == 13  # resolved to 13, whose own later follow stopped


def test_final_ids_name_stored_urls(world, engine):
    from test_ingest_integrity import dangling

    assert dangling(engine)["canonical final"] == 0
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).where(t.canonical_urls.c.final_id.is_not(None))).scalar_one() >= 4


def test_refresh_all_finals_agrees_with_what_the_stages_kept(world, engine):
    with engine.begin() as conn:
        before = dict(conn.execute(sa.select(t.canonical_urls.c.id, t.canonical_urls.c.final_id)).all())
        conn.execute(sa.update(t.canonical_urls).values(final_id=None))
        assert finals.refresh_all_finals(conn) == sum(1 for v in before.values() if v is not None)
        after = dict(conn.execute(sa.select(t.canonical_urls.c.id, t.canonical_urls.c.final_id)).all())
    assert after == before
    assert finals.recompute_finals(engine) == 0


def test_cluster_outlets_count_final_outlets(world, engine):
    """Per-outlet counts: a cluster of a short link and its target is on one outlet, not two."""
    from datetime import UTC, datetime

    from linkfold.dedupe.stage.inspect import list_clusters
    from linkfold.store import clusters as cs

    canon = world["canon"]
    with engine.begin() as conn:
        c = t.canonical_urls
        ids = dict(conn.execute(sa.select(c.c.url_key, c.c.id)).all())
        short = ids[canon(world["urls"]["followed"]).url_key]
        target = ids[canon(world["news"]("/final/story-1")).url_key]
        cs.write_ids(conn, "article", minted=[cs.NewId("atestcluster1", target, 1)], retired={},
                     moves={short: "atestcluster1", target: "atestcluster1"}, events=[], run_id=None,
                     now=datetime.now(UTC))
    [row] = list(list_clusters(engine, level="article", min_size=2))
    assert row.size == 2 and row.outlets == 1
    assert [r.id for r in list_clusters(engine, level="article", outlet="Tidewater News")] == [row.id]
    assert list(list_clusters(engine, level="article", outlet="short.test")) == []


def test_lookup_page_says_what_a_link_stands_for(world, engine, db_url):
    import html5lib

    from linkfold.api import create_app
    from linkfold.store.tokens import create_token
    from test_api_support import AsgiClient
    from test_api_support import settings_for as api_settings

    token = create_token(engine, scope="read", note="finals pages").secret
    web = AsgiClient(create_app(api_settings(db_url), engine=engine))
    cookie = {"Cookie": f"linkfold_token={token}"}
    r = web.get("/lookup", params={"q": world["urls"]["adclick"]}, headers=cookie)
    page = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(r.text)
    cell = "".join(page.find(".//td[@id='final']").itertext())
    assert _expected(world)["adclick"][0] in cell and "Tidewater News" in cell and "not an article" in cell
    r = web.get("/lookup", params={"q": world["urls"]["never"]}, headers=cookie)
    page = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(r.text)
    assert "not known yet" in "".join(page.find(".//td[@id='final']").itertext())


def test_ad_clicks_to_one_page_all_lead_there_without_walking_back_from_it(engine, db_url, tmp_path, server,
                                                                            monkeypatch):
    """Many sources, one target (a sink: docs/dedupe.md): each click stands for the subscribe page; a
    later batch that learns the page again does not recompute every click that led there before."""
    with engine.begin() as conn:
        store_ruleset(conn, parse_rules(RULES))
    page = server.url("/final/subscribe", host="news.test")
    clicks = [server.url(f"/to?status=302&loc={page}&c={i}", host="ads.test") for i in range(5)]
    load(engine, tmp_path, "posts", clicks[:3])
    _follow(engine, db_url, hosts=["ads.test"])
    walked_back: list[int] = []
    real = finals._sources

    def spy(conn, targets):
        walked_back.extend(targets)
        return real(conn, targets)

    monkeypatch.setattr(finals, "_sources", spy)
    load(engine, tmp_path, "more", clicks[3:])
    _follow(engine, db_url, hosts=["ads.test"])
    canon = Canonicaliser(parse_rules(RULES))
    with engine.connect() as conn:
        target = conn.execute(sa.select(t.canonical_urls.c.id)
                              .where(t.canonical_urls.c.url_key == canon(page).url_key)).scalar_one()
        for click in clicks:
            got = _finals_by_key(conn, canon(click).url_key)
            assert (got["final_url"], got["final_is_article"]) == (canon(page).url, False)
    assert walked_back and target not in walked_back  # the new clicks are looked up from, the page never


def test_cli_export_lookup_and_refresh(world, db_url, monkeypatch, capsys):
    from linkfold.cli import main

    monkeypatch.setenv("LINKFOLD_DATABASE_URL", db_url)
    capsys.readouterr()
    assert main(["export", "--dataset", "later", "--format", "jsonl"]) == 0
    rows = {r["raw_url"]: r for r in map(json.loads, capsys.readouterr().out.splitlines())}
    expected = _expected(world)
    for name in ("never", "followed"):
        assert tuple(rows[world["urls"][name]][k] for k in FINALS) == expected[name]
    assert main(["lookup", world["urls"]["adclick"]]) == 0
    answer = json.loads(capsys.readouterr().out)
    assert tuple(answer[k] for k in FINALS) == expected["adclick"]
    assert main(["db", "refresh-finals"]) == 0
    assert "0 row(s) changed" in capsys.readouterr().err
    assert main(["-q", "db", "refresh-finals"]) == 0
    assert capsys.readouterr().err == ""


def test_migration_0012_fills_hosts_and_finals_from_what_is_stored(empty_db_url):
    """A registry at 0011 with a ruleset naming shortener hosts and follow outcomes (a chain of two short
    links, a failed one): the upgrade records the hosts and stores every end, as the stages would."""
    from datetime import UTC, datetime

    from linkfold.canon import CANON_VERSION, PSL_VERSION
    from linkfold.store import downgrade, make_engine, upgrade

    engine = make_engine(empty_db_url)
    try:
        upgrade(engine, "0011")
        rules = parse_rules(RULES)
        now = datetime.now(UTC)
        with engine.begin() as conn:
            rid = conn.execute(sa.insert(t.rulesets).values(
                name="lab", digest=rules.digest, source=rules.source, canon_version=CANON_VERSION,
                psl_version=PSL_VERSION, created_at=now).returning(t.rulesets.c.id)).scalar_one()
            ids = {}
            for name, url in {"a": "https://short.test/a", "b": "https://tiny.test/b",
                              "art": "https://news.test/final/story-1", "dead": "https://short.test/d"}.items():
                ids[name] = conn.execute(sa.insert(t.canonical_urls).values(
                    url_key=name.ljust(24, "x"), url=url, host=url.split("/")[2], domain=None, outlet=None,
                    is_article=None, ruleset_id=rid, created_at=now).returning(t.canonical_urls.c.id)).scalar_one()
            common = {"via": "imported", "attempts": 1, "first_attempt_at": now, "last_attempt_at": now}
            conn.execute(sa.insert(t.follow_results), [
                {"canonical_id": ids["a"], "state": "resolved", "final_id": ids["b"], **common},
                {"canonical_id": ids["b"], "state": "resolved", "final_id": ids["art"], **common},
                {"canonical_id": ids["dead"], "state": "failed", "failure": "http_4xx", "final_id": ids["dead"],
                 **common}])
        upgrade(engine)
        with engine.connect() as conn:
            hosts = set(conn.execute(sa.select(t.ruleset_hosts.c.host)).scalars())
            stored = dict(conn.execute(sa.select(t.canonical_urls.c.id, t.canonical_urls.c.final_id)).all())
            final = finals.finals_of(conn, ids.values())
        assert hosts == {"short.test", "tiny.test"}
        assert stored == {ids["a"]: ids["art"], ids["b"]: ids["art"], ids["art"]: None, ids["dead"]: None}
        assert final[ids["a"]]["final_url"] == "https://news.test/final/story-1"
        assert final[ids["dead"]]["final_url"] is None  # a short link whose follow failed
        downgrade(engine, "0011")
        assert "final_id" not in {c["name"] for c in sa.inspect(engine).get_columns("canonical_urls")}
    finally:
        engine.dispose()
