"""Every stage offers the same surface (DEVELOPERS.md, "How to add a stage"), on both backends.

A stage module has ``STAGE`` (its name in the run log), ``count_pending(engine, *, settings=None)`` (a cheap
count of the work it would do now) and its run function, which takes ``parent_run`` (keyword) and returns a
summary that is a :class:`linkfold.store.runs.StageSummary`: ``run_id`` (the run it recorded, a child of
``parent_run``), ``as_dict()`` (JSON as it is, and what the run log stores as the run's counts) and
``lines()`` (for a person). The test walks the pipeline in order over one invented world on the loopback
server: every stage runs with work to do, and what it left pending is checked after.

The JSON check is the standard library's ``json.dumps`` without a fallback (RFC 8259 data only).
"""

from __future__ import annotations

import inspect
import json
from pathlib import Path

import pytest
import sqlalchemy as sa

from httpserver import LoopbackOnlyBackend
from httpserver import loopback_settings as settings_for
from linkfold.canon import parse_rules
from linkfold.store import tables as t
from linkfold.store.rulesets import store_ruleset
from linkfold.store.runs import StageSummary, finish_run, start_run
from linkfold.web.guard import StaticResolver

NAMES = {"short.test": ["127.0.0.1"], "news.test": ["127.0.0.1"]}

# module, its run function: every stage of the package. A new stage adds a line here and a step below.
STAGES = [
    ("linkfold.ingest.load", "ingest_dump"),
    ("linkfold.ingest.recanon", "recanonicalize"),
    ("linkfold.follow.imports", "import_redirects"),
    ("linkfold.follow.stage", "follow_links"),
    ("linkfold.content.fetching", "fetch_pages"),
    ("linkfold.content.page_import", "import_pages"),
    ("linkfold.content.loading", "load_documents"),
    ("linkfold.content.extracting", "extract_pages"),
    ("linkfold.dedupe.stage", "run_dedupe"),
]

TEXT = ("The harbour board of the invented town of Northvale agreed on Tuesday to rebuild the old pier "
        "before the winter storms, after two years of talks with the fishing families who moor there. ")


@pytest.mark.parametrize(("module", "function"), STAGES)
def test_every_stage_module_offers_the_surface(module, function):
    import importlib

    mod = importlib.import_module(module)
    assert isinstance(mod.STAGE, str) and mod.STAGE
    pending = inspect.signature(mod.count_pending)
    assert pending.parameters["settings"].kind is inspect.Parameter.KEYWORD_ONLY
    assert pending.parameters["settings"].default is None
    run = inspect.signature(getattr(mod, function))
    assert run.parameters["parent_run"].kind is inspect.Parameter.KEYWORD_ONLY
    assert run.parameters["parent_run"].default is None
    assert "progress" in run.parameters


def test_the_nightly_job_runs_stages_through_the_surface():
    from linkfold.jobs.nightly import DEFAULT_STAGES

    known = {(m, f) for m, f in STAGES}
    for stage in DEFAULT_STAGES:
        mod = stage.module()
        assert (mod.__name__, stage.run) in known
        assert stage.name == mod.STAGE


def _check(engine, mod, summary, parent: int, before: int, *, drains: bool) -> None:
    """The contract, for one run of one stage."""
    assert isinstance(summary, StageSummary)
    data = summary.as_dict()
    text = json.dumps(data)  # no default=: plain JSON types only
    assert data.get("run_id") == summary.run_id
    lines = summary.lines()
    assert lines and all(isinstance(line, str) and line for line in lines)
    with engine.connect() as conn:
        run = conn.execute(sa.select(t.runs).where(t.runs.c.id == summary.run_id)).mappings().one()
    assert run["parent_id"] == parent and run["stage"] == mod.STAGE and run["state"] == "ok"
    assert run["counts"] == json.loads(text)  # the run log holds what as_dict() says
    after = mod.count_pending(engine)
    assert isinstance(after, int) and after >= 0
    if drains:
        assert before > 0 and after == 0, (mod.STAGE, before, after)
    else:
        assert before == after == 0, (mod.STAGE, before, after)


