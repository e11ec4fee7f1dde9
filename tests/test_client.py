"""The Python client against a real ``linkfold serve`` process on loopback, on both backends.

This is also the API's real-server test: the same answers the in-process tests check, through uvicorn,
the network stack and a streamed response.
"""

from __future__ import annotations

import httpx
import pytest

from linkfold.client import ApiError, Client, add_ids
from linkfold.errors import NetworkError
from linkfold.ingest import lookup
from linkfold.store.tokens import create_token
from test_api_support import LiveServer, build_world, free_port, settings_for


@pytest.fixture
def live(db_url, engine, tmp_path):
    urls = build_world(engine, tmp_path, settings_for(db_url))
    read = create_token(engine, scope="read", note="client tests").secret
    write = create_token(engine, scope="write", note="client tests").secret
    with LiveServer(db_url, cwd=tmp_path) as server:
        yield {"url": server.url, "read": read, "write": write, "urls": urls, "engine": engine,
               "server": server}


def test_three_lines_lookup_and_article(live):
    with Client(live["url"], token=live["read"]) as lf:
        answer = lf.lookup(live["urls"]["original"] + "?utm_source=newsletter")
        article = lf.article(answer["article_id"])
    assert answer["seen"] is True and answer["article_id"].startswith("a")
    assert {m["url"] for m in article["members"]} == {live["urls"]["original"], live["urls"]["print"]}
    # An ID looked up answers with its cluster (issue 15, item 9).
    with Client(live["url"], token=live["read"]) as lf:
        by_id = lf.lookup(answer["article_id"])
    assert {m["url"] for m in by_id["cluster"]["members"]} == {m["url"] for m in article["members"]}


def test_lookup_many_batches_transparently_in_order(live):
    items = [*live["urls"].values(), "not a url", "https://unseen.example/x"] * 4
    with Client(live["url"], token=live["read"], batch_size=5) as lf:
        got = list(lf.lookup_many(items))
    # The same answers as the library's own lookup, in process (datetimes come back as text).
    want = list(lookup(live["engine"], items))
    assert [g["input"] for g in got] == items
    assert [(g["url_key"], g["article_id"], g["story_id"], g["error"]) for g in got] == \
           [(w["url_key"], w["article_id"], w["story_id"], w["error"]) for w in want]


def test_a_full_batch_of_ten_thousand_through_the_real_server(live):
    items = [f"https://bulk.example/item/{i}?utm_source=x" for i in range(10_000)]
    with Client(live["url"], token=live["read"]) as lf:
        got = list(lf.lookup_many(items))
    assert len(got) == 10_000 and got[-1]["canonical"] == "https://bulk.example/item/9999"
    # One more than the limit is refused whole, with 413 and the envelope (RFC 9110 §15.5.14).
    r = httpx.post(live["url"] + "/v1/lookup", json={"urls": [*items, "https://bulk.example/one-more"]},
                   headers={"Authorization": f"Bearer {live['read']}"}, timeout=60)
    assert r.status_code == 413 and r.json()["error"]["code"] == "batch_too_large"


def test_errors_become_api_errors_with_the_envelope(live):
    with Client(live["url"], token="lf_wrong") as lf, pytest.raises(ApiError) as info:
        lf.lookup("https://a.example/")
    assert info.value.status == 401 and info.value.code == "unauthorized"
    with Client(live["url"], token=live["read"]) as lf:
        with pytest.raises(ApiError) as info:
            lf.article("a2222222222222")
        assert info.value.status == 404 and info.value.code == "not_found"
        with pytest.raises(ApiError) as info:
            lf.decide("different", live["urls"]["original"], live["urls"]["print"], decided_by="me")
        assert info.value.status == 403 and info.value.code == "insufficient_scope"


def test_decide_with_a_write_token(live):
    with Client(live["url"], token=live["write"]) as lf:
        made = lf.decide("different", live["urls"]["original"], live["urls"]["print"], decided_by="client test")
        assert made["verdict"] == "different" and made["level"] == "article"
        assert lf.history(lf.lookup(live["urls"]["print"])["article_id"])["moved"] is False


def test_unreachable_server_is_a_network_error():
    with Client(f"http://127.0.0.1:{free_port()}", token="lf_x", timeout=2) as lf, pytest.raises(NetworkError):
        lf.lookup("https://a.example/")


def test_add_ids_to_a_dataframe(live):
    pd = pytest.importorskip("pandas")
    urls = live["urls"]
    frame = pd.DataFrame({"respondent": [1, 2, 3, 4, 5],
                          "link": [urls["original"], urls["print"] + "?utm_medium=email", None,
                                   urls["copy"], urls["original"]]},
                         index=[10, 11, 12, 13, 14])
    with Client(live["url"], token=live["read"], batch_size=2) as lf:
        out = add_ids(frame, "link", client=lf)
        only = add_ids(frame, "link", client=lf, fields=("article_id", "story_id"))
    assert list(out.columns) == ["respondent", "link", "article_id", "story_id", "final_url", "final_domain",
                                 "final_outlet", "final_is_article"]
    # Never followed or redirected: each URL stands for its own canonical URL.
    assert out.loc[10, "final_url"] == out.loc[14, "final_url"] == urls["original"]
    assert out.loc[11, "final_url"] == urls["print"]  # tracking dropped; a URL of its own
    assert out.loc[12, "final_url"] is None
    assert list(out.index) == [10, 11, 12, 13, 14] and "article_id" not in frame.columns  # a copy
    assert out.loc[10, "article_id"] == out.loc[11, "article_id"] == out.loc[14, "article_id"]
    assert out.loc[13, "article_id"] != out.loc[10, "article_id"]
    assert out.loc[13, "story_id"] == out.loc[10, "story_id"]  # the syndicated copy: one story
    assert out.loc[12, "article_id"] is None and out.loc[12, "story_id"] is None
    assert list(only.columns) == ["respondent", "link", "article_id", "story_id"]
    with pytest.raises(KeyError):
        add_ids(frame, "url", client=lf)
