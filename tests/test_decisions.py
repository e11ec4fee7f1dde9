"""Manual decisions that do what a person means (docs/dedupe.md §8 "founder moved", §10.6), both backends.

* The level follows from what is named: a story ID → story, an article ID → article, two URLs on one
  outlet → article, on different outlets → story unless they share an article now or ``--level`` says
  otherwise; the answer says which level it recorded and why.
* "different URL ID" moves the named URL (at story level, its article) out, and the ID stays with the
  rest, founder or not; when the founder leaves, the ID is handed to the remaining member with the
  smallest url key (event ``founder_moved``) and every ID ever issued still resolves.
* A decision that changes nothing as the clusters stand says so (it is kept and obeyed all the same).

Invented world on reserved names (RFC 2606); texts are generated syllable strings.
"""

from __future__ import annotations

import json

import pytest
import sqlalchemy as sa

from dedupe_world import Texts, add_document, ids_of, load_redirects, load_urls, settings
from linkfold.cli import main
from linkfold.dedupe.stage import list_decisions, record_decision, run_dedupe
from linkfold.errors import InputError
from linkfold.ingest import lookup
from linkfold.store import tables as t

A = "https://herald.example/news/harbour-fire"
A_PRINT = "https://herald.example/print/harbour-fire"
B = "https://courier.test/region/harbour-fire"
C = "https://gazette.example/fire"
D = "https://ledger.test/city/harbour-blaze"
SHORT = "https://short.test/h7"
LONE = "https://ledger.test/weather/rain-notes"
HERALD_OTHER = "https://herald.example/news/tide-tables"


@pytest.fixture
def world(engine, tmp_path):
    texts = Texts(seed=11)
    load_urls(engine, [A, A_PRINT, B, C, D, SHORT, LONE, HERALD_OTHER], tmp_path)
    fire = texts.article(300)
    add_document(engine, "herald.example/news/harbour-fire", " ".join(fire))
    add_document(engine, "herald.example/print/harbour-fire", " ".join(texts.copy(fire, 0.003)))
    add_document(engine, "courier.test/region/harbour-fire", " ".join(texts.copy(fire, 0.02)))
    add_document(engine, "gazette.example/fire", " ".join(texts.copy(fire, 0.03)))
    add_document(engine, "ledger.test/city/harbour-blaze", " ".join(texts.copy(fire, 0.03)))
    add_document(engine, "ledger.test/weather/rain-notes", " ".join(texts.article(250)))
    load_redirects(engine, [(SHORT, A)], tmp_path)
    run_dedupe(engine, settings=settings())
    return texts


def _founder(engine, cluster_id: str) -> str:
    ci, c = t.cluster_ids, t.canonical_urls
    with engine.connect() as conn:
        return conn.execute(sa.select(c.c.url).select_from(ci.join(c, c.c.id == ci.c.founder_id))
                            .where(ci.c.id == cluster_id)).scalar_one()


def _events(engine, cluster_id: str) -> list[tuple[str, str | None, str | None, str]]:
    e, c = t.id_events, t.canonical_urls
    with engine.connect() as conn:
        return [tuple(r) for r in conn.execute(
            sa.select(e.c.event, e.c.other_id, c.c.url, e.c.reason)
            .select_from(e.outerjoin(c, c.c.id == e.c.member_id))
            .where(e.c.cluster_id == cluster_id).order_by(e.c.id))]


def _keys(engine) -> dict[str, str]:
    c = t.canonical_urls
    with engine.connect() as conn:
        return dict(conn.execute(sa.select(c.c.url, c.c.url_key)).all())


