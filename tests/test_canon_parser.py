"""Pins of what the WHATWG parser (ada) does and does not do for us (PITFALLS.md "URL parsing").

If an upgrade of the parser changes one of these, the canonicaliser's division of labour must change
with it: these tests say where.
"""

from __future__ import annotations

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
