"""The API and the pages under hostile requests, in process on both backends: form posts from another
origin refused, NUL characters, malformed bodies, wrong media types, oversized bodies and odd IDs answered
with the JSON error envelope and a 4xx status (never a 500), a read token that never writes, and refusals
logged without secrets. The browser's side of the same checks is tests/test_pages_hostile.py.

References: RFC 6454 §4 (an origin is scheme, host and port); the Fetch standard's ``Origin`` header (sent
with every cross-origin POST, ``null`` from an opaque origin); RFC 9110 §15.5 for the statuses (400
malformed, 403 refused, 413 too large, 415 unsupported media type, 422 well-formed but unprocessable).
"""

from __future__ import annotations

import json
import logging

import pytest
import sqlalchemy as sa

from linkfold.api import create_app
from linkfold.dedupe.stage import list_clusters
from linkfold.store import tables as t
from linkfold.store.tokens import create_token
from test_api_support import AsgiClient, settings_for


def _decisions(engine) -> int:
    with engine.connect() as conn:
        return conn.execute(sa.select(sa.func.count()).select_from(t.decisions)).scalar_one()


# --- in process, both backends ---------------------------------------------------------------------------
@pytest.fixture
def api(db_url, engine, tmp_path):
    from test_api_support import build_world

    settings = settings_for(db_url)
    build_world(engine, tmp_path, settings)
    app = create_app(settings, engine=engine)
    read = create_token(engine, scope="read", note="r").secret
    write = create_token(engine, scope="write", note="w").secret
    (article,) = [c.id for c in list_clusters(engine, level="article", min_size=2, limit=10)]
    return {"web": AsgiClient(app), "engine": engine, "read": read, "write": write, "article": article,
            "members": _members(engine, article)}


def _members(engine, cluster_id: str) -> list[str]:
    from linkfold.dedupe.stage import show_cluster

    return [m["url_key"] for m in show_cluster(engine, cluster_id).members]


def _envelope(r, status: int, code: str | None = None) -> None:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/json"), r.headers["content-type"]
    err = r.json()["error"]
    assert set(err) == {"code", "message"} and (code is None or err["code"] == code), err


@pytest.mark.parametrize("origin,referer", [
    ("http://127.0.0.1:1", None), ("null", None), ("http://testserver.example", None),
    ("https://testserver", None),  # same host, another scheme: RFC 6454, another origin (but see below)
    (None, "http://127.0.0.1:1/page"),
])
def test_a_cross_origin_page_post_is_refused_in_process(api, origin, referer):
    web, article = api["web"], api["article"]
    headers = {"Cookie": f"linkfold_token={api['write']}"}
    if origin is not None:
        headers["Origin"] = origin
    if referer is not None:
        headers["Referer"] = referer
    data = {"verdict": "different", "member": api["members"][-1], "by": "someone"}
    before = _decisions(api["engine"])
    r = web.post(f"/clusters/{article}/decide", headers=headers, data=data, token=False)
    if origin == "https://testserver":
        # A TLS proxy in front: the browser's origin is https, the server sees http on the same host and
        # port. Host and port are what tell another origin on this machine apart, so this one passes.
        assert r.status_code == 303
        return
    assert r.status_code == 403 and "another origin" in r.text
    assert _decisions(api["engine"]) == before
    r = web.post("/session", headers={k: v for k, v in headers.items() if k != "Cookie"},
                 data={"token": api["read"]}, token=False)
    assert r.status_code == 403 and "set-cookie" not in r.headers


def test_a_same_origin_page_post_passes(api):
    headers = {"Cookie": f"linkfold_token={api['write']}", "Origin": "http://testserver"}
    data = {"verdict": "different", "member": api["members"][-1], "by": "reviewer"}
    r = api["web"].post(f"/clusters/{api['article']}/decide", headers=headers, data=data, token=False)
    assert r.status_code == 303


