"""Access rules of the API, checked against RFC 6750 (bearer tokens) §2.1 and §3, on both backends."""

from __future__ import annotations

import logging

import pytest

from linkfold.api import create_app
from linkfold.store.tokens import create_token, list_tokens, revoke_token
from test_api_support import AsgiClient, settings_for

DECISION = {"verdict": "same", "a": "https://a.example/1", "b": "https://a.example/2", "decided_by": "t"}


@pytest.fixture
def tokens(engine):
    read = create_token(engine, scope="read", note="reader")
    write = create_token(engine, scope="write", note="writer")
    gone = create_token(engine, scope="write", note="left the lab")
    revoke_token(engine, gone.id)
    return {"read": read.secret, "write": write.secret, "revoked": gone.secret}


def _client(db_url, engine, **overrides) -> AsgiClient:
    return AsgiClient(create_app(settings_for(db_url, **overrides), engine=engine))


def _error(r) -> str:
    return r.json()["error"]["code"]


def test_no_token_is_401_with_a_bare_bearer_challenge(db_url, engine, tokens):
    api = _client(db_url, engine)
    r = api.get("/v1/datasets")
    assert r.status_code == 401 and _error(r) == "unauthorized"
    # RFC 6750 §3.1: a request without any authentication information gets no error code in the challenge.
    assert r.headers["www-authenticate"] == 'Bearer realm="linkfold"'


@pytest.mark.parametrize("header", ["Bearer lf_not-a-real-token", "Bearer", "Basic dXNlcjpwYXNz",
                                    "lf_no_scheme"])
def test_unknown_or_malformed_token_is_401_invalid_token(db_url, engine, tokens, header):
    r = _client(db_url, engine).get("/v1/datasets", headers={"Authorization": header})
    assert r.status_code == 401 and _error(r) == "unauthorized"
    assert 'error="invalid_token"' in r.headers["www-authenticate"]


def test_revoked_token_is_401_invalid_token(db_url, engine, tokens):
    r = _client(db_url, engine).get("/v1/datasets", token=tokens["revoked"])
    # RFC 6750 §3.1 lists "revoked" among the reasons for invalid_token, answered with 401.
    assert r.status_code == 401 and _error(r) == "token_revoked"
    assert 'error="invalid_token"' in r.headers["www-authenticate"]


def test_scheme_name_is_case_insensitive(db_url, engine, tokens):
    # RFC 9110 §11.1: the authentication scheme is a case-insensitive token.
    r = _client(db_url, engine).get("/v1/datasets", headers={"Authorization": f"bearer {tokens['read']}"})
    assert r.status_code == 200


def test_read_token_reads_but_cannot_write(db_url, engine, tokens):
    api = _client(db_url, engine)
    assert api.get("/v1/datasets", token=tokens["read"]).status_code == 200
    r = api.post("/v1/decisions", token=tokens["read"], json=DECISION)
    assert r.status_code == 403 and _error(r) == "insufficient_scope"


def test_write_token_reads_and_reaches_the_write_route(db_url, engine, tokens):
    api = _client(db_url, engine)
    assert api.get("/v1/datasets", token=tokens["write"]).status_code == 200
    r = api.post("/v1/decisions", token=tokens["write"], json=DECISION)
    # Past the token check: the URLs are not in this empty registry.
    assert r.status_code == 404 and _error(r) == "not_found"


def test_open_reads_answer_without_token_but_writes_stay_closed(db_url, engine, tokens):
    api = _client(db_url, engine, open_reads=True)
    assert api.get("/v1/datasets").status_code == 200
    assert api.post("/v1/lookup", json={"urls": ["https://a.example/"]}).status_code == 200
    # A token that is presented is still checked, so a client learns early that it is wrong.
    assert api.get("/v1/datasets", token=tokens["revoked"]).status_code == 401
    r = api.post("/v1/decisions", json=DECISION)
    assert r.status_code == 401 and _error(r) == "unauthorized"
    assert api.post("/v1/decisions", token=tokens["read"], json=DECISION).status_code == 403


def test_token_in_the_query_string_is_not_accepted(db_url, engine, tokens):
    # RFC 6750 §2.3 allows access_token in the URI but warns against it; we do not take it at all.
    r = _client(db_url, engine).get("/v1/datasets", params={"access_token": tokens["read"]})
    assert r.status_code == 401


def test_health_and_openapi_need_no_token(db_url, engine):
    api = _client(db_url, engine)
    assert api.get("/v1/health").status_code == 200
    assert api.get("/v1/openapi.json").status_code == 200


def test_refusals_are_logged_without_the_token(db_url, engine, tokens, caplog):
    api = _client(db_url, engine)
    caplog.set_level(logging.WARNING, logger="linkfold")
    api.get("/v1/datasets", token=tokens["revoked"])
    api.get("/v1/datasets", token="lf_guessed-token-value")
    api.post("/v1/decisions", token=tokens["read"], json=DECISION)
    api.get("/v1/datasets")
    refused = [r.getMessage() for r in caplog.records if "access refused" in r.getMessage()]
    assert len(refused) == 4
    assert any("revoked token" in m for m in refused) and any("unknown token" in m for m in refused)
    assert any("read token on a write route" in m for m in refused) and any("no token" in m for m in refused)
    text = "\n".join(r.getMessage() for r in caplog.records)
    for secret in (*tokens.values(), "lf_guessed-token-value"):
        assert secret not in text


def test_use_refreshes_last_used(db_url, engine, tokens):
    _client(db_url, engine).get("/v1/datasets", token=tokens["read"])
    with engine.connect() as conn:
        rows = {r["note"]: r for r in list_tokens(conn)}
    assert rows["reader"]["last_used_at"] is not None and rows["writer"]["last_used_at"] is None
