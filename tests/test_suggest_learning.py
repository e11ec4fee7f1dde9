"""Rule suggestions, the pure parts: templates from URL shapes, DUST parameter rules (no database)."""

from __future__ import annotations

import random
import re
from urllib.parse import parse_qsl, urlsplit

import pytest

from linkfold.suggest.evidence import label_of, path_of
from linkfold.suggest.params import ParamTable, judge_params, param_evidence
from linkfold.suggest.templates import (
    Label,
    ShapeTable,
    covers,
    learn_templates,
    template_regex,
    url_tokens,
)
from suggest_world import SCHEMES, article_path, other_path


@pytest.mark.parametrize("url", [
    "https://a.example/", "https://a.example/news/12345", "https://a.example/p?id=7&x=%2F",
    "https://a.example/a/b/c.html?q=1", "https://[2001:db8::1]:8080/x/y?z", "https://a.example/#!/route/7",
])
def test_path_of_agrees_with_the_standard_library_split(url):
    # RFC 3986 §3: path and query follow the authority; urllib.parse.urlsplit is the reference here.
    parts = urlsplit(url)
    expected = (parts.path or "/") + ("?" + parts.query if parts.query else "")
    assert path_of(url).split("#")[0] == expected


@pytest.mark.parametrize(("path", "query", "tokens"), [
    ("/news/48213", "", ("", "news", "{n5}")),
    ("/2026/03/14/harbour-bridge-opens", "", ("", "{n4}", "{n2}", "{n2}", "{slug}")),
    ("/article.php", "id=48213&page=2", ("", "article.php", "?id={n5}")),
    ("/search", "q=bridge", ("", "search")),                     # the value is no ID: the query is not kept
    ("/news/48213", "page=2", ("", "news", "{n5}")),             # the path carries the ID: query ignored
    ("/a/4f2c9e01ab37", "", ("", "a", "{hex}")),
    ("/stories/harbour-bridge-opens.html", "", ("", "stories", "{slug}.html")),
])
def test_url_tokens(path, query, tokens):
    assert url_tokens(path, query) == tokens


@pytest.mark.parametrize(("template", "hits", "misses"), [
    (("", "news", "{n5-6}"), ["/news/12345", "/news/123456?page=2"], ["/news/1234", "/news/12345/x", "/newsx/12345"]),
    (("", "article.php", "?id={n5}"), ["/article.php?id=12345", "/article.php?a=1&id=12345&z=2"],
     ["/article.php?id=1234", "/article.php?xid=12345", "/article.php"]),
    (("", "{word}", "{n6}"), ["/sport/123456", "/world-news/654321"], ["/123/123456", "/sport/12345"]),
    (("", "{slug}"), ["/harbour-bridge-opens"], ["/about-us", "/contact", "/a/b-c-d"]),
])
def test_template_regexes_mean_what_the_template_says(template, hits, misses):
    # Python's re is the reference for what a rules-file pattern matches (searched, docs/canonical-form.md).
    rx = re.compile(template_regex(template))
    assert all(rx.search(h) for h in hits)
    assert not any(rx.search(m) for m in misses)


def _table(scheme: str, n: int, *, seed: int = 3, noise: float = 0.0) -> ShapeTable:
    rng = random.Random(seed)
    table = ShapeTable()
    for _ in range(n):
        url = "https://" + SCHEMES[scheme] + article_path(scheme, rng)
        path, _, query = path_of(url).partition("?")
        table.add(path, query, Label.NEGATIVE if rng.random() < noise else Label.POSITIVE)
        url = "https://" + SCHEMES[scheme] + other_path(rng)
        path, _, query = path_of(url).partition("?")
        table.add(path, query, label_of(url, 0, 1))
    return table


def test_section_id_paths_generalise_to_any_section_but_not_over_pages_without_text():
    learned = learn_templates(_table("section_id", 200), min_support=5)
    assert [p.text for p in learned.proposals] == ["/{word}/{n6}"]
    assert learned.proposals[0].stats.negative == 0


def test_numbers_of_neighbouring_lengths_merge_into_a_range():
    learned = learn_templates(_table("numeric_id", 300), min_support=5)
    assert [p.text for p in learned.proposals] == ["/news/{n5-6}"]


def test_a_family_of_pages_without_text_is_never_generalised_into():
    table = ShapeTable()
    for i in range(40):
        table.add(f"/sport/{100000 + i}", "", Label.POSITIVE)
        table.add(f"/culture/{200000 + i}", "", Label.POSITIVE)
        table.add(f"/tag/{300000 + i}", "", Label.NEGATIVE)  # tag pages with numeric IDs: not articles
    learned = learn_templates(table, min_support=5)
    texts = sorted(p.text for p in learned.proposals)
    assert texts == ["/culture/{n6}", "/sport/{n6}"]  # two words only, and a third family says no
    assert all(not covers(p.template, ("", "tag", "{n6}")) for p in learned.proposals)


def test_extraction_noise_is_tolerated_up_to_the_precision_floor():
    learned = learn_templates(_table("hex_id", 300, noise=0.02), min_support=5)
    assert [p.text for p in learned.proposals] == ["/a/{hex}"]
    assert learned.proposals[0].stats.negative > 0


def test_thin_evidence_gives_no_pattern_and_says_why():
    learned = learn_templates(_table("slug_only", 4), min_support=10)
    assert learned.proposals == [] and learned.thin and "4 URLs with usable text" in learned.thin


def test_the_home_page_is_never_an_article_whatever_its_text():
    # RFC 6596 §3 (the reason dedupe/sinks.py gives): a site's root is not a duplicate of an article.
    assert label_of("https://a.example/", 1, 0) is Label.NEGATIVE
    assert label_of("https://a.example/?p=12", 1, 0) is Label.POSITIVE