def test_pages_send_headers_that_keep_script_and_framing_out(api):
    r = api["web"].get("/", token=False)
    csp = r.headers["content-security-policy"]
    assert "script-src 'none'" in csp and "frame-ancestors 'none'" in csp and "form-action 'self'" in csp
    assert r.headers["x-content-type-options"] == "nosniff"
    assert api["web"].get("/v1/health", token=False).headers["x-content-type-options"] == "nosniff"
    svg = api["web"].get("/charts/cluster-sizes.svg", headers={"Cookie": f"linkfold_token={api['read']}"},
                         token=False)
    assert svg.status_code == 200 and "script-src 'none'" in svg.headers["content-security-policy"]


NUL_REQUESTS = [
    ("/v1/lookup?q=%00", 400), ("/v1/runs?stage=%00", 400), ("/v1/clusters?outlet=%00", 400),
    ("/v1/datasets?x=%00", 400), ("/v1/datasets/a%00b", 404), ("/v1/articles/a%00", 404),
    ("/v1/ids/a%00/history", 404),
]


@pytest.mark.parametrize("path,status", NUL_REQUESTS, ids=[p for p, _ in NUL_REQUESTS])
def test_nul_characters_get_the_envelope_not_a_500(api, path, status):
    # PostgreSQL text cannot hold NUL (a DataError, which was a 500); it is refused on both backends alike:
    # in a query 400, in a path 404 (no name holds one).
    _envelope(api["web"].get(path, token=api["read"]), status, "invalid_request" if status == 400 else "not_found")


@pytest.mark.parametrize("path,status", [("/lookup?q=%00", 400), ("/clusters/a%00", 404),
                                         ("/clusters?outlet=%00", 400), ("/ids/%00", 404)])
def test_nul_characters_on_pages_are_the_error_page_not_a_500(api, path, status):
    r = api["web"].get(path, headers={"Cookie": f"linkfold_token={api['read']}"}, token=False)
    assert r.status_code == status and r.headers["content-type"].startswith("text/html")


def test_nul_in_a_decision_is_refused(api):
    a, b = api["members"][0], api["members"][-1]
    for field in ("decided_by", "note"):
        body = {"verdict": "different", "a": a, "b": b, "decided_by": "coder", field: "x\u0000y"}
        r = api["web"].post("/v1/decisions", json=body, token=api["write"])
        assert r.status_code in (400, 422), r.text
        _envelope(r, r.status_code, "invalid_request")
    form = {"verdict": "different", "member": b, "by": "co\u0000der"}
    r = api["web"].post(f"/clusters/{api['article']}/decide", data=form, token=api["write"])
    assert r.status_code == 400
    assert _decisions(api["engine"]) == 0


DECISION = {"verdict": "different", "a": "x", "b": "y", "decided_by": "coder"}


@pytest.mark.parametrize("content,ctype,status,code", [
    (b"{not json", "application/json", 400, "invalid_request"),
    (b'{"verdict": "different", "a": "x"', "application/json", 400, "invalid_request"),
    (b"[" * 100000, "application/json", 400, "invalid_request"),
    (b'{"a": ' + b"1" * 5000 + b"}", "application/json", 400, "invalid_request"),
    (b"\xff\xfe{", "application/json", 400, "invalid_request"),
    (json.dumps(DECISION).encode(), "text/plain", 415, "unsupported_media_type"),
    (json.dumps(DECISION).encode(), "application/x-www-form-urlencoded", 415, "unsupported_media_type"),
    (json.dumps(DECISION).encode(), None, 415, "unsupported_media_type"),
    (b"[1, 2]", "application/json", 422, "invalid_request"),
])
def test_malformed_bodies_and_wrong_media_types_get_the_envelope(api, content, ctype, status, code):
    headers = {"Content-Type": ctype} if ctype else {}
    r = api["web"].post("/v1/decisions", content=content, headers=headers, token=api["write"])
    _envelope(r, status, code)
    assert _decisions(api["engine"]) == 0