def test_the_level_follows_from_what_is_named(engine, world):
    arts, stories = ids_of(engine, "article"), ids_of(engine, "story")
    assert stories[A] == stories[B] == stories[C] == stories[D] and arts[A] == arts[A_PRINT] == arts[SHORT]
    cases = [
        # two URLs on different outlets: a story-level fact
        ((B, LONE), None, "story", "different outlets"),
        # two URLs on one outlet: the article level
        ((D, LONE), None, "article", "one outlet"),
        # a short link and its target are one article although their hosts differ
        ((SHORT, A), None, "article", "one article now"),
        # the outlet that counts is the one a URL stands for: the short link's is its target's
        ((SHORT, HERALD_OTHER), None, "article", "one outlet: herald.example"),
        # --level article is how to say "these are different articles", across outlets too
        ((B, C), "article", "article", "--level article"),
        # an ID says its level; a URL beside it is moved out of (or into) that cluster
        ((stories[A], LONE), None, "story", "a story ID"),
        ((arts[A], LONE), None, "article", "an article ID"),
    ]
    for (x, y), level, expected, why in cases:
        r = record_decision(engine, "different", x, y, decided_by="tester", level=level)
        assert (r.decision.level, why in r.level_reason, why in r.message) == (expected, True, True), (x, y)
    with pytest.raises(InputError, match="story level"):
        record_decision(engine, "different", stories[A], B, decided_by="tester", level="article")
    with pytest.raises(InputError, match="level must be"):
        record_decision(engine, "same", B, C, decided_by="tester", level="outlet")


def test_different_url_story_moves_the_named_url_out_not_the_founder(engine, tmp_path):
    # Three outlets; the founder (smallest url key) holds the weakest copy, the other two are near-exact.
    # A pair constraint between the named URL and the founder would let the strong pair stay together
    # and push the founder out; a move-out keeps the founder and the ID with the rest.
    texts = Texts(seed=5)
    urls = ["https://north.example/a/quay", "https://south.test/b/quay", "https://east.example/c/quay"]
    load_urls(engine, urls, tmp_path)
    keys = _keys(engine)
    founder, x, y = sorted(urls, key=keys.__getitem__)
    base = texts.article(400)
    for url, words in ((founder, texts.copy(base, 0.04)), (x, texts.copy(base, 0.004)),
                       (y, texts.copy(base, 0.004))):
        add_document(engine, url.split("//", 1)[1], " ".join(words))
    run_dedupe(engine, settings=settings())
    sid = ids_of(engine, "story")[founder]
    assert _founder(engine, sid) == founder and ids_of(engine, "story")[x] == sid
    result = record_decision(engine, "different", x, sid, decided_by="tester")
    assert result.decision.level == "story" and result.effect == "changes"
    assert f"{x} will move out of story {sid}" in result.message
    run_dedupe(engine, settings=settings())
    after = ids_of(engine, "story")
    assert after[founder] == after[y] == sid and after[x] != sid
    assert _founder(engine, sid) == founder
    assert ("minted", None, x, "split") in _events(engine, after[x])


def test_moving_a_story_founder_out_hands_the_id_to_the_rest(engine, world):
    stories, arts = ids_of(engine, "story"), ids_of(engine, "article")
    sid = stories[A]
    founder = _founder(engine, sid)
    keys = _keys(engine)
    mates = {u for u, a in arts.items() if a == arts[founder]}          # the founder's article moves with it
    rest = sorted((u for u, s in stories.items() if s == sid and u not in mates), key=keys.__getitem__)
    assert rest, "the world needs a story with more than one article"
    result = record_decision(engine, "different", founder, sid, decided_by="tester", note="local rewrite")
    assert result.decision.level == "story" and result.effect == "changes"
    assert {result.decision.a.url, result.decision.b.url} == {founder, rest[0]}   # anchored to the heir
    summary = run_dedupe(engine, settings=settings())
    assert summary.stories.founders_moved == 1
    after = ids_of(engine, "story")
    assert {after[u] for u in rest} == {sid}                     # the ID stays with the rest
    assert {after[u] for u in mates} != {sid} and len({after[u] for u in mates}) == 1
    assert _founder(engine, sid) == rest[0]
    assert ("founder_moved", None, rest[0], "moved_out") in _events(engine, sid)
    new = after[founder]
    assert new.startswith(sid + "-")                             # the old founder's derived ID is taken
    assert ("split_from", sid, None, "split") in _events(engine, new)
    [answer] = lookup(engine, [sid])
    assert answer["story_id"] == sid and answer["error"] is None
    # Obeyed by every run, a full one too, and nothing changes.
    before = ids_of(engine, "story")
    run_dedupe(engine, settings=settings(), full=True)
    assert ids_of(engine, "story") == before
    # Saying it again changes nothing, and says so.
    again = record_decision(engine, "different", founder, sid, decided_by="tester")
    assert again.effect == "already_separate" and "changes nothing" in again.message
    assert again.supersedes == [result.decision.id]
    # Changing one's mind: "same" on the same URL and ID supersedes the move-out.
    back = record_decision(engine, "same", founder, sid, decided_by="tester")
    assert back.supersedes == [result.decision.id, again.decision.id] and back.effect == "changes"
    run_dedupe(engine, settings=settings())
    final = ids_of(engine, "story")
    assert {final[u] for u in rest + sorted(mates)} == {sid}


