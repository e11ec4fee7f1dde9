"""The evidence store on its own, on both backends: URL registration, link de-duplication, outcome modes."""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime, timedelta

import sqlalchemy as sa

from linkfold.canon import canonicalize
from linkfold.store import evidence as ev
from linkfold.store import tables as t

A = "https://short.test/a1?utm_source=feed"
B = "https://northvale-herald.example/news/2026/03/bridge-reopens"


def test_raw_hash_is_the_one_ingest_uses():
    from linkfold.ingest.rows import raw_hash as ingest_hash

    for text in (A, B, "https://bücher.example/ü", " https://spaced.test/ "):
        # tables.py: raw_hash is the SHA-256 hex of the UTF-8 text (hashlib as the reference).
        assert ev.raw_hash(text) == ingest_hash(text) == hashlib.sha256(text.encode()).hexdigest()


def test_register_urls_is_idempotent_and_keeps_the_raw_text(engine):
    with engine.begin() as conn:
        first = ev.register_urls(conn, [(A, canonicalize(A)), (B, canonicalize(B))], ruleset_id=None)
        again = ev.register_urls(conn, [(A, canonicalize(A))], ruleset_id=None)
        assert again[A] == first[A]
        assert conn.execute(sa.select(t.raw_urls.c.raw).where(t.raw_urls.c.id == first[A].raw_id)).scalar_one() == A
        assert conn.execute(sa.select(sa.func.count()).select_from(t.raw_urls)).scalar_one() == 2
        assert conn.execute(sa.select(t.canonical_urls.c.url).where(
            t.canonical_urls.c.id == first[A].canonical_id)).scalar_one() == canonicalize(A).url


def test_unstorable_text_is_replaced_not_refused(engine):
    raw = "https://short.test/a\x00b"
    with engine.begin() as conn:
        ids = ev.register_urls(conn, [(raw, canonicalize("https://short.test/a%00b"))], ruleset_id=None)
    assert list(ids) == ["https://short.test/a\ufffdb"]


def test_links_are_stored_once_per_source(engine):
    now = datetime.now(UTC)
    with engine.begin() as conn:
        ids = ev.register_urls(conn, [(A, canonicalize(A)), (B, canonicalize(B))], ruleset_id=None)
        row = {"kind": "redirect", "src_id": ids[A].canonical_id, "dst_id": ids[B].canonical_id, "status": 301,
               "hop": 1, "source": "fetched", "detail": {"method": "HEAD"}, "run_id": None, "created_at": now}
        assert ev.add_links(conn, [row, dict(row)]) == 1
        assert ev.add_links(conn, [row]) == 0
        assert ev.add_links(conn, [{**row, "source": "import:pairs.csv"}]) == 1
        stored = ev.links_of(conn, ids[B].canonical_id)
        assert [x["source"] for x in stored] == ["fetched", "import:pairs.csv"]
        assert stored[0]["detail"] == {"method": "HEAD"}


def test_outcome_modes(engine):
    at = datetime(2026, 3, 1, tzinfo=UTC)
    with engine.begin() as conn:
        ids = ev.register_urls(conn, [(A, canonicalize(A)), (B, canonicalize(B))], ruleset_id=None)
        a, b = ids[A].canonical_id, ids[B].canonical_id
        ev.record_outcomes(conn, [ev.Outcome(b, "resolved", "chain", at, hops=0, final_id=b)], run_id=None,
                           replace="learned")
        learned = ev.follow_result(conn, b)
        assert learned["attempts"] == 0 and learned["via"] == "chain"
        assert ev.follow_attempts_of(conn, b) == []  # learned outcomes are no attempts
        ev.record_outcomes(conn, [ev.Outcome(b, "failed", "fetched", at + timedelta(hours=1),
                                             failure="timeout")], run_id=None)
        own = ev.follow_result(conn, b)
        assert own["via"] == "fetched" and own["attempts"] == 1 and own["first_attempt_at"] == at
        # A later chain never overwrites the URL's own outcome.
        ev.record_outcomes(conn, [ev.Outcome(b, "resolved", "chain", at, hops=0)], run_id=None, replace="learned")
        assert ev.follow_result(conn, b)["state"] == "failed"
        ev.record_outcomes(conn, [ev.Outcome(a, "resolved", "imported", at, final_id=b, hops=1)], run_id=None,
                           replace="unresolved")
        assert ev.follow_result(conn, a)["via"] == "imported"
        # No dataset holds A or B: the report counts the links datasets hold (tests/test_follow_report.py).
        assert ev.follow_totals(conn) == {"held": 0, "resolved": 0, "failed": {}, "refused": {}, "refusals": {}}
