"""Starting from Python: one public call creates or upgrades the schema, and every stage refuses a
database whose schema is missing or old with a SchemaError that names that call (never a driver's
"no such table" halfway through, and nothing written)."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
import sqlalchemy as sa

import linkfold
from linkfold import SchemaError, load_settings, make_engine, upgrade_schema
from linkfold.store import current_revision, downgrade, head_revision, require_schema

SETTINGS = load_settings(environ={})


def _files(tmp: Path) -> dict[str, Path]:
    dump = tmp / "dump.csv"
    dump.write_text("url,id\nhttps://a.example/news/1,1\n", encoding="utf-8")
    pairs = tmp / "pairs.csv"
    pairs.write_text("short,expanded\nhttps://s.example/x,https://a.example/news/1\n", encoding="utf-8")
    docs = tmp / "docs.jsonl"
    docs.write_text('{"url": "https://a.example/news/1", "text": "words"}\n', encoding="utf-8")
    outlets = tmp / "outlets.csv"
    outlets.write_text("domain,outlet\na.example,Alpha\n", encoding="utf-8")
    pages = tmp / "pages"
    pages.mkdir()
    return {"dump": dump, "pairs": pairs, "docs": docs, "outlets": outlets, "pages": pages}


# Every public entry point that reads or writes the registry, with the least it needs to run.
ENTRY_POINTS: dict[str, Callable[[sa.Engine, dict[str, Path]], Any]] = {
    "ingest_dump": lambda e, f: linkfold.ingest_dump(e, [f["dump"]], dataset="d", key_column="id"),
    "lookup": lambda e, f: list(linkfold.lookup(e, ["https://a.example/news/1"])),
    "export_dataset": lambda e, f: linkfold.export_dataset(e, "d", out=f["dump"].with_name("out.csv")),
    "follow_links": lambda e, f: linkfold.follow_links(e, settings=SETTINGS),
    "import_redirects": lambda e, f: linkfold.import_redirects(e, f["pairs"]),
    "fetch_pages": lambda e, f: linkfold.fetch_pages(e, settings=SETTINGS),
    "import_pages": lambda e, f: linkfold.import_pages(e, [f["pages"]]),
    "load_documents": lambda e, f: linkfold.load_documents(e, f["docs"]),
    "extract_pages": lambda e, f: linkfold.extract_pages(e),
    "run_dedupe": lambda e, f: linkfold.run_dedupe(e, settings=SETTINGS),
    "record_decision": lambda e, f: linkfold.record_decision(
        e, "same", "https://a.example/news/1", "https://a.example/news/2", decided_by="test"),
    "recanonicalize": lambda e, f: linkfold.recanonicalize(e),
    "run_nightly": lambda e, f: linkfold.run_nightly(e, settings=SETTINGS),
    "load_outlet_list": lambda e, f: linkfold.load_outlet_list(e, f["outlets"]),
}


def _tables(engine: sa.Engine) -> set[str]:
    return set(sa.inspect(engine).get_table_names())


def test_a_new_sqlite_file_fails_clearly_until_the_schema_call(tmp_path: Path) -> None:
    # The researcher's first session, as the issue describes it: make_engine, then ingest_dump.
    engine = make_engine(f"sqlite:///{tmp_path / 'new.db'}")
    files = _files(tmp_path)
    with pytest.raises(SchemaError) as caught:
        linkfold.ingest_dump(engine, [files["dump"]], dataset="d", key_column="id")
    assert "has no linkfold schema yet" in str(caught.value)
    assert "linkfold.upgrade_schema(engine)" in str(caught.value)
    assert _tables(engine) == set()  # nothing was created behind the user's back
    assert upgrade_schema(engine) == head_revision()
    summary = linkfold.ingest_dump(engine, [files["dump"]], dataset="d", key_column="id")
    assert summary.sightings == 1
    assert upgrade_schema(engine) == head_revision()  # safe to repeat
    engine.dispose()


@pytest.mark.parametrize("entry", sorted(ENTRY_POINTS))
def test_every_entry_point_refuses_a_database_without_the_schema(empty_db_url: str, tmp_path: Path,
                                                                   entry: str) -> None:
    engine = make_engine(empty_db_url)
    try:
        with pytest.raises(SchemaError, match=r"no linkfold schema yet.*upgrade_schema"):
            ENTRY_POINTS[entry](engine, _files(tmp_path))
        assert _tables(engine) == set()
    finally:
        engine.dispose()


def test_an_older_schema_is_refused_and_upgraded_on_request(empty_db_url: str, tmp_path: Path) -> None:
    engine = make_engine(empty_db_url)
    try:
        upgrade_schema(engine, "0011")
        with pytest.raises(SchemaError, match=r"is at schema 0011, this linkfold needs .*upgrade_schema"):
            linkfold.ingest_dump(engine, [_files(tmp_path)["dump"]], dataset="d", key_column="id")
        assert current_revision(engine) == "0011"  # never migrated behind the user's back
        assert upgrade_schema(engine) == head_revision()
        require_schema(engine)
        # Migrating through the library forgets what it knew of the engine: a downgrade is seen at once.
        downgrade(engine, "0011")
        with pytest.raises(SchemaError, match="0011"):
            require_schema(engine)
    finally:
        engine.dispose()


def test_a_foreign_database_is_left_alone(empty_db_url: str) -> None:
    engine = make_engine(empty_db_url)
    try:
        with engine.begin() as conn:
            conn.execute(sa.text("CREATE TABLE survey_answers (id integer PRIMARY KEY)"))
        for call in (upgrade_schema, require_schema):
            with pytest.raises(SchemaError, match="holds tables but no linkfold schema version"):
                call(engine)
        assert _tables(engine) == {"survey_answers"}
    finally:
        engine.dispose()


def test_a_schema_newer_than_this_linkfold_is_named(empty_db_url: str) -> None:
    engine = make_engine(empty_db_url)
    try:
        upgrade_schema(engine)
        with engine.begin() as conn:
            conn.execute(sa.text("UPDATE alembic_version SET version_num = '9999'"))
        with pytest.raises(SchemaError, match="9999, which this linkfold does not know"):
            require_schema(engine)
    finally:
        engine.dispose()


def test_after_a_downgrade_to_base_the_database_counts_as_empty(empty_db_url: str) -> None:
    # Alembic keeps its (empty) version table after "base": that is not a foreign database.
    engine = make_engine(empty_db_url)
    try:
        upgrade_schema(engine)
        downgrade(engine, "base")
        assert upgrade_schema(engine) == head_revision()
    finally:
        engine.dispose()


def test_the_command_leaves_a_foreign_database_alone_too(empty_db_url: str, capsys) -> None:
    from linkfold.cli import main

    engine = make_engine(empty_db_url)
    try:
        with engine.begin() as conn:
            conn.execute(sa.text("CREATE TABLE survey_answers (id integer PRIMARY KEY)"))
        assert main(["--db", empty_db_url, "db", "upgrade"]) == SchemaError.exit_code
        assert "holds tables but no linkfold schema version" in capsys.readouterr().err
        assert _tables(engine) == {"survey_answers"}
    finally:
        engine.dispose()
