"""Property-based checks (hypothesis): idempotence, no exception but InvalidURL on any text, key stability,
and the merges the canonicaliser must never make."""

from __future__ import annotations

import contextlib
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from linkfold.canon import Canonicaliser, canonicalize, load_rules, parse_rules, url_key
from linkfold.canon.core import _engine
from linkfold.errors import InvalidURL

DEMO = load_rules(Path(__file__).parent.parent / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml")
SYNTAX_ONLY = parse_rules("[steps]\n" + "\n".join(f"{s} = false" for s in (
    "redirect_wrappers", "amp_cache", "host_prefixes", "https", "session_ids", "tracking_params", "amp",
    "print_view", "index_documents", "trailing_slash", "sort_params")), source="syntax-only")
RULESETS = [None, SYNTAX_ONLY, DEMO]

SETTINGS = settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])

schemes = st.sampled_from(["http", "https", "HTTP", "hTTps"])
prefixes = st.sampled_from(["", "www.", "m.", "amp.", "mobile.", "sub.", "WWW.", "m.sub."])
domains = st.sampled_from(["daily.example", "northvale-herald.example", "riverton-daily.test",
                           "harbourview-news.example", "herald-archive.test", "bücher.example",
                           "news.co.uk", "daily-news.ampcache.test", "daily-example.ampcache.test", "out.socialpost.example", "127.0.0.1",
                           "[::1]"])
ports = st.sampled_from(["", ":80", ":443", ":8080", ":0", ":"])
segments = st.one_of(
    st.sampled_from(["amp", "print", "index.html", "INDEX.html", ".", "..", "%2F", "%2f", "%7e", "%41", "",
                     "a;jsessionid=1", "x;v=2", "é", "a b", "story.amp.html", "c", "s", "story", "news",
                     "2026", "l", "redirect", "out", "daily.example", "i", "v", "article.php", "%2e", "~", "%zz", "%"]),
    st.text(alphabet="abcXYZ019-._~!$&'()*+,;=:@%", min_size=1, max_size=8),
)
names = st.sampled_from(["utm_source", "id", "a", "b", "B", "amp", "output", "outputType", "PHPSESSID", "url",
                         "u", "next", "ref", "page", "print", "q", "%41", "a%20b", ""])
values = st.one_of(st.sampled_from(["", "1", "2", "amp", "print", "x y", "%2F", "%7e",
                                    "https%3A%2F%2Fdaily.example%2Fa%3Futm_source%3Dq",
                                    "http://riverton-daily.test/story/x-1"]),
                   st.text(alphabet="abc12%=/?&#+", max_size=6))
pairs = st.lists(st.tuples(names, st.sampled_from(["=", ""]), values), max_size=5)
fragments = st.sampled_from(["", "#", "#top", "#!/route/1", "#!", "#%7e"])


@st.composite
def urls(draw) -> str:
    path = "/".join(draw(st.lists(segments, max_size=6)))
    query_pairs = draw(pairs)
    query = ""
    if query_pairs or draw(st.booleans()):
        query = "?" + "&".join(n + s + (v if s else "") for n, s, v in query_pairs)
    trailing = draw(st.sampled_from(["", "."]))
    return (f"{draw(schemes)}://{draw(prefixes)}{draw(domains)}{trailing}{draw(ports)}/{path}{query}"
            f"{draw(fragments)}")


@SETTINGS
@given(urls(), st.sampled_from(RULESETS))
def test_idempotent(raw: str, rules) -> None:
    try:
        once = canonicalize(raw, rules)
    except InvalidURL:
        return
    twice = canonicalize(once.url, rules)
    assert twice.url == once.url
    assert twice.url_key == once.url_key
    assert (twice.host, twice.domain, twice.outlet, twice.is_article) == (
        once.host, once.domain, once.outlet, once.is_article)


@SETTINGS
@given(st.one_of(st.text(), st.text().map(lambda t: "http://" + t), st.text().map(lambda t: "https://a.test/" + t),
                 urls()),
       st.sampled_from(RULESETS))
def test_only_invalid_url_escapes_on_any_text(raw: str, rules) -> None:
    # The engine itself, without canonicalize()'s last-resort guard, so a bug shows here as a failure.
    try:
        _engine(rules).run(raw)
    except InvalidURL as exc:
        assert exc.reason and exc.reason.isidentifier()


@SETTINGS
@given(st.binary().map(lambda b: b.decode("utf-8", "surrogateescape")))
def test_broken_unicode_is_refused_not_crashed(raw: str) -> None:
    with contextlib.suppress(InvalidURL):
        _engine(None).run(raw)


@SETTINGS
@given(urls())
def test_key_stable_and_cache_transparent(raw: str) -> None:
    cached = Canonicaliser(cache_size=4)
    try:
        direct = canonicalize(raw)
    except InvalidURL as exc:
        for _ in range(2):  # the second call is answered from the cache
            try:
                cached(raw)
            except InvalidURL as again:
                assert again.reason == exc.reason
            else:
                raise AssertionError("the cache turned a refusal into a result")
        return
    assert cached(raw) == direct == cached(raw)
    assert direct.url_key == url_key(direct.url)


letters_path = st.lists(st.text(alphabet="abcdefghijkXYZ", min_size=1, max_size=6), min_size=1, max_size=4)


@SETTINGS
@given(letters_path, st.data(), st.sampled_from(RULESETS))
def test_never_merges_path_case(segs, data, rules) -> None:
    path = "/".join(segs)
    i = data.draw(st.integers(0, len(path) - 1))
    if path[i] == "/" or path[i].lower() == path[i].upper():
        return
    other = path[:i] + path[i].swapcase() + path[i + 1:]
    a = canonicalize(f"https://daily.example/{path}", rules).url
    b = canonicalize(f"https://daily.example/{other}", rules).url
    assert a != b


@SETTINGS
@given(st.text(alphabet="abc0123456789", min_size=1, max_size=6),
       st.text(alphabet="abc0123456789", min_size=1, max_size=6), st.sampled_from(RULESETS))
def test_never_merges_kept_parameter_values(v1: str, v2: str, rules) -> None:
    if v1 == v2:
        return
    base = "https://harbourview-news.example/article.php?id="
    assert canonicalize(base + v1, rules).url != canonicalize(base + v2, rules).url


@SETTINGS
@given(letters_path, st.sampled_from(RULESETS))
def test_never_merges_encoded_slash(segs, rules) -> None:
    if len(segs) < 2:
        return
    plain = "/".join(segs)
    encoded = "%2F".join(segs)
    assert canonicalize(f"https://daily.example/{plain}", rules).url != canonicalize(
        f"https://daily.example/{encoded}", rules).url


@SETTINGS
@given(st.integers(1, 65535), st.integers(1, 65535), st.sampled_from(["http", "https"]),
       st.sampled_from(RULESETS))
def test_never_merges_ports(p1: int, p2: int, scheme: str, rules) -> None:
    default = 80 if scheme == "http" else 443
    if p1 == p2 or default in (p1, p2):
        return
    a = canonicalize(f"{scheme}://daily.example:{p1}/a", rules).url
    b = canonicalize(f"{scheme}://daily.example:{p2}/a", rules).url
    c = canonicalize(f"{scheme}://daily.example/a", rules).url
    assert len({a, b, c}) == 3
