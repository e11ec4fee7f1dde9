"""``linkfold follow`` and ``follow-report`` through the real command line, on both backends.

The CLI resolves names with the system resolver, so these tests use only 127.0.0.1 URLs (IP literals
are never resolved): no DNS query leaves the machine.
"""

from __future__ import annotations

import json

import pytest

from linkfold.cli import main


@pytest.fixture
def env(monkeypatch, db_url):
    for name, value in {"LINKFOLD_DATABASE_URL": db_url, "LINKFOLD_CONTACT": "mailto:lab@university.example",
                        "LINKFOLD_ALLOW_NETWORKS": "127.0.0.0/8", "LINKFOLD_HTTP_HOST_DELAY": "0",
                        "LINKFOLD_HTTP_RETRIES": "0", "LINKFOLD_HTTP_TIMEOUT": "2"}.items():
        monkeypatch.setenv(name, value)
    return db_url


def ingest(tmp_path, urls, dataset="panel-a"):
    path = tmp_path / f"{dataset}.txt"
    path.write_text("\n".join(urls) + "\n", encoding="utf-8")
    assert main(["-q", "datasets", "load", str(path), "--dataset", dataset]) == 0


def test_follow_prints_a_summary_and_json(env, tmp_path, server, capsys):
    ingest(tmp_path, [server.url("/chain/2"), server.url("/status/404"), server.url("/loop/a")])
    capsys.readouterr()
    assert main(["follow", "--hosts", "127.0.0.1", "--format", "json"]) == 0
    out, err = capsys.readouterr()
    summary = json.loads(out)
    assert summary["selected"] == 3 and summary["resolved"] == 1
    assert summary["failed"] == {"http_4xx": 1, "loop": 1}
    assert "resolved: 1" in err and "failed:   2 (http_4xx 1, loop 1)" in err and "dead links: 66.7%" in err


def test_follow_report(env, tmp_path, server, capsys):
    ingest(tmp_path, [server.url("/chain/1"), server.url("/status/500")])
    assert main(["-q", "follow", "--hosts", "127.0.0.1"]) == 0
    capsys.readouterr()
    assert main(["follow-report", "--format", "jsonl"]) == 0
    out, err = capsys.readouterr()
    rows = [json.loads(line) for line in out.splitlines()]
    assert {"state": "failed", "failure": "http_5xx", "reason": None, "urls": 1} in rows
    # The links the dataset held, not the URLs its chain passed through.
    assert rows[0] == {"state": "resolved", "failure": None, "reason": None, "urls": 1}
    assert "dead share: 50.0%" in err


def test_import_reports_bad_lines_with_file_and_line(env, tmp_path, capsys):
    path = tmp_path / "pairs.csv"
    path.write_text("short,expanded\nhttps://short.test/a,https://news.test/a\nmailto:x@news.test,"
                    "https://news.test/b\n", encoding="utf-8")
    assert main(["redirects", "load", str(path)]) == 0
    err = capsys.readouterr().err
    assert f"{path}:3: short_not_http" in err and "1 redirect links written" in err


def test_missing_contact_is_a_config_error(env, monkeypatch, capsys):
    monkeypatch.setenv("LINKFOLD_CONTACT", "")
    assert main(["follow", "--all"]) == 3
    assert "contact" in capsys.readouterr().err


@pytest.mark.parametrize("args", [
    ["follow", "--all", "--hosts", "short.test"],
    ["follow", "--import", "pairs.csv", "--limit", "3"],
    ["follow", "--format", "tsv"],  # an input format: it belongs to redirects load --input-format
    ["follow", "--short-column", "link"],
])
def test_conflicting_options_are_usage_errors(env, args, capsys):
    assert main(args) == 2


def test_unknown_dataset(env, capsys):
    assert main(["follow", "--all", "--dataset", "nope"]) == 7
    assert "no dataset named 'nope'" in capsys.readouterr().err


def test_bad_host_value(env, capsys):
    assert main(["follow", "--hosts", "not a host"]) == 3
