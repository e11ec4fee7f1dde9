"""Clusters, articles, stories, ID histories and manual decisions over the API, on both backends.

The world (tests/test_api_support.py) is loaded through the real ingest, documents-load and dedupe
stages; the API must answer exactly what the dedupe stage's own functions say, and a decision posted
over HTTP must change the clusters after the next dedupe run.
"""

from __future__ import annotations

import json

import pytest

from linkfold.api import create_app
from linkfold.dedupe.stage import list_clusters, run_dedupe
from linkfold.store.tokens import create_token
from test_api_support import AsgiClient, build_world, settings_for


@pytest.fixture
def world(db_url, engine, tmp_path):
    settings = settings_for(db_url)
    urls = build_world(engine, tmp_path, settings)
    read = create_token(engine, scope="read", note="reader").secret
    write = create_token(engine, scope="write", note="reviewer").secret
    app = create_app(settings, engine=engine)
    return {"api": AsgiClient(app, token=read), "read": read, "write": write, "urls": urls,
            "settings": settings, "engine": engine}


def _article_cluster(api) -> dict:
    [row] = api.get("/v1/clusters", params={"level": "article", "min_size": 2}).json()["clusters"]
    return row


def test_cluster_lists_match_the_stage(world):
    api, engine = world["api"], world["engine"]
    for level in ("article", "story"):
        got = api.get("/v1/clusters", params={"level": level, "min_size": 1}).json()["clusters"]
        want = [row.as_dict() for row in list_clusters(engine, level=level, min_size=1, limit=100)]
        assert got == want
    article = _article_cluster(api)
    assert article["size"] == 2 and article["outlets"] == 1 and article["evidence"] == {"similar_text": 1}
    [story] = api.get("/v1/clusters", params={"level": "story", "min_size": 2}).json()["clusters"]
    assert story["size"] == 3 and story["outlets"] == 2
    assert story["min_score"] <= story["max_score"]
    by_outlet = api.get("/v1/clusters", params={"level": "story", "outlet": "valley-courier.test"}).json()
    assert [c["id"] for c in by_outlet["clusters"]] == [story["id"]]


@pytest.mark.parametrize("params", [{"level": "word"}, {"min_size": 0}, {"limit": 0}, {"limit": 100000}])
def test_cluster_list_filters_are_checked(world, params):
    r = world["api"].get("/v1/clusters", params=params)
    assert r.status_code == 422 and r.json()["error"]["code"] == "invalid_request"


def test_article_and_story_with_members_and_evidence(world):
    api, urls = world["api"], world["urls"]
    article_id = _article_cluster(api)["id"]
    got = api.get(f"/v1/articles/{article_id}").json()
    assert got["id"] == got["current"] == article_id and got["moved"] is False and got["level"] == "article"
    assert {m["url"] for m in got["members"]} == {urls["original"], urls["print"]}
    assert sum(m["founder"] for m in got["members"]) == 1
    [link] = got["links"]
    assert link["kind"] == "similar_text" and link["detail"]["exact_jaccard"] >= 0.9
    assert got["differences"] and got["differences"][0]["passages"]
    story_id = got["members"][0]["story_id"]
    story = api.get(f"/v1/stories/{story_id}").json()
    assert {m["url"] for m in story["members"]} == {urls["original"], urls["print"], urls["copy"]}
    # The path says which kind of ID it expects.
    r = api.get(f"/v1/articles/{story_id}")
    assert r.status_code == 404 and "story ID" in r.json()["error"]["message"]
    assert api.get("/v1/stories/aaaaaaaaaaaaa").status_code == 404


def test_lookup_of_an_id_gives_the_cluster_as_the_article_page_does(world):
    # Issue 15, item 9: the lookup of an ID answers with its cluster, one or many at a time.
    api, urls = world["api"], world["urls"]
    article_id = _article_cluster(api)["id"]
    article = api.get(f"/v1/articles/{article_id}").json()
    answer = api.get("/v1/lookup", params={"q": article_id}).json()
    assert answer["matched_by"] == "article_id" and answer["article_id"] == article_id
    cluster = answer["cluster"]
    assert {m["url"] for m in cluster["members"]} == {m["url"] for m in article["members"]}
    founder = [m["url"] for m in article["members"] if m["founder"]]
    assert [cluster["founder"]] == founder and cluster["members"][0]["url"] == founder[0]
    assert cluster["size"] == 2 and cluster["outlets"] == sorted({m["outlet"] for m in article["members"]})
    story_id = article["members"][0]["story_id"]
    batch = api.post("/v1/lookup", json={"urls": [story_id, urls["copy"]]})
    story, url = [json.loads(line) for line in batch.text.splitlines()]
    assert {m["url"] for m in story["cluster"]["members"]} == {urls["original"], urls["print"], urls["copy"]}
    assert story["cluster"]["level"] == "story" and url["cluster"] is None


