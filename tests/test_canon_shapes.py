"""Link forms recognised by their shape (issue 15, item 10): the rules around the table in
tests/cases/shapes.tsv — who may unwrap a share-looking path, and what the old cache-suffix key does."""

from __future__ import annotations

from linkfold.canon import canonicalize, parse_rules
from linkfold.canon._wrapped import SHARE_SEGMENTS, amp_cache_labels


def test_the_cache_label_is_the_dashed_origin_host() -> None:
    # The example of the issue: news.daily.example is served under news-daily-example.<cache host>.
    assert "news-daily-example" in amp_cache_labels("news.daily.example")
    assert "northvale--herald-example" in amp_cache_labels("northvale-herald.example")
    assert "northvale--herald-example" in amp_cache_labels("northvale-herald.example.")


def test_a_host_specific_wrapper_is_trusted_as_written_even_on_a_share_looking_path() -> None:
    # A wrapper limited to hosts is the lab's own statement about those hosts.
    rules = parse_rules("""
[[redirect_wrapper]]
path = '^/share/go$'
params = ["next"]
hosts = ["out.socialpost.example"]
""", source="lab")
    url = "https://out.socialpost.example/share/go?next=https%3A%2F%2Fnews.example%2Fa%2F1"
    assert canonicalize(url, rules).url == "https://news.example/a/1"


def test_a_generic_lab_wrapper_never_unwraps_a_share_page() -> None:
    rules = parse_rules("""
[[redirect_wrapper]]
path = '/(?:go|share)$'
params = ["next"]
hosts = []
""", source="lab")
    assert canonicalize("https://a.example/go?next=https://news.example/a/1", rules).url == \
        "https://news.example/a/1"
    share = "https://a.example/share?next=https://news.example/a/1"
    assert canonicalize(share, rules).url == share
    assert "share" in SHARE_SEGMENTS and "intent" in SHARE_SEGMENTS


def test_the_switch_turns_the_cache_form_off() -> None:
    url = "https://news-daily-example.cdn.test/c/s/news.daily.example/story/1"
    off = parse_rules("[steps]\namp_cache = false\n", source="off")
    assert canonicalize(url, off).url == url
    c = canonicalize(url)
    assert c.url == "https://news.daily.example/story/1" and "amp_cache" in c.steps
    assert c.domain == "daily.example"


def test_old_cache_suffix_lists_are_still_read_and_change_nothing() -> None:
    # Rules files (and stored rulesets) written when caches were listed by host keep loading; the list no
    # longer decides anything, the shape does.
    old = parse_rules('[amp_cache]\nsuffixes = ["ampcache.test"]\n', source="old")
    listed_but_wrong_label = "https://daily-news.ampcache.test/c/s/northvale-herald.example/a"
    assert canonicalize(listed_but_wrong_label, old).url == listed_but_wrong_label
    assert canonicalize("https://northvale--herald-example.ampcache.test/c/s/northvale-herald.example/a",
                        old).url == "https://northvale-herald.example/a"


def test_a_wrapped_share_page_unwraps_to_the_share_page_not_the_article() -> None:
    # A redirect wrapper around a share page stands for the share page, which is still not the article.
    url = "https://forum.example/out?url=https%3A%2F%2Fsocial.example%2Fsharer%2Fshare%3Fu%3Dhttps%3A%2F%2Fnews.example%2Fa%2F1"
    assert canonicalize(url).url == "https://social.example/sharer/share?u=https://news.example/a/1"
