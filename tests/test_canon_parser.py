"""Pins of what the WHATWG parser (ada) does and does not do for us (PITFALLS.md "URL parsing").

If an upgrade of the parser changes one of these, the canonicaliser's division of labour must change
with it: these tests say where.
"""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from linkfold.canon import _parse


def test_parser_keeps_lowercase_percent_hex_and_encoded_unreserved() -> None:
    # Not done by the parser, so done by us (RFC 3986 §6.2.2.1, §6.2.2.2).
    assert _parse.parse("http://a.test/%7e%41").path == "/%7e%41"


def test_parser_keeps_trailing_dot() -> None:
    assert _parse.parse("http://a.test./").host == "a.test."


def test_parser_encodes_space_and_non_ascii_in_path() -> None:
    # WHATWG URL path percent-encode set; UTF-8 for non-ASCII (RFC 3987 §3.1).
    assert _parse.parse("http://a.test/a b/é").path == "/a%20b/%C3%A9"


def test_parser_lowercases_and_punycodes_hosts() -> None:
    assert _parse.parse("http://BÜCHER.example/").host == "xn--bcher-kva.example"


def test_parser_compresses_ipv6_and_drops_default_ports() -> None:
    p = _parse.parse("http://[2001:DB8:0:0:0:0:0:1]:80/")
    assert (p.host, p.port, p.host_type) == ("[2001:db8::1]", "", _parse.HOST_IPV6)
    assert _parse.parse("https://a.test:443/").port == ""
    assert _parse.parse("https://a.test:8443/").port == "8443"


def test_parser_accepts_javascript_scheme() -> None:
    # It parses without error: refusing it is ours (the canonicaliser checks the scheme first).
    assert _parse.parse("javascript:alert(1)").scheme == "javascript"


def test_parser_removes_dot_segments_and_tab_newline() -> None:
    assert _parse.parse("http://a.test/b/./c/../d").path == "/b/d"
    # WHATWG strips ASCII tab and newline inside a URL; the canonicaliser refuses them before parsing.
    assert _parse.parse("http://a.test/b\tc").path == "/bc"


def test_components_are_sliced_correctly() -> None:
    p = _parse.parse("HTTP://u:p@Daily.example:8080/a/b?x=1&y#frag?#")
    assert p.href == "http://u:p@daily.example:8080/a/b?x=1&y#frag?#"
    assert (p.scheme, p.userinfo, p.host, p.port, p.path, p.query, p.fragment) == (
        "http", True, "daily.example", "8080", "/a/b", "x=1&y", "frag?#")
    q = _parse.parse("http://a.test?#")
    assert (q.path, q.query, q.fragment, q.userinfo) == ("/", "", "", False)


def test_refused_input_is_none() -> None:
    assert _parse.parse("http://a b/") is None
    assert _parse.parse("not a url") is None


def test_host_type_inferred_from_serialisation_matches_the_parser() -> None:
    from ada_url import URL, HostType

    for raw in ["http://1.2.3.4/", "http://0x7f.1/", "http://[::1]/", "http://[::ffff:1.2.3.4]/",
                "http://a.test/", "http://a.b1c/", "http://xn--bcher-kva.example/", "http://2130706433/"]:
        assert _parse.parse(raw).host_type == int(HostType(URL(raw).host_type)), raw


_URLISH = st.text(alphabet="hts:/.abcxn-019[]@?#&=%2eE~'\" <>`{}^|\\é" + "ABC", max_size=40)


_CLEAN = st.text(alphabet="abcXYZ09-._~!$&()*+,;=:@/%|", max_size=12)
_PIECE = st.one_of(_CLEAN, _CLEAN, _CLEAN, st.text(alphabet="abcXYZ09-._~!$&()*+,;=:@/%|?#'\"é ^`{}[]\\",
                                                   max_size=12))
_GOOD_LABEL = st.from_regex(r"[a-z0-9][a-z0-9-]{0,4}[a-z0-9]", fullmatch=True)
_LABEL = st.one_of(_GOOD_LABEL, _GOOD_LABEL, _GOOD_LABEL, st.text(alphabet="abz09-", min_size=1, max_size=6),
                   st.sampled_from(["xn--a", "0x1f", "12", "0x"]))
_HOST = st.tuples(st.lists(_LABEL, max_size=3), st.sampled_from(["test", "example", "test", "12", "0x1f", "b1"])
                  ).map(lambda p: ".".join([*p[0], p[1]]))
_SIMPLE_LOOKING = st.tuples(
    st.sampled_from(["http", "https"]), _HOST,
    st.sampled_from(["", ":80", ":443", ":8080", ":65535", ":65536", ":1"]),
    st.lists(_PIECE, max_size=4).map("/".join), st.one_of(st.none(), _PIECE), st.one_of(st.none(), _PIECE),
).map(lambda p: f"{p[0]}://{p[1]}{p[2]}/{p[3]}" + ("" if p[4] is None else "?" + p[4])
      + ("" if p[5] is None else "#" + p[5]))


@settings(max_examples=3000, deadline=None)
@given(st.one_of(
    _SIMPLE_LOOKING,
    _SIMPLE_LOOKING,
    _URLISH.map(lambda t: "http://" + t),
    _URLISH.map(lambda t: "https://" + t),
    st.tuples(st.sampled_from(["http", "https", "HTTP"]), st.sampled_from(["a.test", "xn--a.test", "1.2", "a.0x1f",
                                                                            "a.b1", "A.test", "a..b", "a.test."]),
              st.sampled_from(["", ":80", ":443", ":8080", ":0", ":65536", ":00"]), _URLISH)
    .map(lambda p: f"{p[0]}://{p[1]}{p[2]}/{p[3]}"),
))
def test_shortcut_agrees_with_the_parser(text: str) -> None:
    # The regular-expression shortcut must give exactly the parser's components whenever it answers.
    simple = _parse._simple(text)
    if simple is not None:
        assert simple == _parse.parse_with_ada(text), text


def test_shortcut_takes_the_usual_url_and_leaves_the_doubtful_ones() -> None:
    assert _parse._simple("https://daily.example/news/a-b?x=1&y=%2F#c") is not None
    for doubtful in ["https://daily.example:443/", "https://xn--bcher-kva.example/", "http://1.2.3.4/",
                     "http://a.test/./b", "http://a.test/%2e%2e/b", "http://a.test/a b", "HTTP://a.test/",
                     "http://a.test", "http://u@a.test/", "http://a.test/?q='", "http://a.test./", "http://-a.test/",
                     "http://.a.test/"]:
        assert _parse._simple(doubtful) is None, doubtful
