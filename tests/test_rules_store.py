"""The ruleset registry on both backends."""

from __future__ import annotations

import pytest
import sqlalchemy as sa

from linkfold.canon import CANON_VERSION, PSL_VERSION, canonicalize, default_rules, parse_rules
from linkfold.errors import NotFound
from linkfold.store import rulesets as registry
from linkfold.store.tables import rulesets

LAB = "name = 'lab'\n[site.'daily.example']\nkeep_params = ['id']\ndrop_unlisted_params = true\n"


def test_latest_stores_the_defaults_as_version_1(engine) -> None:
    with engine.begin() as conn:
        version, ruleset = registry.latest_ruleset(conn)
        assert version == 1
        assert ruleset.digest == default_rules().digest
        assert registry.latest_ruleset(conn)[0] == 1  # not stored twice


def test_store_is_idempotent_by_digest(engine) -> None:
    lab = parse_rules(LAB)
    with engine.begin() as conn:
        first = registry.store_ruleset(conn, lab)
        again = registry.store_ruleset(conn, parse_rules("# same rules\n" + LAB))
        other = registry.store_ruleset(conn, parse_rules("[steps]\namp = false\n"))
    assert first == again != other
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(rulesets)).scalar() == 2


def test_round_trip_gives_the_same_canonical_urls(engine) -> None:
    lab = parse_rules(LAB, source="lab.toml")
    with engine.begin() as conn:
        version = registry.store_ruleset(conn, lab, name="lab rules v1")
    with engine.connect() as conn:
        back = registry.get_ruleset(conn, version)
        row = conn.execute(sa.select(rulesets).where(rulesets.c.id == version)).mappings().one()
    assert back.digest == lab.digest and back.source == LAB and back.name == "lab rules v1"
    assert (row["canon_version"], row["psl_version"]) == (CANON_VERSION, PSL_VERSION)
    raw = "http://www.daily.example/a?id=7&page=2"
    assert canonicalize(raw, back).url == canonicalize(raw, lab).url == "https://daily.example/a?id=7"


def test_list_and_latest(engine) -> None:
    with engine.begin() as conn:
        registry.latest_ruleset(conn)
        v2 = registry.store_ruleset(conn, parse_rules(LAB))
        rows = registry.list_rulesets(conn)
        latest, _ = registry.latest_ruleset(conn)
    assert [r["version"] for r in rows] == [1, v2] and latest == v2
    assert all(r["current"] for r in rows)
    assert rows[1]["name"] == "lab" and "source" not in rows[1]


def test_unknown_version_is_not_found(engine) -> None:
    with engine.connect() as conn, pytest.raises(NotFound):
        registry.get_ruleset(conn, 42)


def test_store_inside_a_failed_race_keeps_the_transaction(engine) -> None:
    # Another writer stored the same digest between our look-up and our insert: the savepoint keeps our
    # transaction usable and we get the other writer's version.
    lab = parse_rules(LAB)
    with engine.begin() as conn:
        other = registry.store_ruleset(conn, lab)
    with engine.begin() as conn:
        real_execute = conn.execute
        calls = {"n": 0}

        def execute(stmt, *a, **kw):
            calls["n"] += 1
            if calls["n"] == 1:  # the look-up misses, as if run just before the other writer's commit
                return real_execute(sa.select(rulesets.c.id).where(sa.false()))
            return real_execute(stmt, *a, **kw)

        conn.execute = execute  # type: ignore[method-assign]
        assert registry.store_ruleset(conn, lab) == other
        conn.execute = real_execute  # type: ignore[method-assign]
        assert conn.execute(sa.select(sa.func.count()).select_from(rulesets)).scalar() == 1


def test_stale_stored_ruleset_still_loads_with_a_warning(engine, caplog) -> None:
    lab = parse_rules(LAB)
    with engine.begin() as conn:
        version = registry.store_ruleset(conn, lab)
        conn.execute(sa.update(rulesets).where(rulesets.c.id == version)
                     .values(digest="0" * 64, canon_version="0"))
    with engine.connect() as conn, caplog.at_level("WARNING", logger="linkfold"):
        back = registry.get_ruleset(conn, version)
    assert back.digest == lab.digest
    assert "canonicaliser 0" in caplog.text
