"""The executor: three forms (in process, a local process pool, a Dask cluster) give identical results.

The Dask cluster is real: a ``distributed.LocalCluster`` with worker processes on loopback, started here.
What is compared are the pure tasks the stages hand over: canonicalisation (against the RFC 3986 cases of
tests/cases/canon.tsv and generated URLs), MinHash signatures (generated texts) and extraction (the demo's
pages). The canonical forms are also checked against the case file's expected column, so "identical" is
identical to a published reference, not only to each other.
"""

from __future__ import annotations

import csv
import random
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path

import pytest
import sqlalchemy as sa

from linkfold.canon import Canonical, load_rules
from linkfold.canon.batch import canonicalize_batch
from linkfold.content.batch import ExtractJob, extract_batch
from linkfold.content.pages import Page
from linkfold.dedupe.batch import signature_batch
from linkfold.dedupe.minhash import SignatureParams
from linkfold.errors import ConfigError
from linkfold.executor import InProcess, ProcessPool, _ordered, choose, make_executor
from linkfold.store import make_engine, upgrade

# every common-practice fold off: the RFC's own examples in the case file are checked as written there
from test_canon_cases import SYNTAX_ONLY

ROOT = Path(__file__).resolve().parent.parent
CASES = ROOT / "tests" / "cases" / "canon.tsv"
PAGES = ROOT / "service" / "linkfold" / "demo_data" / "pages"




def _syntax_cases() -> list[tuple[str, str]]:
    with CASES.open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t", quoting=csv.QUOTE_NONE))
    # control characters are written as \uXXXX in the case file; the cases without them are enough here
    return [(r["input"], r["expected"]) for r in rows if r["rules"] == "syntax-only" and "\\u" not in r["input"]]


def _urls(n: int, seed: int = 7) -> list[str]:
    rng = random.Random(seed)
    hosts = ["riverton-daily.example", "WWW.Lakeside-Wire.example", "news.northvale.test"]
    tails = ["?utm_source=x&id=4", "#top", "?b=2&a=1", "", "/./x/../y", "?fbx=1"]
    out = [f"HTTP://{rng.choice(hosts)}/a/{rng.randrange(10**6)}{rng.choice(tails)}" for _ in range(n)]
    out += ["", "mailto:someone@riverton-daily.example", "http://[::1/"]  # refusals travel too
    return out


def _texts(n: int, seed: int = 11) -> list[str]:
    rng = random.Random(seed)
    words = [f"w{i}" for i in range(400)]
    return [" ".join(rng.choice(words) for _ in range(rng.randrange(0, 300))) for _ in range(n)]


def _pages() -> list[Page]:
    with (PAGES / "pages.tsv").open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t"))
    when = datetime(2026, 11, 1, 12, tzinfo=UTC)
    return [Page(url=r["url"], final_url=r["url"], status=200, headers={"content-type": "text/html"},
                 body=(PAGES / r["file"]).read_bytes(), fetched_at=when, source=f"dir:pages.tsv:{i}")
            for i, r in enumerate(rows, start=2)]


def _chunks(items: list, size: int) -> Iterator[list]:
    for lo in range(0, len(items), size):
        yield items[lo:lo + size]


def _run_all(executor) -> dict[str, list]:
    demo = load_rules(ROOT / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml")
    params = SignatureParams()
    now = datetime(2026, 12, 1, tzinfo=UTC)
    # the RFC cases under the syntax-only rules first, then generated URLs under the built-in and the
    # demo's rules: every ruleset travels to the workers by value
    jobs = [(SYNTAX_ONLY, [raw for raw, _ in _syntax_cases()])]
    jobs += [(rules, chunk) for rules in (None, demo) for chunk in _chunks(_urls(300), 37)]
    canon = [o for part in executor.map(canonicalize_batch, jobs) for o in part]
    sigs = [s for part in executor.map(signature_batch, ((params, c) for c in _chunks(_texts(120), 25)))
            for s in part]
    docs = [d for part in executor.map(extract_batch, (ExtractJob(c, now=now) for c in _chunks(_pages(), 3)))
            for d in part]
    return {"canon": canon, "signatures": sigs, "documents": docs}


@pytest.fixture(scope="module")
def reference() -> dict[str, list]:
    return _run_all(InProcess())


def test_in_process_canonical_forms_match_rfc3986_cases(reference) -> None:
    # RFC 3986 §6.2.2 (syntax-based normalisation): the expected column of tests/cases/canon.tsv
    cases = _syntax_cases()
    got = reference["canon"][:len(cases)]
    for (raw, expected), outcome in zip(cases, got, strict=True):
        if expected.startswith("!"):  # a refusal in the case file: "!reason"
            assert isinstance(outcome, tuple) and outcome[0] == expected[1:], raw
        else:
            assert isinstance(outcome, Canonical) and outcome.url == expected, raw


def test_refusals_travel_as_reason_codes(reference) -> None:
    tail = reference["canon"][-3:]
    assert [o[0] for o in tail if isinstance(o, tuple)] == [o[0] for o in tail]  # all three refused
    assert all(isinstance(o[0], str) and o[0] for o in tail)


def test_process_pool_gives_identical_results(reference) -> None:
    with ProcessPool(2) as pool:
        assert _run_all(pool) == reference


@pytest.fixture(scope="module")
def dask_cluster() -> Iterator[str]:
    distributed = pytest.importorskip("distributed")
    # Worker processes on loopback only, no dashboard (it would open another port and import bokeh).
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  scheduler_port=0, dashboard_address=None) as cluster:
        yield cluster.scheduler_address


