"""The ingest commands as a user meets them: exit codes, messages, the JSON summary, and a real
``kill -9`` of a loading process followed by a rerun (both backends)."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import sqlalchemy as sa

from linkfold.cli import main
from linkfold.store import make_engine
from linkfold.store import tables as t


def test_ingest_prints_a_summary_and_rejects_lists_them(db_url, tmp_path, capsys):
    path = tmp_path / "panel.csv"
    path.write_text("id,url,t\n1,https://a.example/1,2031-05-04\n2,ftp://a.example/x,2031-05-04\n3,,x\n")
    assert main(["--db", db_url, "datasets", "load", str(path), "--dataset", "panel", "--key-column", "id",
                 "--time-column", "t", "--description", "invented"]) == 0
    err = capsys.readouterr().err
    assert "3 rows, 2 sightings" in err and "not_http 1" in err and "1 row without a URL" in err
    assert "linkfold rejects --dataset panel" in err
    assert main(["--db", db_url, "rejects", "--dataset", "panel", "--format", "jsonl"]) == 0
    captured = capsys.readouterr()
    rows = [json.loads(x) for x in captured.out.splitlines()]
    # The row without a URL (line 4) is counted above, not rejected, and its bad time is not looked at.
    assert [(r["file"], r["line"], r["reason"]) for r in rows] == [("panel.csv", 3, "not_http")]
    assert "1 rejects listed" in captured.err
    assert main(["--db", db_url, "rejects", "--dataset", "panel", "--reason", "not_http"]) == 0
    assert "not_http" in capsys.readouterr().out


def test_json_summary_on_stdout_and_reload_says_nothing_new(db_url, tmp_path, capsys):
    path = tmp_path / "urls.txt"
    path.write_text("https://a.example/1\nhttps://a.example/2\n")
    assert main(["--db", db_url, "--quiet", "datasets", "load", str(path), "--dataset", "d", "--format", "json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert (summary["rows"], summary["sightings"], summary["files"][0]["outcome"]) == (2, 2, "loaded")
    assert main(["--db", db_url, "datasets", "load", str(path), "--dataset", "d"]) == 0
    assert "already loaded" in capsys.readouterr().err


def test_missing_column_exits_6_naming_columns(db_url, tmp_path, capsys):
    path = tmp_path / "a.csv"
    path.write_text("id,link\n1,https://a.example/\n")
    assert main(["--db", db_url, "datasets", "load", str(path), "--dataset", "d", "--url-column", "url"]) == 6
    err = capsys.readouterr().err
    assert err.startswith("linkfold: error:") and "a.csv" in err and "'id', 'link'" in err


def test_unknown_dataset_and_missing_file(db_url, tmp_path, capsys):
    assert main(["--db", db_url, "rejects", "--dataset", "nope"]) == 7
    assert main(["--db", db_url, "datasets", "load", str(tmp_path / "none.csv"), "--dataset", "d"]) == 6
    assert "no such file" in capsys.readouterr().err


def test_ruleset_and_rules_are_exclusive(db_url, tmp_path, capsys):
    path = tmp_path / "a.txt"
    path.write_text("https://a.example/\n")
    rules = tmp_path / "r.toml"
    rules.write_text("")
    assert main(["--db", db_url, "datasets", "load", str(path), "--dataset", "d", "--ruleset", "1", "--rules",
                 str(rules)]) == 2


def _wait_for(predicate, timeout: float = 60.0) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.05)
    return False


def test_kill_9_mid_load_then_rerun_completes_without_duplicates(db_url, tmp_path):
    path = tmp_path / "big.csv"
    n = 60_000
    with path.open("w") as fh:
        fh.write("id,url\n")
        for i in range(n):
            fh.write(f"k{i},https://www.outlet{i % 40}.example/2031/{i % 12 + 1:02d}/story-{i}?utm_source=x\n")
    env = dict(os.environ, LINKFOLD_BATCH_SIZE="1000", LINKFOLD_DATABASE_URL=db_url)
    cmd = [sys.executable, "-m", "linkfold.cli", "--quiet", "datasets", "load", str(path), "--dataset", "big",
           "--key-column", "id"]
    engine = make_engine(db_url)
    try:
        def lines_done() -> int:
            with engine.connect() as conn:
                return conn.execute(sa.select(sa.func.coalesce(sa.func.max(t.dataset_files.c.lines_done), 0))
                                    ).scalar_one()

        proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        try:
            assert _wait_for(lambda: lines_done() >= 3000), "the load never got going"
        finally:
            proc.send_signal(signal.SIGKILL)
            proc.wait(timeout=30)
        with engine.connect() as conn:
            f = conn.execute(sa.select(t.dataset_files)).mappings().one()
            stored = conn.execute(sa.select(sa.func.count()).select_from(t.sightings)).scalar_one()
        assert f["state"] == "loading" and f["lines_done"] < n + 1, "killed too late to test anything"
        # Whole batches only: every committed batch is 1000 rows, and the counters match the rows stored.
        assert stored == f["sightings"] == f["rows"] and stored % 1000 == 0

        done = subprocess.run(cmd, env=env, capture_output=True, text=True,
                              timeout=300)
        assert done.returncode == 0, done.stderr
        with engine.connect() as conn:
            f = conn.execute(sa.select(t.dataset_files)).mappings().one()
            total = conn.execute(sa.select(sa.func.count()).select_from(t.sightings)).scalar_one()
            distinct = conn.execute(sa.select(sa.func.count(sa.distinct(t.sightings.c.row_key)))).scalar_one()
            runs = conn.execute(sa.select(t.runs.c.state).order_by(t.runs.c.id)).scalars().all()
        assert (f["state"], f["rows"], total, distinct) == ("complete", n, n, n)
        assert runs == ["running", "ok"]  # the killed run could not record its end; its row says so
    finally:
        engine.dispose()
