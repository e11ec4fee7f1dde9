"""Issue 15 end to end, through the commands a lab runs, on a generated messy post archive (both backends).

The scenario is invented (reserved names, RFC 2606) and shaped like a lab's post archive: ad clicks that
all redirect to one subscribe page, withdrawn articles redirected to the outlet's home page, short links
(followed, and one never followed), a redirect wrapper and a share page naming an article, a syndicated
copy on a second outlet, and two short briefs with one title on two outlets two hours apart. Every step
is a `linkfold` command (`rules load`, `datasets load`, `redirects load`, `documents load`, `dedupe`, `export`,
`decide`), so what is checked is what a user sees in the export:

* sinks never merge: the ad clicks and the withdrawn articles keep an article and a story ID each;
* `final_*` columns: a followed short link stands for its article (its outlet, `final_is_article`), an
  unfollowed one has empty final columns, a wrapper already is its target, a share page is not unwrapped;
* the syndicated copy and the two briefs share a story ID (docs/dedupe.md §6, the title-and-date rule);
* decisions: `different URL STORY_ID` on the story's founder moves the founder out and the ID stays with
  the rest; two URLs on two outlets decide at the story level and say so; a decision that changes
  nothing says so.
"""

from __future__ import annotations

import csv
import io
import json
from urllib.parse import quote

import numpy as np
import pytest

from linkfold.cli import main
from synthetic_texts import edited_copy, invented_vocabulary, random_words

RULES = r"""
name = "messy archive"
shortener_hosts = ["lnk.test"]
never_article_hosts = ["adserve.example"]

[site."gazette.example"]
outlet = "Gazette"
article = ['^/news/\d+/[a-z0-9-]+$']

[site."courier.test"]
outlet = "Courier"
article = ['^/story/[a-z0-9-]+$']
"""

GAZETTE_STORY = "https://gazette.example/news/2001/harbour-vote"
COURIER_COPY = "https://courier.test/story/harbour-vote"
OTHER = "https://gazette.example/news/2002/orchard-festival"
BRIEF_G = "https://gazette.example/news/2003/ferry-timetable-brief"
BRIEF_C = "https://courier.test/story/ferry-timetable-brief"
SUBSCRIBE = "https://gazette.example/subscribe"
HOME = "https://gazette.example/"
SHORT_FOLLOWED = "https://lnk.test/h4rb"
SHORT_UNFOLLOWED = "https://lnk.test/zz9q"
WRAPPER = "https://social.example/redirect?url=" + quote(COURIER_COPY, safe="")
SHARE_PAGE = "https://social.example/sharer/share?u=" + quote(OTHER, safe="")
AD_CLICKS = [f"https://go.gazette.example/promo/{i}" for i in range(40)]
WITHDRAWN = [f"https://gazette.example/news/{1100 + i}/withdrawn-report-{i}" for i in range(15)]


def _run(db: str, *args: str) -> None:
    assert main(["-q", "--db", db, *args]) == 0, args


@pytest.fixture
def archive(db_url, tmp_path, capsys):
    rules = tmp_path / "rules.toml"
    rules.write_text(RULES, encoding="utf-8")
    _run(db_url, "rules", "load", str(rules))

    urls = [GAZETTE_STORY, COURIER_COPY, OTHER, BRIEF_G, BRIEF_C, SHORT_FOLLOWED, SHORT_UNFOLLOWED, WRAPPER,
            SHARE_PAGE, *AD_CLICKS, *WITHDRAWN]
    dump = tmp_path / "posts.csv"
    with dump.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["post_id", "url"])
        for i, url in enumerate(urls):
            w.writerow([f"p{i}", url + ("&utm_source=feed" if "?" in url else "?utm_source=feed")])
    _run(db_url, "datasets", "load", str(dump), "--dataset", "posts", "--url-column", "url", "--key-column", "post_id")

    pairs = tmp_path / "expanded.csv"
    with pairs.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["short", "expanded"])
        w.writerow([SHORT_FOLLOWED, GAZETTE_STORY])
        w.writerows([ad, SUBSCRIBE] for ad in AD_CLICKS)
        w.writerows([gone, HOME] for gone in WITHDRAWN)
    _run(db_url, "redirects", "load", str(pairs))

    rng = np.random.default_rng(15)
    vocab = invented_vocabulary(4000, rng)
    base = random_words(rng, vocab, 320)
    brief = random_words(rng, vocab, 33)
    docs = [
        {"url": GAZETTE_STORY, "title": "Harbour barrier vote passes", "text": " ".join(base),
         "published": "2026-05-04T08:00:00Z"},
        {"url": COURIER_COPY, "title": "Harbour barrier vote passes",
         "text": " ".join(edited_copy(rng, base, 0.08, vocab)), "published": "2026-05-04T09:30:00Z"},
        {"url": OTHER, "title": "Orchard festival opens", "text": " ".join(random_words(rng, vocab, 280)),
         "published": "2026-05-04T08:00:00Z"},
        # Two briefs of 33 words, one title, two outlets, two hours apart; their words differ entirely.
        {"url": BRIEF_G, "title": "Ferry timetable changes from Monday", "text": " ".join(brief),
         "published": "2026-05-05T06:00:00Z"},
        {"url": BRIEF_C, "title": "Ferry timetable changes from Monday",
         "text": " ".join(random_words(rng, vocab, 33)), "published": "2026-05-05T08:00:00Z"},
        *({"url": gone, "title": f"Report {i}", "text": " ".join(random_words(rng, vocab, 200)),
           "published": "2026-04-01T08:00:00Z"} for i, gone in enumerate(WITHDRAWN)),
    ]
    texts = tmp_path / "texts.jsonl"
    texts.write_text("".join(json.dumps(d) + "\n" for d in docs), encoding="utf-8")
    _run(db_url, "documents", "load", str(texts))
    _run(db_url, "dedupe")
    capsys.readouterr()
    return db_url


