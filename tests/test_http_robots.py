"""robots.txt parsing and matching against RFC 9309 (Robots Exclusion Protocol).

The example files are those of RFC 9309 §5.1 and §5.2, reproduced from memory of the RFC text; the
expected answers follow the rules of §2.2.1 (group selection), §2.2.2 (longest match, allow on a tie,
/robots.txt implicitly allowed) and §2.2.3 (``*`` and ``$``).
"""

from __future__ import annotations

import urllib.robotparser

import pytest

from linkfold.web.robots import RobotRules, parse_robots

# RFC 9309 §5.1 "Simple Example" (from memory).
SIMPLE = """\
User-Agent: *
Disallow: *.gif$
Disallow: /example/
Allow: /publications/

User-Agent: foobot
Disallow:/
Allow:/example/page.html
Allow:/example/allowed.gif

User-Agent: barbot
User-Agent: bazbot
Disallow: /example/page.html

User-Agent: quxbot

EOF
"""


@pytest.mark.parametrize(("agent", "path", "allowed", "why"), [
    ("foobot", "/example/page.html", True, "§5.1: foobot may fetch page.html (allow longer than /)"),
    ("foobot", "/example/allowed.gif", True, "§5.1: explicit allow"),
    ("foobot", "/example/other.html", False, "§5.1: Disallow: / applies"),
    ("barbot", "/example/page.html", False, "§5.1: barbot and bazbot share a group"),
    ("bazbot", "/example/page.html", False, "§5.1: barbot and bazbot share a group"),
    ("bazbot", "/example/other.html", True, "§5.1: nothing else is disallowed for bazbot"),
    ("quxbot", "/example/page.html", True, "§5.1: an empty group allows everything"),
    ("otherbot", "/example/page.html", False, "§5.1: the * group: Disallow: /example/"),
    ("otherbot", "/publications/paper.html", True, "§5.1: the * group allows /publications/"),
    ("otherbot", "/images/x.gif", False, "§5.1 / §2.2.3: *.gif$ matches any .gif"),
    ("otherbot", "/images/x.gif?size=2", True, "§2.2.3: $ anchors the end, a query follows"),
    ("FOOBOT", "/example/other.html", False, "§2.2.1: product tokens match case-insensitively"),
])
def test_rfc9309_simple_example(agent, path, allowed, why):
    assert parse_robots(SIMPLE, agent).allows(path) is allowed, why


# RFC 9309 §5.2 "Longest Match" (from memory).
LONGEST = """\
User-Agent: foobot
Allow: /example/page/
Disallow: /example/page/disallowed.gif
"""


def test_rfc9309_longest_match_wins():
    rules = parse_robots(LONGEST, "foobot")
    assert rules.allows("/example/page/") is True  # §5.2
    assert rules.allows("/example/page/disallowed.gif") is False  # §5.2: the longer disallow wins


def test_stdlib_parser_differs_on_longest_match():
    # Why we do not use urllib.robotparser (see robots.py): it applies the first match in file order.
    parser = urllib.robotparser.RobotFileParser()
    parser.parse(LONGEST.splitlines())
    assert parser.can_fetch("foobot", "/example/page/disallowed.gif") is True


def test_allow_wins_a_tie():
    # §2.2.2: "If an allow rule and a disallow rule are equivalent, then the allow rule SHOULD be used."
    rules = parse_robots("User-agent: *\nDisallow: /folder/\nAllow: /folder/\n", "linkfold")
    assert rules.allows("/folder/page") is True


def test_robots_txt_is_always_allowed():
    rules = parse_robots("User-agent: *\nDisallow: /\n", "linkfold")
    assert rules.allows("/robots.txt") is True  # §2.2.2
    assert rules.allows("/") is False


def test_empty_disallow_matches_nothing():
    assert parse_robots("User-agent: *\nDisallow:\n", "linkfold").allows("/anything") is True


def test_groups_for_the_same_agent_are_combined():
    # §2.2.1: "If there is more than one group matching the user-agent, the matching groups' rules MUST
    # be combined into one group".
    text = "User-agent: linkfold\nDisallow: /a/\n\nUser-agent: other\nDisallow: /\n\n" \
           "User-agent: linkfold\nDisallow: /b/\n"
    rules = parse_robots(text, "linkfold")
    assert not rules.allows("/a/x") and not rules.allows("/b/x") and rules.allows("/c/x")


def test_specific_group_replaces_the_star_group():
    text = "User-agent: *\nDisallow: /\n\nUser-agent: linkfold\nDisallow: /private/\n"
    rules = parse_robots(text, "linkfold")
    assert rules.allows("/news/item") and not rules.allows("/private/x")


def test_no_matching_group_allows_everything():
    assert parse_robots("User-agent: otherbot\nDisallow: /\n", "linkfold").allows("/x") is True


def test_comments_unknown_records_and_junk_are_ignored():
    text = ("# a comment\nSitemap: https://news.example/sitemap.xml\nthis line is junk\n"
            "User-agent: *  # trailing comment\nCrawl-delay: 5\nDisallow: /drafts/ # why\n")
    rules = parse_robots(text, "linkfold")
    assert not rules.allows("/drafts/one") and rules.allows("/news/one")


@pytest.mark.parametrize(("pattern", "path", "matches", "why"), [
    ("/fish", "/fish.html", True, "prefix match (§2.2.2)"),
    ("/fish", "/Fish.asp", False, "paths are case-sensitive (§2.2.2)"),
    ("/fish*.php", "/fishheads/catfish.php?parameters", True, "§2.2.3 wildcard"),
    ("/*.php$", "/filename.php", True, "§2.2.3 end anchor"),
    ("/*.php$", "/filename.php?parameters", False, "§2.2.3 end anchor excludes a query"),
    ("/path/file-with-a-%2A.html", "/path/file-with-a-*.html", True,
     "§2.2.3: a literal * in the URI is matched by %2A"),
    ("/foo/bar?baz=quz", "/foo/bar?baz=quz", True, "§2.2.2: the query is part of the path matched"),
    ("/foo/%62ar", "/foo/bar", True, "§2.2.2: %-encoded unreserved octets are decoded before comparing"),
    ("/foo/bar/ツ", "/foo/bar/%E3%83%84", True, "§2.2.2: non-ASCII is percent-encoded as UTF-8"),
    ("/foo/bar/%e3%83%84", "/foo/bar/%E3%83%84", True, "RFC 3986 §6.2.2.1: hex case does not matter"),
])
def test_pattern_matching(pattern, path, matches, why):
    rules = parse_robots(f"User-agent: *\nDisallow: {pattern}\n", "linkfold")
    assert rules.allows(path) is (not matches), why


def test_status_based_rule_sets():
    assert RobotRules.allow_all().allows("/x") is True  # §2.3.1.3: 4xx means no restrictions
    assert RobotRules.disallow_all().allows("/x") is False  # §2.3.1.4: unreachable means disallow all
    assert RobotRules.disallow_all().allows("/robots.txt") is True
