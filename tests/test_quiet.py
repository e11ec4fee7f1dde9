"""`-q` means nothing on stderr unless something is wrong: the README's cron line, end to end.

The set-up and the nightly job run as separate `linkfold -q …` processes over the demo fixtures, as a
lab's shell script and cron would run them, on both backends. A page with no text at all is added to
the fixtures' pages: trafilatura logs a warning ("discarding data") for such a page, which is ours to
count as `no_text`, not to mail to someone at 2 a.m. Then two real failures (the registry lock held by
another job, a setting with a bad value) must still print, with their exit codes.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from linkfold.cli import main, setup_logging, teardown_logging
from linkfold.content.extract import EXTRACTOR_LOGGERS
from linkfold.demo import DEMO_DUMPS, demo_data_dir
from linkfold.store import make_engine
from linkfold.store.locks import hold_lock

EMPTY_PAGE = "<!doctype html><html><head><title></title></head><body></body></html>\n"


def _env() -> dict[str, str]:
    # No LINKFOLD_* from the caller's shell: no contact (the network stages skip), no other database.
    env = {k: v for k, v in os.environ.items() if not k.startswith("LINKFOLD_")}
    env["PYTHONWARNINGS"] = "default"  # a dependency's warnings.warn must not reach stderr under -q either
    return env


def _linkfold(db_url: str, *args: str, env: dict[str, str] | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "linkfold.cli", "-q", "--db", db_url, *args],
                          env=env or _env(), capture_output=True, text=True, timeout=300)


def _pages(tmp_path: Path) -> Path:
    pages = tmp_path / "pages"
    shutil.copytree(demo_data_dir() / "pages", pages)
    (pages / "blank.html").write_text(EMPTY_PAGE, encoding="utf-8")
    with (pages / "pages.tsv").open("a", encoding="utf-8") as fh:
        fh.write("blank.html\thttps://quiet-desk.example/news/blank-page\t2026-11-01T12:00:00Z\n")
    return pages


def _set_up(db_url: str, tmp_path: Path) -> None:
    fx = demo_data_dir()
    steps = [("rules", "load", str(fx / "rules" / "demo.toml"))]
    for name, path, options in DEMO_DUMPS:
        step = ["datasets", "load", str(fx / path), "--dataset", name, "--url-column", options["url_column"],
                "--key-column", options["key_column"], "--time-column", options["time_column"]]
        steps.append(tuple(step))
    steps += [("redirects", "load", str(fx / "short_links.csv")), ("pages", "load", str(_pages(tmp_path)))]
    for step in steps:
        done = _linkfold(db_url, *step)
        assert (done.returncode, done.stderr) == (0, ""), step


def test_quiet_nightly_prints_nothing_when_all_is_well(db_url, tmp_path):
    _set_up(db_url, tmp_path)
    done = _linkfold(db_url, "nightly")
    assert (done.returncode, done.stdout, done.stderr) == (0, "", "")
    # It did work (extraction and dedupe ran), and the blank page was counted by its reason.
    summary = _linkfold(db_url, "runs", "--format", "jsonl", "--stage", "nightly")
    assert summary.returncode == 0 and '"status": "ok"' in summary.stdout
    loud = subprocess.run([sys.executable, "-m", "linkfold.cli", "--db", db_url, "runs", "show",
                           _last_run_id(summary.stdout)], env=_env(), capture_output=True, text=True)
    assert '"empty": 1' in loud.stdout or "empty 1" in loud.stdout, loud.stdout


def _last_run_id(jsonl: str) -> str:
    return str(json.loads(jsonl.splitlines()[0])["id"])


def test_quiet_nightly_still_prints_a_real_failure(db_url):
    # The registry lock held by another job: exit 8, and the message names the holder.
    engine = make_engine(db_url)
    try:
        with hold_lock(engine):
            done = _linkfold(db_url, "nightly")
    finally:
        engine.dispose()
    assert done.returncode == 8
    assert "lock" in done.stderr and f"pid {os.getpid()}" in done.stderr
    # A setting with a value that is not one: exit 3, naming the setting.
    env = _env() | {"LINKFOLD_BATCH_SIZE": "many"}
    done = _linkfold(db_url, "nightly", env=env)
    assert done.returncode == 3 and "batch_size" in done.stderr.lower()


def test_quiet_keeps_errors_and_drops_warnings_of_any_library(sqlite_url, capsys):
    # In process: the handler the CLI installs for a command lets errors through under -q, from any logger.
    # It lasts as long as the command (main() takes it away again), so it is set up here as main does.
    assert main(["-q", "--db", sqlite_url, "settings"]) == 0
    capsys.readouterr()
    setup_logging(quiet=True)
    try:
        logging.getLogger("some.dependency").warning("a warning nobody asked for")
        logging.getLogger("some.dependency").error("an error worth a mail")
    finally:
        teardown_logging()
    err = capsys.readouterr().err
    assert "an error worth a mail" in err and "a warning nobody asked for" not in err


class _Collect(logging.Handler):
    """A handler on the root logger, as the CLI's stderr handler is (pytest's own capture handlers are also
    attached to loggers that do not propagate, so caplog would see records stderr never does)."""

    def __init__(self) -> None:
        super().__init__(logging.DEBUG)
        self.records: list[logging.LogRecord] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.records.append(record)


@pytest.fixture
def at_root():
    root = logging.getLogger()
    handler, level = _Collect(), root.level
    root.addHandler(handler)
    root.setLevel(logging.DEBUG)
    yield handler
    root.removeHandler(handler)
    root.setLevel(level)


def test_extractor_records_are_debug_records(at_root):
    # trafilatura's own warning, as it logs it for a page with no text (trafilatura 2.x core.py).
    from linkfold.content.extract import quiet_extractor_logs

    quiet_extractor_logs()
    logging.getLogger("trafilatura.core").warning("discarding data: %s", "https://quiet-desk.example/")
    assert [(r.name, r.levelno) for r in at_root.records] == [("linkfold.extractor", logging.DEBUG)]
    assert all(not logging.getLogger(n).propagate for n in EXTRACTOR_LOGGERS)


def test_a_page_without_text_logs_nothing_above_debug(at_root):
    # The page trafilatura discards with a warning (trafilatura 2.x, core.py "discarding data"): the
    # document says why (empty), the log says it at debug level only.
    from linkfold.content.extract import extract_document
    from linkfold.content.pages import Page

    page = Page(url="https://quiet-desk.example/b", final_url="https://quiet-desk.example/b", status=200,
                headers={"content-type": "text/html"}, body=EMPTY_PAGE.encode(), fetched_at=None, source="test")
    doc = extract_document(page)
    assert doc.unusable_reason is not None and doc.unusable_reason.value == "empty"
    assert [(r.name, r.getMessage()) for r in at_root.records if r.levelno >= logging.WARNING] == []
    assert any("discarding data" in r.getMessage() and r.name == "linkfold.extractor" for r in at_root.records)


@pytest.fixture(autouse=True)
def _restore_logging():
    root = logging.getLogger()
    handlers, level = list(root.handlers), root.level
    yield
    for h in root.handlers[:]:
        if h not in handlers:
            root.removeHandler(h)
    root.setLevel(level)


def test_nightly_summary_gives_discarded_pages_and_failures_by_reason():
    from linkfold.jobs.nightly import NightlySummary, StageOutcome

    summary = NightlySummary(run_id=7, stages=[
        StageOutcome("extract", "ok", counts={"selected": 9, "usable": 5, "no_text": {"empty": 1, "paywall": 3}}),
        StageOutcome("follow", "ok", counts={"selected": 4, "resolved": 1, "failed": {"dns": 2},
                                             "refused": {"refused": 1}}),
    ])
    lines = summary.lines()
    assert "selected 9, usable 5; no_text: empty 1, paywall 3" in lines[1]
    assert "failed: dns 2; refused: refused 1" in lines[2]


def test_quiet_nightly_names_a_failed_stage(sqlite_url, monkeypatch, capsys):
    # A stage that breaks (here dedupe, made to raise): the other stages ran, the job exits 10, and even
    # under -q stderr says which stage failed and why, so a cron mail is sent and says something useful.
    import linkfold.dedupe.stage as dedupe_stage

    def broken(*_a, **_k):
        raise RuntimeError("disk full while writing clusters")

    monkeypatch.setattr(dedupe_stage, "count_pending", lambda *_a, **_k: 1)
    monkeypatch.setattr(dedupe_stage, "run_dedupe", broken)
    assert main(["-q", "--db", sqlite_url, "nightly"]) == 10
    out, err = capsys.readouterr()
    assert out == ""
    assert "dedupe: RuntimeError: disk full while writing clusters" in err and "linkfold runs show" in err


def test_main_gives_the_process_its_logging_back(tmp_path, capsys):
    """A script (or a test) that calls `main` in process keeps its own logging afterwards: the command's
    stderr handler, its root level and the capture of warnings last only as long as the command."""
    root = logging.getLogger()
    before = (list(root.handlers), root.level, logging.getLogger("py.warnings").handlers[:])
    db = f"sqlite:///{tmp_path / 'r.db'}"
    assert main(["-q", "--db", db, "db", "upgrade"]) == 0
    assert main(["-vv", "--db", db, "db", "current"]) == 0
    assert (list(root.handlers), root.level, logging.getLogger("py.warnings").handlers[:]) == before
    assert not logging._warnings_showwarning  # type: ignore[attr-defined]  # captureWarnings(False)


def test_quiet_still_names_the_bad_lines_of_an_input(tmp_path, capsys):
    """-q silences progress and summaries, not a bad line a person has to fix: file, line and reason."""
    db = f"sqlite:///{tmp_path / 'r.db'}"
    docs = tmp_path / "texts.jsonl"
    docs.write_text('{"url": "https://a.example/x", "title": "t", "text": "w", "published": "2999-01-01"}\n'
                    "not json\n", encoding="utf-8")
    assert main(["-q", "--db", db, "db", "upgrade"]) == 0
    capsys.readouterr()
    assert main(["-q", "--db", db, "documents", "load", str(docs)]) == 0
    err = capsys.readouterr().err
    assert "texts.jsonl:1: bad_time" in err and "texts.jsonl:2:" in err
    assert "loaded" not in err  # the summary stays quiet