def _export(db: str, capsys) -> dict[str, dict[str, str]]:
    capsys.readouterr()
    _run(db, "export", "--dataset", "posts", "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    # the raw URL as loaded, without the tracking parameter the dump added
    return {r["raw_url"].replace("&utm_source=feed", "").replace("?utm_source=feed", ""): r for r in rows}


def test_sinks_finals_stories_and_briefs_as_exported(archive, capsys):
    rows = _export(archive, capsys)

    # Sinks never merge: 40 ad clicks into one subscribe page, 15 withdrawn articles into the home page.
    for group in (AD_CLICKS, WITHDRAWN):
        assert len({rows[u]["article_id"] for u in group}) == len(group)
        assert len({rows[u]["story_id"] for u in group}) == len(group)
    # ... but where they lead is said: the final URL, not an article (RFC 6596 §3 for the home page).
    assert {rows[u]["final_url"] for u in AD_CLICKS} == {SUBSCRIBE}
    assert {rows[u]["final_url"] for u in WITHDRAWN} == {HOME}
    assert {rows[u]["final_is_article"] for u in AD_CLICKS + WITHDRAWN} == {"false"}

    # A followed short link stands for its article, with the article's outlet; an unfollowed one for nothing.
    followed, unfollowed = rows[SHORT_FOLLOWED], rows[SHORT_UNFOLLOWED]
    assert followed["article_id"] == rows[GAZETTE_STORY]["article_id"]
    assert (followed["final_url"], followed["final_outlet"], followed["final_is_article"]) == (
        GAZETTE_STORY, "Gazette", "true")
    assert followed["outlet"] != "Gazette"
    assert (unfollowed["final_url"], unfollowed["final_domain"], unfollowed["final_outlet"],
            unfollowed["final_is_article"]) == ("", "", "", "")

    # A redirect wrapper is its target already; a share page naming an article is not that article.
    assert rows[WRAPPER]["canonical_url"] == COURIER_COPY == rows[WRAPPER]["final_url"]
    assert rows[SHARE_PAGE]["canonical_url"] != OTHER
    assert rows[SHARE_PAGE]["article_id"] != rows[OTHER]["article_id"]

    # Syndication and short briefs: one story each, articles apart.
    assert rows[GAZETTE_STORY]["story_id"] == rows[COURIER_COPY]["story_id"]
    assert rows[GAZETTE_STORY]["article_id"] != rows[COURIER_COPY]["article_id"]
    assert rows[BRIEF_G]["story_id"] == rows[BRIEF_C]["story_id"]
    assert rows[OTHER]["story_id"] != rows[GAZETTE_STORY]["story_id"]


def _decide(db: str, capsys, *args: str) -> dict:
    capsys.readouterr()
    _run(db, "decide", *args)
    return json.loads(capsys.readouterr().out.strip().splitlines()[-1])


def test_decisions_do_what_a_person_means(archive, capsys):
    before = _export(archive, capsys)
    story = before[GAZETTE_STORY]["story_id"]
    members = [u for u, r in before.items() if r["story_id"] == story]
    assert {GAZETTE_STORY, COURIER_COPY, SHORT_FOLLOWED, WRAPPER} <= set(members)

    # Move each end of the story out in turn, whichever is the founder: the named URL (with its article)
    # leaves, the ID stays with the rest.
    moved = _decide(archive, capsys, "different", COURIER_COPY, story)
    assert moved["level"] == "story"
    _run(archive, "dedupe")
    after = _export(archive, capsys)
    assert after[GAZETTE_STORY]["story_id"] == story == after[SHORT_FOLLOWED]["story_id"]
    assert after[COURIER_COPY]["story_id"] != story
    assert after[WRAPPER]["story_id"] == after[COURIER_COPY]["story_id"]  # the wrapper is that article

    # Two URLs on two outlets state a story-level fact, and the answer says so.
    briefs = _decide(archive, capsys, "different", BRIEF_G, BRIEF_C)
    assert briefs["level"] == "story"
    _run(archive, "dedupe")
    after = _export(archive, capsys)
    assert after[BRIEF_G]["story_id"] != after[BRIEF_C]["story_id"]

    # Deciding again what is already so changes nothing, and says that too.
    again = _decide(archive, capsys, "different", BRIEF_G, BRIEF_C)
    assert again["effect"] == "already_separate"


def test_founder_moves_out_and_the_id_stays(archive, capsys):
    before = _export(archive, capsys)
    story = before[GAZETTE_STORY]["story_id"]
    capsys.readouterr()
    _run(archive, "lookup", story)
    cluster = json.loads(capsys.readouterr().out.strip().splitlines()[-1])["cluster"]
    founder = cluster["founder"]
    founder = founder["url"] if isinstance(founder, dict) else founder
    decided = _decide(archive, capsys, "different", founder, story)
    assert decided["level"] == "story"
    _run(archive, "dedupe")
    after = _export(archive, capsys)
    assert after[founder]["story_id"] != story
    rest = [u for u, r in before.items() if r["story_id"] == story and r["article_id"] != before[founder]["article_id"]]
    assert rest and {after[u]["story_id"] for u in rest} == {story}