def test_dust_drops_a_parameter_only_without_any_counter_example():
    # Bar-Yossef, Keidar, Schonfeld (ACM TWEB 2009; from memory): rules are learned from URL pairs that
    # differ in one place and hold the same content; one pair with different content rules it out.
    table = ParamTable()
    for i in range(12):
        table.add(f"/news/{i}", "", f"text{i}")
        table.add(f"/news/{i}", "src=feed", f"text{i}")
        table.add(f"/news/{i}", "src=mail", f"text{i}")
        table.add(f"/news/{i}", "page=2", f"text{i}-2")
        table.add(f"/news/{i}", "lang=xx" if i else "lang=yy", f"text{i}")
    table.add("/news/0", "lang=zz", "other text")  # one counter-example
    verdicts = {v.name: v for v in judge_params(param_evidence(table), min_support=10)}
    assert verdicts["src"].action == "drop" and verdicts["src"].evidence.support == 24
    assert verdicts["page"].action == "keep" and verdicts["page"].evidence.counter == 12
    assert verdicts["lang"].action != "drop" and verdicts["lang"].evidence.counter >= 1


def test_dust_groups_parameters_as_the_standard_library_parses_them():
    # application/x-www-form-urlencoded parsing: urllib.parse.parse_qsl is the reference.
    table = ParamTable()
    table.add("/p", "b=2&a=1", "t")
    table.add("/p", "a=1", "t")
    assert sorted(param_evidence(table)) == sorted({n for n, _ in parse_qsl("b=2&a=1")})
    assert param_evidence(table)["b"].support == 1


def test_a_protected_parameter_is_never_dropped():
    table = ParamTable()
    for i in range(20):
        table.add(f"/n/{i}", "", f"t{i}")
        table.add(f"/n/{i}", "ed=1", f"t{i}")
    assert judge_params(param_evidence(table), min_support=5, protected=frozenset({"ed"}))[0].action == "undecided"


def _fixtures_rules():
    from pathlib import Path

    demo = Path(__file__).resolve().parents[1] / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml"
    return demo.read_text(encoding="utf-8")


TRICKY = r'''
name = "lab's rules \"v2\""
shortener_hosts = ["s.test"]
[steps]
trailing_slash = false
[amp]
name_suffixes = [".amp.htm"]
[site."b.example"]
outlet = "O'Hara \\ Sons"
article = ['^/a/\d+$', "^/it's/\\d+$"]
drop_unlisted_params = true
keep_params = ["id"]
print_view = false
[[site."b.example".rewrite]]
pattern = '^/x/(\d+)$'
replace = '/a/\1'
'''


@pytest.mark.parametrize("text", [_fixtures_rules(), TRICKY, ""], ids=["demo", "tricky", "empty"])
def test_with_nothing_proposed_the_file_is_the_ruleset_in_force(text):
    # TOML 1.0 (strings, arrays, tables) as Python's tomllib reads it is the reference: writing the lab's
    # rules again must give the same digest (docs/canonical-form.md, "Rulesets").
    from linkfold.canon import default_rules, parse_rules
    from linkfold.suggest.learn import Suggestions
    from linkfold.suggest.write import render

    base = parse_rules(text, source="lab.toml") if text else default_rules()
    written = render(Suggestions(1, base, 5, None))
    assert parse_rules(written, source="out.toml").digest == base.digest


def test_a_template_another_expression_already_matches_is_not_proposed_twice():
    table = ShapeTable()
    for i in range(60):
        table.add(f"/a/{i:04x}beef{i:04x}", "", Label.POSITIVE)   # {hex}
    for i in range(12):
        table.add(f"/a/{100000000000 + i}", "", Label.POSITIVE)  # twelve digits: {n12} by shape
    learned = learn_templates(table, min_support=5)
    assert [p.text for p in learned.proposals] == ["/a/{hex}"] and learned.uncovered == 0


def test_slugs_in_other_scripts_arrive_percent_encoded_and_still_generalise():
    # RFC 3986 §2.1 and the WHATWG path percent-encode set: non-ASCII path characters travel as UTF-8
    # escapes (upper-case hex after canonicalisation, RFC 3986 §6.2.2.1); urllib.parse.quote is the reference.
    from urllib.parse import quote

    rng = random.Random(5)
    words = ["été", "marché", "pêche", "fenêtre", "rivière", "forêt", "château", "île"]
    table = ShapeTable()
    for _ in range(40):
        slug = "-".join(rng.choice(words) for _ in range(rng.randint(3, 6)))
        table.add(f"/actualites/{quote(slug)}", "", Label.POSITIVE)
        table.add(f"/theme/{quote(rng.choice(words))}", "", Label.NEGATIVE)
    learned = learn_templates(table, min_support=5)
    assert [p.text for p in learned.proposals] == ["/actualites/{slug}"]
    rx = re.compile(learned.proposals[0].regex)
    assert rx.search("/actualites/" + quote("forêt-île-été-marché"))
    assert not rx.search("/actualites/" + quote("forêt"))


def test_one_off_short_titles_never_become_any_word():
    # Slug-only paths with a handful of two-word titles and no labelled one-word page but the home page:
    # "any word" at the top level would pass on the evidence and take in /about and /contact on URLs never
    # seen (common practice: a section repeats across its articles, a title does not).
    table = ShapeTable()
    for title in ("flood-warning", "market-day", "ferry-strike", "winter-fair", "school-run", "pier-closed"):
        table.add(f"/{title}", "", Label.POSITIVE)
    table.add("/", "", Label.NEGATIVE)
    learned = learn_templates(table, min_support=5)
    assert learned.proposals == [] and learned.thin  # too little evidence, said so; not a guess

