"""The canonicaliser's fast lane and its caches must never change an answer.

Behaviour tests (no outside source): the fast lane (URLs that are their own WHATWG serialisation, sliced
by a pattern) and the slow lane (every check, then the parser) must give identical results, and so must a
cold and a warm query cache. The reference here is the slow lane itself, which the standards tests in
test_canon_cases.py pin to RFC 3986 and the WHATWG parser.
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from linkfold.canon import _parse, core
from linkfold.canon.rules import SWITCHES, default_rules, parse_rules
from linkfold.errors import InvalidURL

_DEMO_LIKE = parse_rules("""
[tracking]
names = ["ref"]
[site."herald.example"]
keep_params = ["id", "utm_source"]
drop_params = ["page"]
https = false
trailing_slash = false
[site."wire.test"]
drop_unlisted_params = true
keep_params = ["story"]
""", source="lanes")
_ALL_OFF = parse_rules("[steps]\n" + "".join(f"{name} = false\n" for name in SWITCHES), source="off")
RULESETS = [default_rules(), _DEMO_LIKE, _ALL_OFF]

_HOSTS = st.sampled_from(["herald.example", "www.herald.example", "m.wire.test", "wire.test", "a.b.example",
                          "x.ampcache.test", "herald-example.ampcache.test", "out.social.test", "-a.test", "a-.test", ".a.test", "a.test.",
                          "xn--bcher-kva.example", "a.0x1f", "1.2.3.4", "a..b.example", "1a.example"])
_SEGMENT = st.sampled_from(["news", "2024", "c", "s", "herald.example", "amp", "print", "index.html", "story.amp.html", "a;jsessionid=1",
                            "%7Ex", "%7ex", "%2F", "%2e", ".", "..", "", "Café", "a b", "x~y", "index.php"])
_PARAM = st.sampled_from(["utm_source=mail", "UTM_Medium=x", "gclid=1", "amp=1", "outputType=amp",
                          "outputType=html", "print", "view=print", "id=7", "page=2", "story=9", "b=2", "a=1",
                          "a=0", "", "ref=home", "sid=%7e1", "url=https%3A%2F%2Fwire.test%2Fs%3Fstory%3D1",
                          "jsessionid=AB", "q=a%20b", "x=%41"])
_URL = st.tuples(
    st.sampled_from(["https", "http"]), _HOSTS, st.sampled_from(["", "", ":8080", ":443", ":80"]),
    st.lists(_SEGMENT, max_size=4), st.one_of(st.none(), st.lists(_PARAM, max_size=4)),
    st.sampled_from(["", "", "#top", "#!/route"]),
).map(lambda p: f"{p[0]}://{p[1]}{p[2]}/{'/'.join(p[3])}" + ("" if p[4] is None else "?" + "&".join(p[4])) + p[5])


def _answer(engine: core._Engine, url: str) -> object:
    try:
        return engine.run(url)
    except InvalidURL as exc:
        return ("refused", exc.reason, exc.detail)


@settings(max_examples=1500, deadline=None)
@given(url=_URL, which=st.integers(0, len(RULESETS) - 1))
def test_fast_lane_gives_the_slow_lanes_answer(url: str, which: int) -> None:
    rules = RULESETS[which]
    fast, slow = core._Engine(rules), core._Engine(rules)
    original = _parse.simple_match
    _parse.simple_match = lambda _text: None  # type: ignore[assignment]
    try:
        expected = _answer(slow, url)
    finally:
        _parse.simple_match = original
    assert _answer(fast, url) == expected, url
    assert _answer(fast, url) == expected, url  # warm host, verdict and query caches


def test_the_fast_lane_is_taken_for_the_usual_url(monkeypatch) -> None:
    engine = core._Engine(default_rules())
    calls = []
    monkeypatch.setattr(_parse, "parse", lambda text: calls.append(text))
    result = engine.run("https://www.herald.example/news/2024/story?utm_source=mail&b=2")
    assert result.url == "https://herald.example/news/2024/story?b=2"
    assert calls == []  # no parser, no slow-lane checks


@pytest.mark.parametrize("url", ["https://a.test./x", "https://-a.test/x", "https://.a.test/x",
                                 "https://xn--bcher-kva.example/", "https://a.0x1f/", "https://a.test:443/",
                                 "https://a.test/./b", "https://a.test/%2e%2e/b"])
def test_doubtful_urls_take_the_slow_lane(url: str, monkeypatch) -> None:
    engine = core._Engine(default_rules())
    calls = []
    real = _parse.parse
    monkeypatch.setattr(_parse, "parse", lambda text: calls.append(text) or real(text))
    _answer(engine, url)
    assert calls, url


def test_query_cache_is_bounded_and_keeps_answers(monkeypatch) -> None:
    monkeypatch.setattr(core._Engine, "QUERY_CACHE", 3)
    engine = core._Engine(default_rules())
    urls = [f"https://a.example/s?utm_source=x&k={i}" for i in range(10)] * 2
    first = [engine.run(u) for u in urls]
    assert all(len(plan.queries) <= 3 for plan in engine.hosts.values() if not isinstance(plan, str))
    assert [engine.run(u) for u in urls] == first
    assert first[0].steps == ("tracking_params",) and first[0].url == "https://a.example/s?k=0"


def test_site_queries_are_not_shared_through_the_cache() -> None:
    # Two hosts with the same switches but different site lists: the same query folds differently.
    engine = core._Engine(_DEMO_LIKE)
    q = "?story=1&id=2&utm_source=x"
    assert engine.run("https://wire.test/s" + q).url == "https://wire.test/s?story=1"
    assert engine.run("https://herald.example/s" + q).url == "https://herald.example/s?id=2&story=1&utm_source=x"
    assert engine.run("https://other.example/s" + q).url == "https://other.example/s?id=2&story=1"