def test_moving_an_article_founder_out_keeps_the_id_with_the_rest(engine, world):
    arts = ids_of(engine, "article")
    aid = arts[A]
    founder = _founder(engine, aid)
    keys = _keys(engine)
    rest = sorted((u for u, a in arts.items() if a == aid and u != founder), key=keys.__getitem__)
    assert len(rest) == 2     # A, its print view and the short link: one article on URL evidence
    result = record_decision(engine, "different", aid, founder, decided_by="tester")
    assert result.decision.level == "article" and "an article ID" in result.level_reason
    run_dedupe(engine, settings=settings())
    after = ids_of(engine, "article")
    assert after[rest[0]] == after[rest[1]] == aid and after[founder] != aid
    assert _founder(engine, aid) == rest[0]
    assert ("founder_moved", None, rest[0], "moved_out") in _events(engine, aid)


def test_moving_a_member_that_is_not_the_founder(engine, world):
    arts = ids_of(engine, "article")
    aid = arts[A]
    founder = _founder(engine, aid)
    other = next(u for u in (A, A_PRINT, SHORT) if u != founder)
    record_decision(engine, "different", other, aid, decided_by="tester")
    summary = run_dedupe(engine, settings=settings())
    assert summary.articles.founders_moved == 0
    after = ids_of(engine, "article")
    assert after[founder] == aid and after[other] != aid
    assert not [e for e in _events(engine, aid) if e[0] == "founder_moved"]


def test_decisions_that_change_nothing_say_so(engine, world):
    stories, arts = ids_of(engine, "story"), ids_of(engine, "article")
    apart = record_decision(engine, "different", B, LONE, decided_by="tester")
    assert apart.effect == "already_separate" and "changes nothing" in apart.message
    together = record_decision(engine, "same", B, C, decided_by="tester")
    assert together.effect == "already_together" and stories[B] in together.message
    # a short link and its target, "same" across hosts: one article already
    short = record_decision(engine, "same", SHORT, arts[A], decided_by="tester")
    assert short.effect == "already_together" and short.decision.level == "article"
    # a move-out of a URL that is not in the cluster
    out = record_decision(engine, "different", LONE, stories[A], decided_by="tester")
    assert out.effect == "already_separate"
    changes = record_decision(engine, "different", B, C, decided_by="tester")
    assert changes.effect == "changes" and changes.supersedes == [together.decision.id]
    summary = run_dedupe(engine, settings=settings())
    assert summary.stories.conflicts == []
    after = ids_of(engine, "story")
    assert after[B] != after[C]


def test_a_sole_member_cannot_be_moved_out(engine, world):
    lone = ids_of(engine, "article")[LONE]
    with pytest.raises(InputError, match="no rest"):
        record_decision(engine, "different", LONE, lone, decided_by="tester")
    with pytest.raises(InputError, match="name a URL"):
        record_decision(engine, "different", lone, lone, decided_by="tester")
    assert list_decisions(engine) == []


def test_cli_says_which_level_it_recorded(db_url, engine, world, capsys):
    sid = ids_of(engine, "story")[A]
    assert main(["--db", db_url, "decide", "different", B, D, "--by", "tester"]) == 0
    captured = capsys.readouterr()
    out = json.loads(captured.out)
    assert out["level"] == "story" and out["effect"] == "changes" and "different outlets" in out["level_reason"]
    assert "recorded at the story level (two URLs on different outlets" in captured.err
    assert main(["--db", db_url, "decide", "different", B, D, "--level", "article", "--by", "tester"]) == 0
    captured = capsys.readouterr()
    assert json.loads(captured.out)["level"] == "article" and "--level article" in captured.err
    assert main(["--db", db_url, "-q", "decide", "same", C, sid, "--by", "tester"]) == 0
    captured = capsys.readouterr()
    assert json.loads(captured.out)["effect"] == "already_together" and captured.err == ""
    assert main(["--db", db_url, "decide", "different", sid, B, "--level", "article", "--by", "t"]) == 6
    assert "story level" in capsys.readouterr().err
