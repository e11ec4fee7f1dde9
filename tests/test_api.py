"""The HTTP API in process (httpx ASGITransport) on both backends: lookups, batches, datasets, runs,
errors and limits. Statuses are checked against RFC 9110; the access rules against RFC 6750."""

from __future__ import annotations

import json
from datetime import datetime, timedelta

import pytest

from linkfold.api import create_app
from linkfold.store.runs import finish_run, start_run
from linkfold.store.tokens import create_token
from test_api_support import DUMP_ROWS, AsgiClient, load_demo_dump, settings_for


@pytest.fixture
def api(db_url, engine, tmp_path):
    load_demo_dump(engine, tmp_path)
    token = create_token(engine, scope="read", note="tests").secret
    app = create_app(settings_for(db_url), engine=engine)
    return AsgiClient(app, token=token)


def _envelope(response) -> dict:
    body = response.json()
    assert set(body) == {"error"} and set(body["error"]) == {"code", "message"}
    assert response.headers["content-type"].startswith("application/json")
    return body["error"]


def test_health_needs_no_token(api):
    r = api.get("/v1/health", token=False)
    assert r.status_code == 200
    assert r.json()["status"] == "ok" and r.json()["schema_revision"]


def test_lookup_one_url_folds_variants(api):
    a = api.get("/v1/lookup", params={"q": DUMP_ROWS[0][1]}).json()
    b = api.get("/v1/lookup", params={"q": DUMP_ROWS[2][1]}).json()
    assert a["seen"] is True and a["matched_by"] == "raw_url"
    assert a["url_key"] == b["url_key"] and a["canonical"] == b["canonical"]
    by_key = api.get("/v1/lookup", params={"q": a["url_key"]}).json()
    assert by_key["matched_by"] == "url_key" and by_key["canonical"] == a["canonical"]
    assert by_key["sightings"] == a["sightings"] >= 2


def test_lookup_unknown_and_unparsable(api):
    new = api.get("/v1/lookup", params={"q": "https://new-outlet.example/x"}).json()
    assert new["seen"] is False and new["matched_by"] == "canonical_url" and new["error"] is None
    bad = api.get("/v1/lookup", params={"q": "javascript:alert(1)"}).json()
    assert bad["canonical"] is None and bad["error"]


def test_lookup_without_q_is_the_envelope(api):
    r = api.get("/v1/lookup")
    assert r.status_code == 422
    assert _envelope(r)["code"] == "invalid_request"


def test_batch_json_streams_one_line_per_input_in_order(api):
    urls = [u for _, u in DUMP_ROWS] * 3
    r = api.post("/v1/lookup", json={"urls": urls})
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("application/x-ndjson")
    lines = [json.loads(line) for line in r.text.splitlines()]
    assert [line["input"] for line in lines] == urls
    single = api.get("/v1/lookup", params={"q": urls[0]}).json()
    assert lines[0] == single


def test_batch_plain_text_lines(api):
    body = "\r\n".join(u for _, u in DUMP_ROWS[:3]) + "\n\n"
    r = api.post("/v1/lookup", content=body.encode(), headers={"Content-Type": "text/plain; charset=utf-8"})
    assert r.status_code == 200
    assert len({json.loads(line)["url_key"] for line in r.text.splitlines()}) == 1


def test_batch_over_the_item_limit_is_413(db_url, engine):
    token = create_token(engine, scope="read", note="t").secret
    api = AsgiClient(create_app(settings_for(db_url, api_max_batch=5), engine=engine), token=token)
    r = api.post("/v1/lookup", json={"urls": ["https://a.example/"] * 6})
    # RFC 9110 §15.5.14: 413 Content Too Large.
    assert r.status_code == 413 and _envelope(r)["code"] == "batch_too_large"
    assert api.post("/v1/lookup", json={"urls": ["https://a.example/"] * 5}).status_code == 200


def test_body_over_the_byte_limit_is_413_declared_or_chunked(db_url, engine):
    token = create_token(engine, scope="read", note="t").secret
    api = AsgiClient(create_app(settings_for(db_url, api_max_body_bytes=1000), engine=engine), token=token)
    big = json.dumps({"urls": ["https://a.example/" + "x" * 100] * 20}).encode()
    r = api.post("/v1/lookup", content=big, headers={"Content-Type": "application/json"})
    assert r.status_code == 413 and _envelope(r)["code"] == "body_too_large"

    async def chunks():  # no Content-Length: sent chunked
        for i in range(0, len(big), 100):
            yield big[i:i + 100]

    r = api.post("/v1/lookup", content=chunks(), headers={"Content-Type": "application/json"})
    assert r.status_code == 413 and _envelope(r)["code"] == "body_too_large"