def test_every_stage_keeps_the_contract(engine, db_url, tmp_path: Path, server):
    from linkfold.content import extracting, fetching, loading, page_import
    from linkfold.dedupe import stage as dedupe
    from linkfold.follow import imports, stage
    from linkfold.ingest import load, recanon

    settings = settings_for(db_url)
    parent = start_run(engine, "contract")
    net = {"resolver": StaticResolver(NAMES), "backend": LoopbackOnlyBackend()}
    short = server.url("/to?status=301&loc=/final/story-1", host="short.test")
    story = server.url("/final/story-2", host="news.test")

    # ingest: its pending work is interrupted loads, and there are none before or after.
    dump = tmp_path / "panel.txt"
    dump.write_text(f"{short}\n{story}\n", encoding="utf-8")
    before = load.count_pending(engine)
    got = load.ingest_dump(engine, [dump], dataset="panel", parent_run=parent)
    _check(engine, load, got, parent, before, drains=False)

    # recanonicalize: a new ruleset leaves every raw URL pending.
    with engine.begin() as conn:
        store_ruleset(conn, parse_rules('shortener_hosts = ["short.test"]\n'), name="contract")
    before = recanon.count_pending(engine)
    _check(engine, recanon, recanon.recanonicalize(engine, settings=settings, parent_run=parent), parent, before,
           drains=True)

    # import redirects: pairs from a file.
    pairs = tmp_path / "pairs.csv"
    pairs.write_text("short,expanded\nhttps://short.test/k3x,https://news.test/final/story-9\n", encoding="utf-8")
    before = imports.count_pending(engine)
    _check(engine, imports, imports.import_redirects(engine, pairs, parent_run=parent), parent, before,
           drains=False)

    # follow: the short link on the ruleset's shortener host.
    before = stage.count_pending(engine)
    _check(engine, stage, stage.follow_links(engine, settings=settings, parent_run=parent, **net), parent,
           before, drains=True)

    # fetch: every canonical URL without a page (the short links too); failures wait for their due time.
    before = fetching.count_pending(engine)
    _check(engine, fetching, fetching.fetch_pages(engine, settings=settings, parent_run=parent,
                                                  resolver=StaticResolver(NAMES), backend=LoopbackOnlyBackend()),
           parent, before, drains=True)

    # import pages and load documents: their work is the files they are given.
    page = tmp_path / "pages.jsonl"
    html = f"<html><head><title>Pier to be rebuilt</title></head><body><article><p>{TEXT * 3}</p></article></body></html>"
    page.write_text(json.dumps({"url": "https://news.test/final/story-3", "html": html}) + "\n", encoding="utf-8")
    before = page_import.count_pending(engine)
    _check(engine, page_import, page_import.import_pages(engine, [page], parent_run=parent), parent, before,
           drains=False)
    docs = tmp_path / "docs.jsonl"
    docs.write_text(json.dumps({"url": "https://news.test/final/story-4", "title": "Pier to be rebuilt",
                                "text": TEXT * 3}) + "\n", encoding="utf-8")
    before = loading.count_pending(engine)
    _check(engine, loading, loading.load_documents(engine, docs, parent_run=parent), parent, before, drains=False)

    # extract: the fetched and imported pages.
    before = extracting.count_pending(engine)
    _check(engine, extracting, extracting.extract_pages(engine, parent_run=parent), parent, before, drains=True)

    # dedupe: the new documents.
    before = dedupe.count_pending(engine, settings=settings)
    got = dedupe.run_dedupe(engine, settings=settings, parent_run=parent)
    assert isinstance(got, StageSummary)
    _check(engine, dedupe, got, parent, before, drains=True)

    finish_run(engine, parent, status="ok")
    with engine.connect() as conn:
        children = conn.execute(sa.select(t.runs.c.stage).where(t.runs.c.parent_id == parent)
                                .order_by(t.runs.c.id)).scalars().all()
    assert children == [m.STAGE for m in (load, recanon, imports, stage, fetching, page_import, loading,
                                          extracting, dedupe)]
