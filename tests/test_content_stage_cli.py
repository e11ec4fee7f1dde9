"""``linkfold fetch``, ``pages load``, ``documents load|show`` and ``extract`` through the command line.

The CLI resolves names with the system resolver, so fetching uses only 127.0.0.1 URLs (IP literals are
never resolved): no DNS query leaves the machine. Behaviour on invented data: exit codes, JSON summaries
on stdout, problems as FILE:LINE: reason on stderr.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from httpserver import LoopbackServer
from linkfold.cli import main
from linkfold.content import MANIFEST_NAME
from linkfold.errors import InputError, NotFound

STORY = " ".join(
    f"Paragraph {i}: the Northvale ferry timetable changes on Monday, with an extra crossing at dawn, a later "
    "last boat on Fridays and a new stop at the harbour steps, the council's transport office said." for i in range(8))
URL = "https://lakeside-wire.example/wire/20261101/ferry-timetable"


@pytest.fixture
def env(monkeypatch, db_url):
    for name, value in {"LINKFOLD_DATABASE_URL": db_url, "LINKFOLD_CONTACT": "mailto:lab@university.example",
                        "LINKFOLD_ALLOW_NETWORKS": "127.0.0.0/8", "LINKFOLD_HTTP_HOST_DELAY": "0",
                        "LINKFOLD_HTTP_RETRIES": "0", "LINKFOLD_HTTP_TIMEOUT": "2"}.items():
        monkeypatch.setenv(name, value)
    return db_url


def _page_dir(tmp_path: Path) -> Path:
    d = tmp_path / "saved"
    d.mkdir()
    (d / "ferry.html").write_text(
        f"<!doctype html><html lang=en><head><title>Ferry timetable</title></head><body><article><p>{STORY}"
        "</p></article></body></html>", encoding="utf-8")
    (d / MANIFEST_NAME).write_text(f"file\turl\nferry.html\t{URL}\nnone.html\t{URL}-2\n", encoding="utf-8")
    return d


def test_import_extract_and_show(env, tmp_path, capsys):
    d = _page_dir(tmp_path)
    assert main(["pages", "load", str(d), "--format", "json"]) == 0
    out, err = capsys.readouterr()
    assert json.loads(out)["stored"] == 1
    assert f"{d}:3: missing_file" in err and "stored:         1" in err
    assert main(["extract", "--format", "json"]) == 0
    out, err = capsys.readouterr()
    summary = json.loads(out)
    assert summary["selected"] == 1 and summary["usable"] == 1
    assert "extracted 1 pages" in err
    # Any variant of the URL finds the document: utm_source is a literal analytics parameter (dropped).
    assert main(["documents", "show", URL + "?utm_source=feed", "--no-text"]) == 0
    out, _ = capsys.readouterr()
    doc = json.loads(out)
    assert doc["status"] == "usable" and "text" not in doc and doc["title"] == "Ferry timetable"
    assert main(["extract"]) == 0
    assert "nothing pending" in capsys.readouterr().err


def test_documents_load_reports_lines(env, tmp_path, capsys):
    path = tmp_path / "texts.jsonl"
    path.write_text(json.dumps({"url": URL, "title": "Ferry", "text": STORY}) + "\n"
                    + json.dumps({"url": URL, "title": "Ferry"}) + "\n", encoding="utf-8")
    assert main(["documents", "load", str(path)]) == 0
    err = capsys.readouterr().err
    assert f"{path}:2: missing_field" in err and "loaded 1 documents" in err
    assert main(["documents", "load", str(path), "--format", "json"]) == 0
    assert json.loads(capsys.readouterr().out)["already_stored"] == 1


def test_errors_are_one_line_and_an_exit_code(env, tmp_path, capsys):
    assert main(["pages", "load", str(tmp_path / "nope.warc.gz")]) == InputError("x").exit_code
    err = capsys.readouterr().err
    assert err.startswith("linkfold: error: ") and "nope.warc.gz" in err
    assert main(["documents", "show", "https://nowhere.example/x"]) == NotFound("x").exit_code
    assert "no canonical URL stored" in capsys.readouterr().err


def test_fetch_prints_a_summary(env, tmp_path, capsys):
    with LoopbackServer() as server:
        dump = tmp_path / "panel.txt"
        dump.write_text(f"{server.url('/final')}\n{server.url('/status/404')}\n", encoding="utf-8")
        assert main(["-q", "datasets", "load", str(dump), "--dataset", "panel-a"]) == 0
        capsys.readouterr()
        assert main(["fetch", "--dataset", "panel-a", "--format", "json"]) == 0
        out, err = capsys.readouterr()
    summary = json.loads(out)
    assert summary["fetched"] == 1 and summary["failed"] == {"http_4xx": 1}
    assert "pages stored: 1" in err


def test_fetch_without_contact_is_a_config_error(env, monkeypatch, capsys):
    monkeypatch.setenv("LINKFOLD_CONTACT", "")
    assert main(["fetch"]) != 0
    assert "contact" in capsys.readouterr().err


def test_import_pages_as_a_process(tmp_path):
    """One end-to-end run of the installed entry point, on a fresh SQLite file."""
    d = _page_dir(tmp_path)
    db = f"sqlite:///{tmp_path / 'registry.db'}"
    env = {k: v for k, v in os.environ.items() if not k.startswith("LINKFOLD_")}
    run = lambda *args: subprocess.run([sys.executable, "-m", "linkfold.cli", "--db", db, *args],  # noqa: E731
                                       capture_output=True, text=True, env=env, timeout=120)
    assert run("db", "upgrade").returncode == 0
    done = run("pages", "load", str(d), "--format", "json")
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)["stored"] == 1
    extracted = run("extract", "--format", "json")
    assert extracted.returncode == 0 and json.loads(extracted.stdout)["usable"] == 1
