"""export on both backends: CSV (read back with the csv module), JSON lines and Parquet (read back with
pyarrow) round-trip equal to what was loaded and to the ``sighting_links`` view."""

from __future__ import annotations

import csv
import io
import json
from datetime import UTC, datetime

import pyarrow.parquet as pq
import pytest
import sqlalchemy as sa

from linkfold.cli import main
from linkfold.errors import ConfigError, NotFound
from linkfold.ingest import export_dataset, ingest_dump
from linkfold.store.clock import utc
from linkfold.store.linkage import LINK_COLUMNS

PANEL = ("visit_id,url,visited\n"
         "v1,https://www.daily-harbour.example/2031/05/bridge?utm_source=feed,2031-05-04T08:00:00Z\n"
         'v2,"https://valley-post.test/a,b?q=""x""",2031-05-04T09:00:00+02:00\n'
         "v3,https://bücher.example/straße,\n"
         "v4,not a url,1935649200\n")


@pytest.fixture
def loaded(engine, tmp_path):
    path = tmp_path / "panel.csv"
    path.write_text(PANEL, encoding="utf-8")
    second = tmp_path / "more.txt"
    second.write_text("https://daily-harbour.example/2031/05/bridge\n")
    ingest_dump(engine, [path], dataset="panel", key_column="visit_id", time_column="visited")
    ingest_dump(engine, [second], dataset="panel")
    return engine, path


def view_rows(engine) -> list[dict]:
    with engine.connect() as conn:
        rows = conn.execute(sa.text(
            "SELECT dataset, row_key, line_no, position, seen_at, raw_url, canonical_url, url_key, domain, outlet "
            "FROM sighting_links ORDER BY sighting_id")
            # SQLite keeps times as UTC text ('2031-05-04 08:00:00.000000'); the type reads them back.
            .columns(seen_at=sa.DateTime(timezone=True))).mappings().all()
    return [dict(r) | {"seen_at": utc(r["seen_at"])} for r in rows]


def test_csv_round_trip_equals_the_input_and_the_view(loaded, tmp_path):
    engine, source = loaded
    out = tmp_path / "links.csv"
    result = export_dataset(engine, "panel", fmt="csv", out=out)
    assert result.rows == 5
    with out.open(newline="", encoding="utf-8") as fh:
        back = list(csv.DictReader(fh))
    assert tuple(back[0]) == LINK_COLUMNS
    # Raw URLs and keys come back exactly as the input file holds them (read with the csv module too).
    with source.open(newline="", encoding="utf-8") as fh:
        original = list(csv.DictReader(fh))
    assert [(r["row_key"], r["raw_url"]) for r in back[:4]] == [(r["visit_id"], r["url"]) for r in original]
    assert back[4]["file"] == "more.txt" and back[4]["row_key"] == "1"
    # And every field equals the SQL view's (empty cell = no value).
    view = {(r["row_key"], r["raw_url"]): r for r in view_rows(engine)}
    for row in back:
        v = view[(row["row_key"], row["raw_url"])]
        for col in ("dataset", "canonical_url", "url_key", "domain", "outlet"):
            assert row[col] == (v[col] or "")
        assert row["seen_at"] == (v["seen_at"].isoformat() if v["seen_at"] else "")
        assert row["article_id"] == "" and row["story_id"] == ""
    assert back[1]["seen_at"] == "2031-05-04T07:00:00+00:00"
    assert back[2]["canonical_url"] == "https://xn--bcher-kva.example/stra%C3%9Fe"  # UTS #46 / RFC 3987
    assert back[3]["canonical_url"] == "" and back[3]["raw_url"] == "not a url"


def test_parquet_round_trip(loaded, tmp_path):
    engine, _ = loaded
    out = tmp_path / "links.parquet"
    export_dataset(engine, "panel", fmt="parquet", out=out, row_group=2)
    table = pq.read_table(out)
    assert tuple(table.column_names) == LINK_COLUMNS
    assert pq.ParquetFile(out).metadata.num_row_groups == 3  # 5 rows in groups of 2: memory stays flat
    rows = table.to_pylist()
    with engine.connect() as conn:
        from linkfold.store.datasets import get_dataset
        from linkfold.store.linkage import iter_links

        expected = [dict(zip(LINK_COLUMNS, r, strict=True))
                    for r in iter_links(conn, get_dataset(conn, "panel"))]
    assert rows == expected
    assert rows[0]["seen_at"] == datetime(2031, 5, 4, 8, 0, tzinfo=UTC)
    assert rows[2]["seen_at"] is None and rows[0]["line_no"] == 2


def test_jsonl_to_a_stream(loaded):
    engine, _ = loaded
    buf = io.StringIO()
    export_dataset(engine, "panel", fmt="jsonl", out=buf)
    rows = [json.loads(x) for x in buf.getvalue().splitlines()]
    assert [r["row_key"] for r in rows] == ["v1", "v2", "v3", "v4", "1"]
    assert rows[0]["seen_at"] == "2031-05-04T08:00:00+00:00" and rows[3]["canonical_url"] is None


def test_empty_dataset_exports_a_header_or_an_empty_table(engine, tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("url\n\n,\n")
    ingest_dump(engine, [path], dataset="empty")
    out = tmp_path / "e.parquet"
    assert export_dataset(engine, "empty", fmt="parquet", out=out).rows == 0
    assert pq.read_table(out).num_rows == 0
    buf = io.StringIO()
    export_dataset(engine, "empty", fmt="csv", out=buf)
    assert buf.getvalue() == ",".join(LINK_COLUMNS) + "\n"


def test_errors(loaded, tmp_path):
    engine, _ = loaded
    with pytest.raises(ConfigError, match="Parquet"):
        export_dataset(engine, "panel", fmt="parquet")
    with pytest.raises(NotFound):
        export_dataset(engine, "nope", fmt="csv", out=io.StringIO())
    with pytest.raises(ConfigError):
        export_dataset(engine, "panel", fmt="xlsx", out=io.StringIO())


def test_failed_export_leaves_no_file(loaded, tmp_path, monkeypatch):
    engine, _ = loaded
    from linkfold.ingest import export as export_module

    def broken(*_a, **_k):
        raise RuntimeError("disk full")

    monkeypatch.setattr(export_module, "_write_parquet", broken)
    out = tmp_path / "x.parquet"
    with pytest.raises(RuntimeError):
        export_dataset(engine, "panel", fmt="parquet", out=out)
    assert list(tmp_path.glob("*.parquet*")) == [] and list(tmp_path.glob(".x.parquet*")) == []


def test_cli_export_to_stdout_and_datasets(loaded, db_url, capsys):
    assert main(["--db", db_url, "--quiet", "export", "--dataset", "panel"]) == 0
    out = capsys.readouterr().out
    assert out.splitlines()[0] == ",".join(LINK_COLUMNS) and len(out.splitlines()) == 6
    assert main(["--db", db_url, "export", "--dataset", "panel", "--format", "parquet"]) == 3
    assert "needs a file" in capsys.readouterr().err
    assert main(["--db", db_url, "datasets", "--format", "jsonl"]) == 0
    (ds,) = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert (ds["dataset"], ds["files"], ds["rows"], ds["sightings"], ds["rejects"]) == ("panel", 2, 5, 5, 2)  # no_scheme (v4), missing_time (v3)