def test_dask_cluster_gives_identical_results(reference, dask_cluster: str) -> None:
    assert dask_cluster.startswith("tcp://127.0.0.1:")
    with make_executor(dask_cluster) as executor:
        assert executor.workers == 2
        assert _run_all(executor) == reference


def test_rules_travel_to_the_workers(tmp_path: Path) -> None:
    rules_file = tmp_path / "lab.toml"
    rules_file.write_text('[site."riverton-daily.example"]\nkeep_params = ["id"]\n', encoding="utf-8")
    rules = load_rules(rules_file)
    urls = ["https://riverton-daily.example/a?id=4&utm_source=x&zz=1"]
    here = canonicalize_batch((rules, urls))
    with ProcessPool(1) as pool:
        assert list(pool.map(canonicalize_batch, [(rules, urls)])) == [here]


def test_a_ruleset_survives_pickling_whole(tmp_path: Path) -> None:
    import pickle

    demo = load_rules(ROOT / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml")
    back = pickle.loads(pickle.dumps(demo))
    assert back == demo and back.digest == demo.digest and dict(back.sites).keys() == dict(demo.sites).keys()
    raw = "https://www.harbourview-news.example/story?id=7&utm_medium=x&ref=y"
    assert canonicalize_batch((back, [raw])) == canonicalize_batch((demo, [raw]))


def test_choose_decides_auto_by_cores() -> None:
    assert choose("auto", workers=1).form == "inprocess"
    assert choose("auto", workers=4) == choose("processes", workers=4)
    assert choose("processes", workers=3).workers == 3
    assert choose("inprocess", workers=8).workers == 1
    assert choose("tcp://127.0.0.1:8786").form == "tcp://127.0.0.1:8786"


@pytest.mark.parametrize("spec", ["threads", "http://127.0.0.1:8786", "proceses"])
def test_unknown_forms_are_refused_with_the_choices(spec: str) -> None:
    with pytest.raises(ConfigError, match="inprocess, processes"):
        choose(spec)


def test_negative_workers_are_refused() -> None:
    with pytest.raises(ConfigError, match="workers"):
        choose("processes", workers=-1)


def test_an_unreachable_scheduler_is_a_clear_error() -> None:
    # Port 9 on loopback (discard) has no scheduler here; nothing leaves the machine.
    with pytest.raises(ConfigError, match="cannot reach the Dask scheduler"):
        make_executor("tcp://127.0.0.1:9", timeout=2)


class _Handles:
    """A fake submitter that records what is in flight and what was cancelled."""

    def __init__(self) -> None:
        self.in_flight = 0
        self.most = 0
        self.cancelled: list[int] = []

    def submit(self, item: int) -> int:
        self.in_flight += 1
        self.most = max(self.most, self.in_flight)
        return item

    def result(self, handle: int) -> int:
        self.in_flight -= 1
        return handle * 10

    def cancel(self, handle: int) -> None:
        self.cancelled.append(handle)


def test_results_come_in_order_with_a_bounded_window() -> None:
    h = _Handles()
    out = list(_ordered(h.submit, h.result, h.cancel, range(100), 4))
    assert out == [i * 10 for i in range(100)]
    assert h.most == 4 and h.cancelled == []


def test_a_consumer_that_stops_cancels_what_is_queued() -> None:
    h = _Handles()
    gen = _ordered(h.submit, h.result, h.cancel, range(100), 5)
    assert [next(gen) for _ in range(3)] == [0, 10, 20]
    gen.close()  # what Ctrl-C in the consumer does to the generator
    assert h.cancelled == [3, 4, 5, 6]  # submitted, not yet read: at most the window, minus the one read


def test_a_failing_batch_raises_in_the_consumer() -> None:
    with ProcessPool(1) as pool, pytest.raises(ValueError):
        list(pool.map(int, ["1", "2", "not a number"]))


# --- the extraction stage on each form --------------------------------------------------------------------

def _stage_world(url: str, tmp_path: Path) -> sa.Engine:
    """The demo's pages plus generated articles, imported through the real page import."""
    from linkfold.content.page_import import import_pages

    engine = make_engine(url)
    upgrade(engine)
    folder = tmp_path / "pages"
    folder.mkdir(parents=True, exist_ok=True)
    lines = ["file\turl\tfetched_at"]
    for page in _pages():
        name = page.url.rsplit("/", 1)[-1].replace("?", "_").replace("=", "_") + ".html"
        (folder / name).write_bytes(page.body)
        lines.append(f"{name}\t{page.url}\t2026-11-01T12:00:00Z")
    rng = random.Random(5)
    for i in range(24):
        words = " ".join(rng.choice(["harbour", "bridge", "council", "storm", "library", "ferry"])
                         for _ in range(220))
        html = (f"<html><head><title>Generated story {i}</title></head><body><article><h1>Generated story {i}"
                f"</h1><p>{words}.</p></article></body></html>")
        (folder / f"gen-{i}.html").write_text(html, encoding="utf-8")
        lines.append(f"gen-{i}.html\thttps://riverton-daily.test/story/generated-{i}\t2026-11-01T12:00:00Z")
    (folder / "pages.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    import_pages(engine, [folder])
    return engine


def _documents(engine: sa.Engine) -> list[tuple]:
    from linkfold.store import tables as t

    with engine.connect() as conn:
        q = (sa.select(t.canonical_urls.c.url, t.documents.c.state, t.documents.c.reason,
                       t.documents.c.title, t.documents.c.text_hash, t.documents.c.published,
                       t.documents.c.word_count, t.documents.c.extractor_version)
             .join(t.canonical_urls, t.canonical_urls.c.id == t.documents.c.canonical_id)
             .order_by(t.canonical_urls.c.url))
        docs = [tuple(r) for r in conn.execute(q)]
        links = sorted(tuple(r) for r in conn.execute(sa.select(t.links.c.kind, t.links.c.src_id, t.links.c.dst_id)))
    return docs + links


def test_the_extraction_stage_stores_the_same_on_every_form(tmp_path: Path, dask_cluster: str) -> None:
    from linkfold.content.extracting import extract_pages

    results = {}
    for name, make in [("inprocess", InProcess), ("processes", lambda: ProcessPool(2)),
                       ("dask", lambda: make_executor(dask_cluster))]:
        engine = _stage_world(f"sqlite:///{tmp_path / (name + '.db')}", tmp_path / name)
        with make() as executor:
            summary = extract_pages(engine, batch_size=4, executor=executor)
        assert summary.selected == summary.stored > 24  # several batches of 4
        results[name] = (_documents(engine), summary.usable, dict(summary.no_text))
        engine.dispose()
    assert results["processes"] == results["inprocess"]
    assert results["dask"] == results["inprocess"]


def test_dedupe_gives_the_same_registry_on_every_form(tmp_path: Path, dask_cluster: str, monkeypatch) -> None:
    """Signing through the executor, in chunks over the workers, leaves exactly the registry (signatures,
    band keys, clusters, IDs) that signing in process leaves (tests/dedupe_world.py: near-duplicate
    families on invented outlets)."""
    from dedupe_world import bulk_world, registry_snapshot, settings
    from linkfold.dedupe.stage import run_dedupe, signing

    monkeypatch.setattr(signing, "SIGN_CHUNK", 20)  # several tasks per batch of 50
    snapshots = {}
    for name, make in [("inprocess", InProcess), ("processes", lambda: ProcessPool(2)),
                       ("dask", lambda: make_executor(dask_cluster))]:
        engine = make_engine(f"sqlite:///{tmp_path / (name + '.db')}")
        upgrade(engine)
        (tmp_path / name).mkdir()
        bulk_world(engine, tmp_path / name, 40)
        with make() as executor:
            summary = run_dedupe(engine, settings=settings(), executor=executor)
        assert summary.signing.signed > 50
        with engine.connect() as conn:
            sigs = conn.execute(sa.text("SELECT document_id, signature FROM signatures ORDER BY 1")).all()
        snapshots[name] = (registry_snapshot(engine), sigs)
        engine.dispose()
    assert snapshots["processes"] == snapshots["inprocess"]
    assert snapshots["dask"] == snapshots["inprocess"]