def test_oversized_bodies_get_413(api):
    big = b'{"urls": ["' + b"x" * (9 << 20) + b'"]}'
    _envelope(api["web"].post("/v1/decisions", content=big, headers={"Content-Type": "application/json"},
                              token=api["write"]), 413, "body_too_large")

    async def chunks():  # no Content-Length: counted as it arrives
        for _ in range(12):
            yield b"x" * (1 << 20)

    _envelope(api["web"].post("/v1/lookup", content=chunks(), headers={"Content-Type": "text/plain"},
                              token=api["read"]), 413, "body_too_large")


@pytest.mark.parametrize("path", ["/v1/articles/" + "a" * 41, "/v1/articles/a..b", "/v1/stories/%E2%80%AE",
                                  "/v1/ids/a%2Fb/history", "/v1/runs/abc", "/v1/runs/0", "/v1/runs/99999999999",
                                  "/v1/articles/a2222222222222", "/v1/ids/s2222222222222/history",
                                  "/v1/datasets/" + "d" * 201])
def test_odd_ids_get_a_4xx_envelope(api, path):
    r = api["web"].get(path, token=api["read"])
    assert 400 <= r.status_code < 500
    _envelope(r, r.status_code)


def test_a_read_token_never_writes(api, caplog):
    caplog.set_level(logging.INFO, logger="linkfold")
    read = api["read"]
    a, b = api["members"][0], api["members"][-1]
    body = {"verdict": "different", "a": a, "b": b, "decided_by": "coder"}
    _envelope(api["web"].post("/v1/decisions", json=body, token=read), 403, "insufficient_scope")
    r = api["web"].post(f"/clusters/{api['article']}/decide", headers={"Cookie": f"linkfold_token={read}"},
                        data={"verdict": "different", "member": b, "by": "coder"}, token=False)
    assert r.status_code == 403
    r = api["web"].post(f"/clusters/{api['article']}/decide", data={"verdict": "same", "member": b, "by": "c"},
                        token=read)
    assert r.status_code == 403
    assert _decisions(api["engine"]) == 0
    # Every write route of the document, with the read token: 403 each (new write routes are caught here).
    schema = api["web"].get("/v1/openapi.json", token=False).json()
    writes = [(m.upper(), p) for p, ops in schema["paths"].items() for m in ops if m in ("post", "put", "patch",
                                                                                          "delete")]
    assert ("POST", "/v1/decisions") in writes
    for method, path in writes:
        if path == "/v1/lookup":
            continue  # a batch read, sent as POST for its body
        r = api["web"].request(method, path, json=body, token=read)
        _envelope(r, 403, "insufficient_scope")
    assert _decisions(api["engine"]) == 0
    text = "\n".join(rec.getMessage() for rec in caplog.records)
    assert "access refused" in text and read not in text


def test_refusals_are_logged_without_the_secrets(api, caplog):
    caplog.set_level(logging.DEBUG)
    web, read, write = api["web"], api["read"], api["write"]
    wrong = "lf_" + "q" * 40
    web.get("/v1/datasets", token=wrong)
    web.get("/v1/datasets", headers={"Authorization": f"Basic {write}"}, token=False)
    web.post("/session", data={"token": wrong}, token=False)
    web.post("/session", data={"token": read}, headers={"Origin": "http://127.0.0.1:1"}, token=False)
    web.post(f"/clusters/{api['article']}/decide", headers={"Cookie": f"linkfold_token={write}",
                                                           "Origin": "http://127.0.0.1:1"},
             data={"verdict": "same", "member": "x", "by": "c"}, token=False)
    web.post("/v1/decisions", json={"verdict": "same"}, token=read)
    records = [rec.getMessage() + " " + repr(rec.args) for rec in caplog.records]
    assert sum("refused" in r for r in records) >= 5
    for secret in (read, write, wrong):
        assert not [r for r in records if secret in r]
