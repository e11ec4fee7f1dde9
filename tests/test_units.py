"""Units: keyed pseudonyms (HMAC-SHA256) and how a load carries them without ever storing a raw unit ID.

HMAC is checked against the RFC 4231 test vectors, the text encoding against RFC 4648's base32 vectors,
and a stored pseudonym against Python's own ``hmac`` and ``base64`` (general-purpose reference
libraries). The promise that no raw ID reaches the registry is checked by scanning what was stored: the
SQLite file's bytes (with its write-ahead log), every text column of every table on PostgreSQL.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import io
import json
import sys
from pathlib import Path

import pytest
import sqlalchemy as sa

from linkfold.cli import main
from linkfold.errors import ConfigError
from linkfold.ingest import ingest_dump
from linkfold.pseudonyms import (
    Pseudonymiser,
    encode_mac,
    fingerprint,
    hmac_sha256,
    key_from_settings,
    require_key,
    unit_text,
)
from linkfold.settings import load_settings
from linkfold.store import tables as t

KEY = b"an invented lab key, 32 bytes long or more"

# RFC 4231 §4.2-4.8: the HMAC-SHA-256 results of test cases 1-7 (case 5 is truncated to 128 bits).
RFC4231 = [
    ("case 1", b"\x0b" * 20, b"Hi There",
     "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"),
    ("case 2", b"Jefe", b"what do ya want for nothing?",
     "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"),
    ("case 3", b"\xaa" * 20, b"\xdd" * 50,
     "773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe"),
    ("case 4", bytes(range(1, 26)), b"\xcd" * 50,
     "82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b"),
    ("case 5", b"\x0c" * 20, b"Test With Truncation", "a3b6167473100ee06e0c796c2955552b"),
    ("case 6", b"\xaa" * 131, b"Test Using Larger Than Block-Size Key - Hash Key First",
     "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54"),
    ("case 7", b"\xaa" * 131, b"This is a test using a larger than block-size key and a larger than block-size data. "
                              b"The key needs to be hashed before being used by the HMAC algorithm.",
     "9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2"),
]


@pytest.mark.parametrize("case, key, data, want", RFC4231, ids=[c[0] for c in RFC4231])
def test_hmac_sha256_gives_the_rfc4231_results(case, key, data, want):
    # RFC 4231 §4: HMAC-SHA-256 test vectors (case 5 compares the leftmost 128 bits, as §4.6 says).
    assert hmac_sha256(key, data).hex()[:len(want)] == want


@pytest.mark.parametrize("data, want", [(b"", ""), (b"f", "my"), (b"fo", "mzxq"), (b"foo", "mzxw6"),
                                        (b"foob", "mzxw6yq"), (b"fooba", "mzxw6ytb"), (b"foobar", "mzxw6ytboi")])
def test_the_text_form_is_rfc4648_base32_lower_case_without_padding(data, want):
    # RFC 4648 §10 test vectors ("MZXW6YTBOI======" for "foobar"), in lower case with the "=" removed.
    assert encode_mac(data) == "hs256:" + want


def test_a_pseudonym_is_the_full_hmac_of_the_trimmed_id_in_utf8():
    # Against Python's hmac and base64 modules (reference implementations), not our helpers.
    ref = base64.b32encode(hmac.new(KEY, "panelist é-7".encode(), hashlib.sha256).digest()).decode().rstrip("=")
    p = Pseudonymiser(KEY, cache_size=16)
    assert p("panelist é-7") == "hs256:" + ref.lower()
    assert len(p("x")) == len("hs256:") + 52
    for i in range(100):  # the bounded cache never changes an answer
        assert p(f"u{i % 37}") == encode_mac(hmac_sha256(KEY, f"u{i % 37}".encode()))
    assert "an invented" not in repr(p)


@pytest.mark.parametrize("value, want", [(" p1 ", "p1"), ("", None), ("  ", None), (None, None), (12, "12"),
                                         (1.5, "1.5"), (True, "true"), ("é", "é")])
def test_what_a_unit_value_is_pseudonymised_from(value, want):
    assert unit_text(value) == want


def test_a_json_object_is_no_unit():
    with pytest.raises(ValueError, match="dict"):
        unit_text({"id": 1})


def _settings(**values):
    return load_settings(overrides=values, environ={})


def test_the_key_comes_from_one_setting_and_is_long_enough(tmp_path):
    assert key_from_settings(_settings()) is None
    assert key_from_settings(_settings(pseudonym_key=KEY.decode())) == KEY
    keyfile = tmp_path / "lab.key"
    keyfile.write_bytes(KEY + b"\n")
    assert key_from_settings(_settings(pseudonym_key_file=str(keyfile))) == KEY  # one line end removed
    with pytest.raises(ConfigError, match="give one"):
        key_from_settings(_settings(pseudonym_key=KEY.decode(), pseudonym_key_file=str(keyfile)))
    with pytest.raises(ConfigError, match="at least 32") as short:
        key_from_settings(_settings(pseudonym_key="short secret"))
    assert "short secret" not in str(short.value)  # an error never shows the key
    with pytest.raises(ConfigError, match="pseudonym_key_file"):
        key_from_settings(_settings(pseudonym_key_file=str(tmp_path / "missing.key")))
    with pytest.raises(ConfigError, match="LINKFOLD_PSEUDONYM_KEY"):
        require_key(_settings())


# --- loads ---------------------------------------------------------------------------------------------------
# Raw unit IDs shaped so that no other stored text can contain them by accident.
def _uid(i: int) -> str:
    return f"RAWUNIT{i:04d}Q"


def _panel(tmp_path, n: int = 300):
    path = tmp_path / "panel.csv"
    lines = ["visit,url,when,person,email"]
    for i in range(n):
        person = "" if i % 29 == 0 else _uid(i % 17)
        lines.append(f"v{i},https://www.daily-harbour.example/2031/05/story-{i % 11},2031-05-{1 + i % 28:02d}T08:00:00Z,"
                     f"{person},someone{i}@mail.test")
    # Broken rows that hold a unit ID: an unterminated quote, a row of the wrong width.
    lines.append(f'v900,"https://www.daily-harbour.example/broken,2031-05-04T08:00:00Z,{_uid(900)},x@mail.test')
    lines.append(f"v901,https://www.daily-harbour.example/w,2031-05-04T08:00:00Z,{_uid(901)}")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    posts = tmp_path / "posts.jsonl"
    records = [json.dumps({"id": f"p{i}", "author": {"handle": _uid(500 + i % 5)},
                           "links": [{"url": f"https://harbour-gazette.example/news/{i % 4}"}]}) for i in range(40)]
    records.append('{"id": "p99", "author": {"handle": "' + _uid(999) + '"}, "links": [')  # broken JSON
    records.append(json.dumps({"id": "p98", "author": {"handle": {"nested": _uid(998)}},
                               "links": [{"url": "https://harbour-gazette.example/news/9"}]}))
    posts.write_text("\n".join(records) + "\n", encoding="utf-8")
    return path, posts


def _raw_ids() -> list[str]:
    return [_uid(i) for i in (*range(17), *range(500, 505), 900, 901, 998, 999)]


def _text_columns(conn) -> list[tuple[str, str]]:
    return [tuple(r) for r in conn.execute(sa.text(
        "SELECT table_name, column_name FROM information_schema.columns WHERE table_schema = 'public' "
        "AND data_type IN ('text', 'character varying', 'json', 'jsonb', 'character')"))]


def test_raw_unit_ids_appear_nowhere_in_the_registry(engine, db_url, tmp_path):
    panel, posts = _panel(tmp_path)
    summary = ingest_dump(engine, [panel], dataset="panel", key_column="visit", time_column="when",
                          unit_column="person", pseudonym_key=KEY, batch_size=64)
    ingest_dump(engine, [posts], dataset="posts", key_column="id", unit_column="author.handle", url_column="links.*.url",
                pseudonym_key=KEY, batch_size=16)
    assert summary.rejects["missing_unit"] == 11  # rows 0, 29, …, 290: stored with an empty unit
    with engine.connect() as conn:
        units = conn.execute(sa.select(t.sightings.c.unit)).scalars().all()
        assert {u for u in units if u} == {Pseudonymiser(KEY)(u) for u in _raw_ids()[:22]}
        assert sum(u is None for u in units) == 11 + 1  # the missing ones and the post whose handle is an object
        rejects = conn.execute(sa.select(t.rejects.c.reason, t.rejects.c.position, t.rejects.c.excerpt)).all()
        assert {r.reason for r in rejects} >= {"missing_unit", "bad_unit", "malformed_csv", "missing_column",
                                               "bad_json"}
        assert all(r.excerpt is None for r in rejects)  # a broken row's text would hold its unit ID
        assert {r.position for r in rejects if r.reason in ("missing_unit", "bad_unit")} == {-3}
        options = conn.execute(sa.select(t.dataset_files.c.options)).scalars().all()
        assert {o["unit_column"] for o in options} == {"person", "author.handle"}
        if engine.dialect.name == "postgresql":
            for table, column in _text_columns(conn):
                for raw in _raw_ids():
                    hits = conn.execute(sa.text(f'SELECT count(*) FROM "{table}" WHERE "{column}"::text LIKE :p'),
                                        {"p": f"%{raw}%"}).scalar_one()
                    assert hits == 0, (table, column, raw)
    if engine.dialect.name == "sqlite":
        # Every byte SQLite wrote: the database file and, while connections are open, its log.
        db_file = Path(db_url.removeprefix("sqlite:///"))
        names = [db_file, db_file.with_name(db_file.name + "-wal"), db_file.with_name(db_file.name + "-shm")]
        blobs = [p.read_bytes() for p in names if p.exists()]
        engine.dispose()
        blobs.append(db_file.read_bytes())
        for raw in _raw_ids():
            for blob in blobs:
                assert raw.encode() not in blob and raw.encode("utf-16-le") not in blob
        assert any(Pseudonymiser(KEY)(_uid(0)).encode() in b for b in blobs)  # the scan does see stored text


def _counts(engine) -> dict[str, int]:
    with engine.connect() as conn:
        return {tb.name: conn.execute(sa.select(sa.func.count()).select_from(tb)).scalar_one()
                for tb in (t.datasets, t.dataset_files, t.sightings, t.rejects, t.raw_urls, t.runs, t.pseudonym_keys)}


def test_a_unit_column_without_a_key_is_refused_before_anything_is_written(engine, tmp_path):
    panel, _ = _panel(tmp_path, 20)
    before = _counts(engine)
    with pytest.raises(ConfigError, match="pseudonym key"):
        ingest_dump(engine, [panel], dataset="panel", unit_column="person")
    assert _counts(engine) == before


def test_the_unit_column_cannot_be_stored_as_a_key_time_or_url_too(engine, tmp_path):
    panel, _ = _panel(tmp_path, 20)
    with pytest.raises(ConfigError, match="--key-column"):
        ingest_dump(engine, [panel], dataset="panel", key_column="person", unit_column="person", pseudonym_key=KEY)
    with pytest.raises(ConfigError, match="--url-column"):
        ingest_dump(engine, [panel], dataset="panel", url_column="person", unit_column="person",
                    pseudonym_key=KEY)


def test_a_load_under_another_key_is_refused(engine, tmp_path):
    panel, posts = _panel(tmp_path, 20)
    ingest_dump(engine, [panel], dataset="panel", unit_column="person", pseudonym_key=KEY)
    with engine.connect() as conn:
        assert conn.execute(sa.select(t.pseudonym_keys.c.fingerprint)).scalar_one() == fingerprint(KEY)
    before = _counts(engine)
    with pytest.raises(ConfigError, match="another key"):
        ingest_dump(engine, [posts], dataset="posts", unit_column="author.handle", url_column="links.*.url",
                    pseudonym_key=b"z" * 32)
    assert _counts(engine) == before
    # Loads without units need no key and are never refused for one.
    (tmp_path / "more.txt").write_text("https://a.example/1\n")
    ingest_dump(engine, [tmp_path / "more.txt"], dataset="plain")


def test_pseudonymise_prints_what_a_load_stores(db_url, tmp_path, capsys, monkeypatch):
    panel, _ = _panel(tmp_path, 40)
    monkeypatch.setenv("LINKFOLD_PSEUDONYM_KEY", KEY.decode())
    assert main(["--db", db_url, "datasets", "load", str(panel), "--dataset", "panel", "--unit-column", "person", "-q"]) == 0
    assert capsys.readouterr().err == ""
    monkeypatch.setattr(sys, "stdin", io.StringIO(f"{_uid(3)}\n  {_uid(4)}\r\n\n"))
    assert main(["--db", db_url, "pseudonymise", "--check"]) == 0
    out = capsys.readouterr()
    got = [json.loads(x) for x in out.out.splitlines()]
    assert [g["input"] for g in got] == [_uid(3), f"  {_uid(4)}", ""]
    assert got[2]["pseudonym"] is None
    assert fingerprint(KEY) in out.err
    from linkfold.store import make_engine
    eng = make_engine(db_url)
    with eng.connect() as conn:
        stored = set(conn.execute(sa.select(t.sightings.c.unit)).scalars())
    eng.dispose()
    assert {got[0]["pseudonym"], got[1]["pseudonym"]} <= stored
    monkeypatch.setenv("LINKFOLD_PSEUDONYM_KEY", "y" * 40)
    monkeypatch.setattr(sys, "stdin", io.StringIO("a\n"))
    assert main(["--db", db_url, "pseudonymise", "--check"]) == 3
    assert "another key" in capsys.readouterr().err


def test_the_quick_base32_of_a_mac_is_the_standard_librarys():
    # Python's base64 (a reference implementation of RFC 4648 §6) on random 32-byte values.
    import os

    from linkfold.pseudonyms import _b32_of_32

    for mac in [bytes(32), b"\xff" * 32, *(os.urandom(32) for _ in range(2000))]:
        assert _b32_of_32(mac) == base64.b32encode(mac).decode().rstrip("=").lower()


def test_a_unit_path_no_record_has_is_refused_before_loading(engine, tmp_path):
    from linkfold.errors import MissingColumnError

    _, posts = _panel(tmp_path, 5)
    before = _counts(engine)
    with pytest.raises(MissingColumnError, match=r"author\.hnadle"):
        ingest_dump(engine, [posts], dataset="posts", url_column="links.*.url", unit_column="author.hnadle",
                    pseudonym_key=KEY)
    assert _counts(engine) == before