@pytest.mark.parametrize(("body", "ctype", "status", "code"), [
    (b'{"urls": "https://a.example/"}', "application/json", 400, "invalid_request"),
    (b'{"urls": [1, 2]}', "application/json", 400, "invalid_request"),
    (b'{"links": []}', "application/json", 400, "invalid_request"),
    (b"{not json", "application/json", 400, "invalid_request"),
    (b"\xff\xfe bad", "text/plain", 400, "invalid_request"),
    (b"<urls/>", "application/xml", 415, "unsupported_media_type"),
])
def test_bad_batch_bodies(api, body, ctype, status, code):
    r = api.post("/v1/lookup", content=body, headers={"Content-Type": ctype})
    assert r.status_code == status and _envelope(r)["code"] == code


def test_datasets_and_one_dataset(api):
    listed = api.get("/v1/datasets").json()["datasets"]
    assert [d["dataset"] for d in listed] == ["panel-a"]
    # Sightings are never dropped: the unparsable row is a sighting and a reject.
    assert listed[0]["sightings"] == 5 and listed[0]["rejects"] == 1
    one = api.get("/v1/datasets/panel-a").json()
    assert one["rejects_by_reason"] and sum(one["rejects_by_reason"].values()) == 1
    assert one["files_detail"][0]["file_name"] == "panel-a.csv"
    r = api.get("/v1/datasets/nope")
    assert r.status_code == 404 and _envelope(r)["code"] == "not_found"


def test_runs_list_and_one(api, engine):
    run_id = start_run(engine, "test-stage")
    child = start_run(engine, "test-child", parent_id=run_id)
    finish_run(engine, child, status="failed", error="InputError: broken file")
    finish_run(engine, run_id, status="ok", counts={"rows": 3})
    listed = api.get("/v1/runs", params={"limit": 50}).json()["runs"]
    assert listed[0]["id"] == run_id and listed[0]["children"] == 1  # newest first, top-level only
    assert "ingest" in {r["stage"] for r in listed}
    assert [r["id"] for r in api.get("/v1/runs", params={"stage": "test-stage"}).json()["runs"]] == [run_id]
    got = api.get(f"/v1/runs/{run_id}").json()
    assert [c["id"] for c in got["children"]] == [child] and got["children"][0]["status"] == "failed"
    assert got["stage"] == "test-stage" and got["status"] == "ok" and got["counts"] == {"rows": 3}
    # RFC 3339 §5.6 date-time with an explicit UTC offset ("Z").
    assert datetime.fromisoformat(got["started_at"]).utcoffset() == timedelta(0)
    r = api.get("/v1/runs/999999")
    assert r.status_code == 404 and _envelope(r)["code"] == "not_found"


def test_unknown_path_is_the_envelope(api):
    r = api.get("/v1/nothing-here")
    assert r.status_code == 404 and _envelope(r)["code"] == "not_found"


def test_wrong_method_is_405_with_allow(api):
    r = api.request("DELETE", "/v1/datasets")
    # RFC 9110 §15.5.6: a 405 response carries Allow.
    assert r.status_code == 405 and "GET" in r.headers["allow"]
    assert _envelope(r)["code"] == "method_not_allowed"


def test_openapi_document_is_served_and_lists_the_routes(api):
    doc = api.get("/v1/openapi.json", token=False).json()
    assert doc["openapi"].startswith("3.")
    for path in ("/v1/lookup", "/v1/datasets", "/v1/datasets/{name}", "/v1/runs/{run_id}", "/v1/health"):
        assert path in doc["paths"], path
    assert "application/x-ndjson" in doc["paths"]["/v1/lookup"]["post"]["responses"]["200"]["content"]


def test_a_stage_run_reads_the_same_from_the_library_and_the_api(api, engine):
    # The run's counts that the API answers are the stage summary's as_dict(), as the CLI prints it.
    from linkfold.ingest.recanon import recanonicalize

    summary = recanonicalize(engine)
    got = api.get(f"/v1/runs/{summary.run_id}").json()
    assert got["stage"] == "recanonicalize" and got["counts"] == json.loads(json.dumps(summary.as_dict()))