def test_history_of_a_live_and_an_unknown_id(world):
    api = world["api"]
    article_id = _article_cluster(api)["id"]
    got = api.get(f"/v1/ids/{article_id}/history").json()
    assert got["moved"] is False and got["path"] == [article_id]
    assert [e["event"] for e in got["events"]] == ["minted"]
    r = api.get("/v1/ids/a2222222222222/history")
    assert r.status_code == 404 and r.json()["error"]["code"] == "not_found"


def test_decision_needs_a_write_token(world):
    api, urls = world["api"], world["urls"]
    body = {"verdict": "different", "a": urls["original"], "b": urls["print"], "decided_by": "coder 1"}
    r = api.post("/v1/decisions", json=body)  # the read token
    # RFC 6750 §3.1: insufficient_scope is 403 and names the scope needed.
    assert r.status_code == 403 and r.json()["error"]["code"] == "insufficient_scope"
    assert 'error="insufficient_scope"' in r.headers["www-authenticate"]
    assert 'scope="write"' in r.headers["www-authenticate"]
    assert api.get("/v1/decisions").json()["decisions"] == []


def test_different_splits_the_article_after_the_next_dedupe_run(world):
    api, urls, write = world["api"], world["urls"], world["write"]
    article_id = _article_cluster(api)["id"]
    r = api.post("/v1/decisions", token=write, json={
        "verdict": "different", "a": article_id, "b": urls["original"], "decided_by": "coder 1",
        "note": "a print view with an added closing note, but a correction notice makes it a new piece"})
    assert r.status_code == 201, r.text
    made = r.json()
    assert made["level"] == "article" and made["supersedes"] == [] and made["token_id"] is not None
    assert "next dedupe run" in made["takes_effect"]
    # Not yet: decisions take effect at the next clustering.
    assert api.get(f"/v1/articles/{article_id}").json()["decisions"][0]["verdict"] == "different"
    assert len(api.get(f"/v1/articles/{article_id}").json()["members"]) == 2
    run_dedupe(world["engine"], settings=world["settings"])
    after = api.get(f"/v1/articles/{article_id}").json()
    # DESIGN.md, stable IDs: the named URL moves out; the ID stays with the rest, founder or not.
    assert [m["url"] for m in after["members"]] == [urls["print"]]
    assert api.get("/v1/clusters", params={"level": "article", "min_size": 2}).json()["clusters"] == []
    listed = api.get("/v1/decisions").json()["decisions"]
    assert [d["id"] for d in listed] == [made["id"]] and listed[0]["in_force"] is True


def test_same_merges_and_the_retired_id_says_where_it_moved(world):
    api, urls, write = world["api"], world["urls"], world["write"]
    article_id = _article_cluster(api)["id"]
    other_id = api.get("/v1/lookup", params={"q": urls["other"]}).json()["article_id"]
    assert other_id and other_id != article_id
    # Two URLs on different outlets state a story-level fact unless the level is given.
    r = api.post("/v1/decisions", token=write, json={
        "verdict": "same", "a": urls["other"], "b": urls["original"], "decided_by": "coder 2", "level": "article"})
    assert r.status_code == 201
    assert r.json()["level"] == "article" and r.json()["level_reason"] == "--level article"
    assert r.json()["effect"] == "changes"
    run_dedupe(world["engine"], settings=world["settings"])
    ids = {article_id, other_id}
    survivor = api.get("/v1/lookup", params={"q": urls["other"]}).json()["article_id"]
    assert survivor in ids
    [retired] = ids - {survivor}
    moved = api.get(f"/v1/articles/{retired}").json()
    assert moved["moved"] is True and moved["id"] == retired and moved["current"] == survivor
    assert moved["path"] == [retired, survivor]
    assert {m["url"] for m in moved["members"]} == {urls["other"], urls["original"], urls["print"]}
    history = api.get(f"/v1/ids/{retired}/history").json()
    assert "merged_into" in [e["event"] for e in history["events"]]


@pytest.mark.parametrize(("body", "status", "code"), [
    ({"verdict": "maybe", "a": "x", "b": "y", "decided_by": "c"}, 422, "invalid_request"),
    ({"verdict": "same", "a": "x", "b": "y"}, 422, "invalid_request"),
    ({"verdict": "same", "a": "https://nowhere.example/x", "b": "https://nowhere.example/y",
      "decided_by": "c"}, 404, "not_found"),
    ({"verdict": "different", "a": "ORIGINAL", "b": "ORIGINAL", "decided_by": "c"}, 400, "input"),
])
def test_bad_decisions_are_refused_and_nothing_stored(world, body, status, code):
    body = {k: (world["urls"]["original"] if v == "ORIGINAL" else v) for k, v in body.items()}
    r = world["api"].post("/v1/decisions", token=world["write"], json=body)
    assert r.status_code == status, r.text
    assert r.json()["error"]["code"] == code
    assert world["api"].get("/v1/decisions").json()["decisions"] == []
