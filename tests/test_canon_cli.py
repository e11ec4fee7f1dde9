"""``linkfold canonicalize`` and ``linkfold rules …`` through the real command line."""

from __future__ import annotations

import io
import json
import subprocess
import sys
from pathlib import Path

from linkfold.canon import default_rules, url_key
from linkfold.cli import main

ROOT = Path(__file__).parent.parent
DEMO_RULES = ROOT / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml"
REQUIRED = {"input", "canonical", "url_key", "domain", "is_article", "error"}


def _jsonl(text: str) -> list[dict]:
    return [json.loads(line) for line in text.splitlines() if line.strip()]


def test_canonicalize_files_one_object_per_line(tmp_path, capsys) -> None:
    urls = tmp_path / "urls.txt"
    urls.write_text("http://www.daily.example/a/?utm_source=x\r\nmailto:x@y.test\n\nhttps://daily.example/a\n",
                    encoding="utf-8")
    assert main(["canonicalize", str(urls)]) == 0
    out = capsys.readouterr()
    rows = _jsonl(out.out)
    assert len(rows) == 4  # one per input line, blank lines included, so outputs line up with inputs
    assert all(set(r) >= REQUIRED for r in rows)
    assert rows[0]["canonical"] == rows[3]["canonical"] == "https://daily.example/a"
    assert rows[0]["url_key"] == url_key("https://daily.example/a") and rows[0]["error"] is None
    assert rows[0]["ruleset"] == default_rules().digest and rows[0]["domain"] == "daily.example"
    assert rows[1]["error"] == "not_http" and rows[1]["canonical"] is None
    assert rows[2]["error"] == "empty"
    assert "steps" not in rows[0]
    assert "4 lines: 2 canonical (1 distinct), 2 refused (not_http 1, empty 1)" in out.err


def test_canonicalize_explain_and_rules(tmp_path, capsys) -> None:
    urls = tmp_path / "urls.txt"
    urls.write_text("https://harbourview-news.example/article.php?page=2&id=107\n", encoding="utf-8")
    assert main(["--quiet", "canonicalize", "--explain", "--rules", str(DEMO_RULES), str(urls)]) == 0
    out = capsys.readouterr()
    (row,) = _jsonl(out.out)
    assert row["canonical"] == "https://harbourview-news.example/article.php?id=107"
    assert row["is_article"] is True and row["outlet"] == "Harbourview News"
    assert row["steps"] == ["site_params"]
    assert out.err == ""  # --quiet


def test_canonicalize_reads_stdin_and_reports_bad_bytes(monkeypatch, capsys) -> None:


    data = b"http://daily.example/\xff\nhttps://daily.example/b\n"
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(data)))
    assert main(["canonicalize"]) == 0
    out = capsys.readouterr()
    rows = _jsonl(out.out)
    assert [r["error"] for r in rows] == ["bad_unicode", None]
    assert "<stdin>:1: not UTF-8" in out.err


def test_canonicalize_missing_file_is_an_input_error(tmp_path, capsys) -> None:
    assert main(["canonicalize", str(tmp_path / "nope.txt")]) == 6
    assert "nope.txt: cannot read" in capsys.readouterr().err


def test_canonicalize_bad_rules_file_names_the_line(tmp_path, capsys) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text("[steps]\nhttps = true\nhttps_please = false\n", encoding="utf-8")
    assert main(["canonicalize", "--rules", str(bad)]) == 5
    assert f"{bad}:3: steps.https_please: unknown key" in capsys.readouterr().err


def test_rules_check(tmp_path, capsys) -> None:
    assert main(["rules", "check", str(DEMO_RULES)]) == 0
    out = capsys.readouterr().out
    first, *lists = out.splitlines()
    assert "OK (4 sites, 1 shortener hosts" in first
    assert lists == ["  never_follow_hosts (1, subdomains included): pixel.tracker.test",
                     "  never_article_hosts (2, subdomains included): adserve.example, img.cdn.test"]
    bad = tmp_path / "bad.toml"
    bad.write_text("[site.'daily.example']\narticle = ['^(']\n", encoding="utf-8")
    assert main(["rules", "check", str(bad)]) == 5
    err = capsys.readouterr().err
    assert f"{bad}:2: site.daily.example.article: invalid regular expression" in err


def test_rules_add_list_show_and_canonicalize_by_version(sqlite_url, tmp_path, capsys) -> None:
    db = ["--db", sqlite_url]
    assert main([*db, "rules", "show"]) == 0  # stores and shows the defaults as version 1
    shown = capsys.readouterr()
    assert shown.out == default_rules().source and "ruleset version 1" in shown.err

    assert main([*db, "rules", "load", str(DEMO_RULES), "--name", "demo outlets v1"]) == 0
    added = json.loads(capsys.readouterr().out)
    assert added["version"] == 2 and added["new"] is True
    assert main([*db, "rules", "load", str(DEMO_RULES)]) == 0
    assert json.loads(capsys.readouterr().out) == {**added, "name": "demo outlets", "new": False}

    assert main([*db, "rules", "list", "--format", "jsonl"]) == 0
    listed = _jsonl(capsys.readouterr().out)
    assert [(r["version"], r["name"]) for r in listed] == [(1, "default"), (2, "demo outlets v1")]

    assert main([*db, "rules", "show", "2"]) == 0
    assert capsys.readouterr().out == DEMO_RULES.read_text(encoding="utf-8")

    urls = tmp_path / "u.txt"
    urls.write_text("https://herald-archive.test/news/2026/10/night-market-trial\n", encoding="utf-8")
    assert main([*db, "-q", "canonicalize", "--ruleset", "2", str(urls)]) == 0
    (row,) = _jsonl(capsys.readouterr().out)
    assert row["canonical"] == "https://northvale-herald.example/news/2026/10/night-market-trial"
    assert main([*db, "rules", "show", "9"]) == 7


def test_rules_list_table(sqlite_url, capsys) -> None:
    assert main(["--db", sqlite_url, "rules", "load", str(DEMO_RULES)]) == 0
    capsys.readouterr()
    assert main(["--db", sqlite_url, "rules", "list"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split()[:3] == ["version", "name", "digest"] and len(lines) == 2


def test_rules_and_ruleset_together_is_a_usage_error(capsys) -> None:
    assert main(["canonicalize", "--rules", str(DEMO_RULES), "--ruleset", "1"]) == 2


def test_console_script_end_to_end(tmp_path) -> None:
    # One real process: the installed console script, stdin to stdout.
    exe = Path(sys.executable).with_name("linkfold")
    proc = subprocess.run([str(exe), "canonicalize", "--explain"], input="HTTP://WWW.Daily.Example/a/\n",
                          capture_output=True, text=True, check=False, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    (row,) = _jsonl(proc.stdout)
    assert row["canonical"] == "https://daily.example/a"
    assert row["steps"] == ["whatwg", "host_prefixes", "https", "trailing_slash"]
