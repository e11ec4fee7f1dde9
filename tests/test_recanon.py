"""Re-canonicalisation under a new ruleset: new canonical rows, an old→new mapping, nothing deleted."""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime

import sqlalchemy as sa

from linkfold.canon import parse_rules
from linkfold.ingest.recanon import count_pending, recanonicalize
from linkfold.store import tables as t
from linkfold.store.rulesets import latest_ruleset, store_ruleset

RAWS = [
    "https://www.daily.example/news/bridge?utm_source=x",
    "http://daily.example/news/bridge",
    "https://m.daily.example/news/bridge#top",
    "javascript:alert(1)",
]


def _insert_raw(engine, raws):
    now = datetime.now(UTC)
    with engine.begin() as conn:
        conn.execute(t.raw_urls.insert(), [
            {"raw_hash": hashlib.sha256(r.encode()).hexdigest(), "raw": r, "created_at": now} for r in raws])


def _pointers(engine):
    with engine.connect() as conn:
        rows = conn.execute(sa.select(t.raw_urls.c.raw, t.canonical_urls.c.url, t.raw_urls.c.reason)
                            .select_from(t.raw_urls.outerjoin(t.canonical_urls))
                            .order_by(t.raw_urls.c.id)).all()
    return [(r.raw, r.url, r.reason) for r in rows]


def test_new_ruleset_moves_raw_urls_and_records_the_mapping(engine):
    _insert_raw(engine, RAWS)
    with engine.begin() as conn:
        latest_ruleset(conn)  # stores the default as version 1
    assert count_pending(engine) == 4
    first = recanonicalize(engine, batch_size=2)
    assert first.examined == 4 and first.new_canonical == 1 and first.errors["not_http"] == 1
    assert {url for _raw, url, _e in _pointers(engine)} == {"https://daily.example/news/bridge", None}
    assert count_pending(engine) == 0

    # A lab decides mobile and www hosts are separate sites: a new ruleset version.
    with engine.begin() as conn:
        v2 = store_ruleset(conn, parse_rules("name = 'lab'\n[steps]\nhost_prefixes = false\n"))
    assert v2 == 2 and count_pending(engine) == 4
    second = recanonicalize(engine, batch_size=3)
    assert second.moved == 2 and second.unchanged == 2 and second.new_canonical == 2
    assert _pointers(engine)[:3] == [
        (RAWS[0], "https://www.daily.example/news/bridge", None),
        (RAWS[1], "https://daily.example/news/bridge", None),
        (RAWS[2], "https://m.daily.example/news/bridge", None),
    ]
    with engine.connect() as conn:
        changes = conn.execute(sa.select(t.canon_changes).where(t.canon_changes.c.ruleset_id == 2)).all()
        assert len(changes) == 2
        assert all(c.old_canonical_id is not None and c.new_canonical_id != c.old_canonical_id for c in changes)
        # Nothing is deleted: the first canonical row is still there.
        assert conn.execute(sa.select(sa.func.count()).select_from(t.canonical_urls)).scalar_one() == 3

    # A rerun with nothing new changes nothing.
    third = recanonicalize(engine)
    assert third.examined == 0 and count_pending(engine) == 0


def test_the_command_prints_the_summary_the_run_log_keeps(db_url, engine, capsys):
    import json

    from linkfold.cli import main
    from linkfold.store.runs import show_run

    _insert_raw(engine, RAWS)
    assert main(["--db", db_url, "recanonicalize", "--format", "json"]) == 0
    out, err = capsys.readouterr()
    printed = json.loads(out)
    assert printed["examined"] == 4 and printed["invalid_by_reason"] == {"not_http": 1}
    assert show_run(engine, printed["run_id"])["counts"] == printed  # the CLI's JSON is the run's counts
    assert "re-canonicalised under ruleset 1: 4 raw URLs" in err  # the summary's lines, on stderr

    # Quiet: nothing on stderr, and a second run finds nothing pending but still says so in its summary.
    assert main(["--db", db_url, "-q", "recanonicalize"]) == 0
    out, err = capsys.readouterr()
    assert out == "" and err == ""
    assert main(["--db", db_url, "recanonicalize"]) == 0
    assert "nothing pending" in capsys.readouterr().err
