"""API tokens in the registry: hashed storage, scopes, revocation, and the tokens CLI (both backends)."""

from __future__ import annotations

import base64
import hashlib
import json

import pytest
import sqlalchemy as sa

from linkfold.cli import main
from linkfold.errors import InputError, NotFound
from linkfold.store import tables as t
from linkfold.store.tokens import (
    TOKEN_PREFIX,
    Scope,
    TokenState,
    check_token,
    create_token,
    hash_token,
    list_tokens,
    revoke_token,
)


def test_token_is_random_urlsafe_and_stored_only_as_its_sha256(engine):
    new = create_token(engine, scope="read", note="survey project")
    body = new.secret.removeprefix(TOKEN_PREFIX)
    # RFC 4648 §5: the URL- and filename-safe base64 alphabet; 32 bytes encode to 43 characters unpadded.
    assert len(body) == 43
    assert len(base64.urlsafe_b64decode(body + "=")) == 32
    with engine.connect() as conn:
        stored = conn.execute(sa.select(t.api_tokens)).mappings().one()
    # FIPS 180-4 SHA-256 as computed by hashlib, the reference implementation here.
    assert stored["token_sha256"] == hashlib.sha256(new.secret.encode()).hexdigest() == hash_token(new.secret)
    assert new.secret not in json.dumps({k: str(v) for k, v in stored.items()})
    assert stored["scope"] == "read" and stored["note"] == "survey project"


def test_two_tokens_differ(engine):
    a = create_token(engine, scope="read", note="a")
    b = create_token(engine, scope="read", note="b")
    assert a.secret != b.secret


def test_check_valid_unknown_revoked_and_last_use(engine):
    new = create_token(engine, scope="write", note="coder")
    check = check_token(engine, new.secret)
    assert check.state is TokenState.VALID and check.scope is Scope.WRITE and check.token_id == new.id
    [row] = list_tokens(engine.connect())
    assert row["last_used_at"] is not None
    assert check_token(engine, new.secret + "x").state is TokenState.UNKNOWN
    assert check_token(engine, "not-even-ours").state is TokenState.UNKNOWN
    revoked = revoke_token(engine, new.id)
    assert revoked["revoked_at"] is not None
    assert check_token(engine, new.secret).state is TokenState.REVOKED
    # Revoking again keeps the first revocation time.
    assert revoke_token(engine, new.id)["revoked_at"] == revoked["revoked_at"]


def test_write_scope_includes_read():
    assert Scope.WRITE.allows(Scope.READ) and Scope.WRITE.allows(Scope.WRITE)
    assert Scope.READ.allows(Scope.READ) and not Scope.READ.allows(Scope.WRITE)


def test_unit_rows_need_their_own_scope():
    # Unit-level rows are personal data: only a units token gets them; it also reads, but does not write.
    assert Scope.UNITS.allows(Scope.UNITS) and Scope.UNITS.allows(Scope.READ)
    assert not Scope.UNITS.allows(Scope.WRITE)
    assert not Scope.READ.allows(Scope.UNITS) and not Scope.WRITE.allows(Scope.UNITS)


@pytest.mark.parametrize(("scope", "note"), [("admin", "x"), ("read", "  "), ("read", "n" * 501)])
def test_bad_scope_or_note_is_refused_and_nothing_stored(engine, scope, note):
    with pytest.raises(InputError):
        create_token(engine, scope=scope, note=note)
    with engine.connect() as conn:
        assert list_tokens(conn) == []


def test_revoke_unknown_id(engine):
    with pytest.raises(NotFound):
        revoke_token(engine, 999)


def test_tokens_cli_create_list_revoke(db_url, capsys):
    assert main(["--db", db_url, "tokens", "create", "--scope", "write", "--note", "coding team"]) == 0
    out, err = capsys.readouterr()
    created = json.loads(out)
    assert created["token"].startswith(TOKEN_PREFIX) and created["scope"] == "write"
    assert "shown once" in err
    assert main(["--db", db_url, "tokens", "list", "--format", "jsonl"]) == 0
    out, _ = capsys.readouterr()
    listed = [json.loads(line) for line in out.splitlines()]
    assert [r["id"] for r in listed] == [created["id"]]
    # Listing never shows the token or its hash.
    assert created["token"] not in out and hash_token(created["token"]) not in out
    assert main(["--db", db_url, "tokens", "revoke", str(created["id"])]) == 0
    capsys.readouterr()
    assert main(["--db", db_url, "tokens", "list", "--format", "jsonl"]) == 0
    out, _ = capsys.readouterr()
    assert json.loads(out)["revoked_at"] is not None
    assert main(["--db", db_url, "tokens", "revoke", "12345"]) == NotFound.exit_code
    assert main(["--db", db_url, "tokens", "create", "--scope", "admin", "--note", "x"]) == 2
