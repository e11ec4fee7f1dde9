"""Declared canonicals (RFC 6596), og:url and amphtml, resolved by RFC 3986 §5.2.

References: RFC 3986 §5.4.1 (normal examples of reference resolution, base ``http://a/b/c/d;p?q``),
RFC 6596 §3 (the canonical link relation, in HTML or an HTTP Link header), RFC 8288 §3 (Link header
syntax), the HTML standard (base URL from the first ``<base href>``; rel tokens case-insensitive;
``canonical`` is not body-ok), the Open Graph protocol (og:url), the AMP HTML spec (``<html ⚡>``).
"""

from __future__ import annotations

import pytest

from linkfold.content import Relation, declared_link, read_declared_urls
from linkfold.content.canonical_link import parse_link_header
from linkfold.content.extract import parse_page


def declared(html: str, url: str = "https://northvale-herald.example/news/2026/09/x", headers=None):
    return read_declared_urls(parse_page(html), url, headers)


def head(links: str) -> str:
    return f"<!doctype html><html><head><title>t</title>{links}</head><body><p>text</p></body></html>"


RFC3986_BASE = "http://a/b/c/d;p?q"


@pytest.mark.parametrize("href,expected", [
    # RFC 3986 §5.4.1 "Normal Examples" (the empty reference is left out: HTML requires a non-empty href)
    ("g:h", None),  # a scheme of its own: resolves to "g:h", which is not an http(s) URL
    ("g", "http://a/b/c/g"),
    ("./g", "http://a/b/c/g"),
    ("g/", "http://a/b/c/g/"),
    ("/g", "http://a/g"),
    ("//g", "http://g"),
    ("?y", "http://a/b/c/d;p?y"),
    ("g?y", "http://a/b/c/g?y"),
    ("#s", "http://a/b/c/d;p?q#s"),
    ("g#s", "http://a/b/c/g#s"),
    ("g?y#s", "http://a/b/c/g?y#s"),
    (";x", "http://a/b/c/;x"),
    ("g;x", "http://a/b/c/g;x"),
    ("g;x?y#s", "http://a/b/c/g;x?y#s"),
    (".", "http://a/b/c/"),
    ("./", "http://a/b/c/"),
    ("..", "http://a/b/"),
    ("../", "http://a/b/"),
    ("../g", "http://a/b/g"),
    ("../..", "http://a/"),
    ("../../", "http://a/"),
    ("../../g", "http://a/g"),
])
def test_relative_canonical_resolution_rfc3986_examples(href, expected):
    got = declared(head(f'<link rel="canonical" href="{href}">'), RFC3986_BASE)
    assert got.canonical == expected
    if expected is None:
        assert any("not an http(s) URL" in n for n in got.notes)


def test_base_href_is_the_base_and_only_the_first_counts():
    # HTML "frozen base URL": the first base element with an href, resolved against the document URL.
    html = head('<base target="_self"><base href="/mirror/"><base href="https://other.example/">'
                '<link rel="canonical" href="story-7">')
    assert declared(html).canonical == "https://northvale-herald.example/mirror/story-7"


def test_surrounding_spaces_and_rel_token_case():
    html = head('<link rel="Alternate  CANONICAL" href="  /news/2026/09/x \n">')
    assert declared(html).canonical == "https://northvale-herald.example/news/2026/09/x"


def test_conflicting_canonicals_record_none_and_say_why():
    # RFC 6596 asks for a single canonical target (section number from memory: §4/§5).
    html = head('<link rel="canonical" href="/news/a"><link rel="canonical" href="/news/b">')
    got = declared(html)
    assert got.canonical is None
    assert any("conflicting canonical links (2)" in n for n in got.notes)


def test_repeated_identical_canonicals_are_not_a_conflict():
    html = head('<link rel="canonical" href="/news/a">'
                '<link rel="canonical" href="https://northvale-herald.example/news/a">')
    assert declared(html).canonical == "https://northvale-herald.example/news/a"


def test_canonical_pushed_into_body_by_broken_head_is_ignored():
    # A <div> in <head> ends the head (HTML parsing, "in head" insertion mode); the link after it lands in
    # <body>, where canonical is not allowed (not a body-ok link type).
    html = "<html><head><title>t</title><div>ad</div><link rel=canonical href=/news/a></head><body>x</body></html>"
    got = declared(html)
    assert got.canonical is None
    assert "canonical link outside <head> ignored" in got.notes


def test_link_header_canonical():
    # RFC 6596 §3 permits the canonical relation in an HTTP Link header (RFC 8288 §3 syntax); relative
    # targets resolve against the page URL.
    hdr = '</style.css>; rel=preload; as="style, font", </news/2026/09/x?print=1>; rel="canonical"'
    assert parse_link_header(hdr) == [("/style.css", {"preload"}), ("/news/2026/09/x?print=1", {"canonical"})]
    got = declared(head(""), headers={"link": hdr})
    assert got.canonical == "https://northvale-herald.example/news/2026/09/x?print=1"
    # header and markup disagree: contradictory, none recorded
    both = declared(head('<link rel="canonical" href="/news/other">'), headers={"link": hdr})
    assert both.canonical is None


@pytest.mark.parametrize("href", ["javascript:void(0)", "data:text/html,x", "mailto:desk@northvale-herald.example",
                                  "   ", "http://[bad"])
def test_unusable_canonical_hrefs_are_dropped_with_a_note(href):
    got = declared(head(f'<link rel="canonical" href="{href}">'))
    assert got.canonical is None
    assert got.notes


def test_og_url_and_amphtml():
    html = head('<meta property="og:url" content="https://northvale-herald.example/news/2026/09/x">'
                '<link rel="amphtml" href="https://amp.northvale-herald.example/news/2026/09/x">')
    got = declared(html)
    assert got.og_url == "https://northvale-herald.example/news/2026/09/x"
    assert got.amp_url == "https://amp.northvale-herald.example/news/2026/09/x"
    assert got.canonical is None and not got.is_amp


@pytest.mark.parametrize("root,amp", [("<html ⚡>", True), ("<html amp lang=en>", True), ("<html lang=en>", False)])
def test_amp_documents(root, amp):
    # AMP HTML: the root element carries ⚡ or "amp".
    got = declared(f"<!doctype html>{root}<head><title>t</title></head><body><p>x</p></body></html>")
    assert got.is_amp is amp


# --- same page, same outlet, other outlet -------------------------------------------------------------------

def test_declared_link_relations():
    # An AMP host may already fold onto the regular page under the canonicaliser's rules (then SELF);
    # either way it is the same outlet, never a cross-outlet claim.
    amp = declared_link("https://amp.lakeside-wire.example/wire/20260910/old-mill-bridge-reopens",
                        "https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens")
    assert amp is not None and amp.relation in (Relation.SELF, Relation.SAME_OUTLET)
    assert amp.page_outlet == amp.target_outlet == "lakeside-wire.example"

    moved = declared_link("https://lakeside-wire.example/video/old-mill-bridge",
                          "https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens")
    assert moved is not None and moved.relation is Relation.SAME_OUTLET
    assert moved.page_key != moved.target_key

    syndicated = declared_link("https://northvale-herald.example/news/2026/09/old-mill-bridge-reopens",
                               "https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens")
    assert syndicated is not None and syndicated.relation is Relation.CROSS_OUTLET
    assert syndicated.target_url == amp.target_url and syndicated.target_key == amp.target_key

    itself = declared_link("https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens?utm_source=x",
                           "https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens")
    assert itself is not None and itself.relation is Relation.SELF
    assert declared_link("https://lakeside-wire.example/", None) is None
