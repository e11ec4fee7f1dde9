"""ingest_dump on both backends: provenance, rejects for every class of bad input, idempotency, appends,
resumption after a crash, and what is (not) stored.

The dump contents are invented (reserved .example names) — behaviour tests, not reference checks;
the checks against outside references are the SHA-256 digests (hashlib) and the canonical forms, which
come from the canonicaliser's own standards-backed tests.
"""

from __future__ import annotations

import gzip
import hashlib
import json
from collections import Counter

import pytest
import sqlalchemy as sa

from linkfold.errors import DumpFormatError, InputError, LockHeld, MissingColumnError
from linkfold.ingest import FileOutcome, ingest_dump
from linkfold.ingest import load as load_module
from linkfold.store import loads
from linkfold.store import tables as t
from linkfold.store.clock import utc
from linkfold.store.datasets import create_file, dataset_files, ensure_dataset, get_dataset, iter_rejects
from linkfold.store.loads import write_batch

TABLES = ("datasets", "dataset_files", "raw_urls", "canonical_urls", "sightings", "rejects")


def counts(engine) -> dict[str, int]:
    with engine.connect() as conn:
        return {name: conn.execute(sa.select(sa.func.count()).select_from(t.metadata.tables[name])).scalar_one()
                for name in TABLES}


def rejects(engine) -> list[tuple[int, int, str]]:
    with engine.connect() as conn:
        return [tuple(r) for r in conn.execute(sa.select(t.rejects.c.line_no, t.rejects.c.position,
                                                         t.rejects.c.reason).order_by(t.rejects.c.line_no,
                                                                                      t.rejects.c.position))]


def sightings(engine) -> list[tuple]:
    with engine.connect() as conn:
        q = (sa.select(t.sightings.c.line_no, t.sightings.c.position, t.sightings.c.row_key, t.raw_urls.c.raw,
                       t.canonical_urls.c.url)
             .select_from(t.sightings.join(t.raw_urls, t.raw_urls.c.id == t.sightings.c.raw_url_id)
                          .outerjoin(t.canonical_urls, t.canonical_urls.c.id == t.raw_urls.c.canonical_id))
             .order_by(t.sightings.c.file_id, t.sightings.c.line_no, t.sightings.c.position))
        return [tuple(r) for r in conn.execute(q)]


PANEL = (
    "visit_id,url,visited,browser\n"
    "v1,https://www.daily-harbour.example/2031/05/bridge?utm_source=feed,2031-05-04T08:00:00Z,alpha\n"
    "v2,https://daily-harbour.example/2031/05/bridge,1935649200,beta\n"
    "v3,https://valley-post.test/story/42,2031-05-04 09:30,alpha\n"
)


def test_load_stores_provenance_sightings_and_counts(engine, tmp_path):
    path = tmp_path / "panel-week1.csv"
    path.write_text(PANEL)
    summary = ingest_dump(engine, [path], dataset="panel", key_column="visit_id", time_column="visited",
                          description="invented panel, week 1")
    assert (summary.rows, summary.sightings, summary.new_raw_urls) == (3, 3, 3)
    assert summary.files[0].outcome is FileOutcome.LOADED and not summary.rejects
    with engine.connect() as conn:
        ds = get_dataset(conn, "panel")
        assert ds["description"] == "invented panel, week 1" and ds["ruleset_id"] == summary.ruleset_version
        (f,) = dataset_files(conn, ds["id"])
        # Provenance: the file's name (never its folder), its SHA-256 (hashlib as reference) and size.
        assert f["file_name"] == "panel-week1.csv"
        assert f["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
        assert f["size_bytes"] == path.stat().st_size
        assert (f["state"], f["rows"], f["sightings"], f["rejects"]) == ("complete", 3, 3, 0)
        assert f["loaded_at"] is not None and f["options"]["key_column"] == "visit_id"
        run = conn.execute(sa.select(t.runs).where(t.runs.c.id == summary.run_id)).mappings().one()
        assert run["stage"] == "ingest" and run["state"] == "ok" and run["counts"]["sightings"] == 3
    rows = sightings(engine)
    assert [r[2] for r in rows] == ["v1", "v2", "v3"]
    # Raw URLs are verbatim; the first two fold onto one canonical URL (tracking parameter, www).
    assert rows[0][3].endswith("?utm_source=feed")
    assert summary.new_canonical_urls == counts(engine)["canonical_urls"]
    with engine.connect() as conn:
        times = conn.execute(sa.select(t.sightings.c.seen_at).order_by(t.sightings.c.line_no)).scalars().all()
    assert [utc(x).isoformat() for x in times] == [
        "2031-05-04T08:00:00+00:00", "2031-05-04T08:20:00+00:00", "2031-05-04T09:30:00+00:00"]


def test_nothing_but_url_key_and_time_is_stored(engine, tmp_path):
    path = tmp_path / "panel.csv"
    path.write_text("visit_id,url,visited,panelist_email\n"
                    "v1,https://a.example/1,2031-05-04T08:00:00Z,someone@mail.example\n"
                    "v2,https://a.example/2,bad-time,other@mail.example\n")
    ingest_dump(engine, [path], dataset="panel", key_column="visit_id", time_column="visited")
    with engine.connect() as conn:
        for table in t.metadata.sorted_tables:
            for row in conn.execute(sa.select(table)):
                assert "mail.example" not in json.dumps([str(v) for v in row]), table.name


def test_a_reject_for_every_class_of_bad_input_and_no_row_lost(engine, tmp_path):
    long_url = "https://a.example/" + "x" * 300
    csv_path = tmp_path / "bad.csv"
    csv_path.write_bytes(
        b"id,url,t\n"
        b'1,"https://a.example/open,2031-05-04\n'  # 2: unterminated quote (malformed_csv)
        b"2,https://a.example/\xff,2031-05-04\n"  # 3: invalid UTF-8
        + b"3," + long_url.encode() + b",2031-05-04\n"  # 4: over-long line (limit 200 below)
        + b"4,https://a.example/short\n"  # 5: too few fields (missing_column)
        b"5,javascript:alert(1),2031-05-04\n"  # 6: unparsable URL, kept as raw URL
        b"6,https://a.example/t,not-a-time\n"  # 7: bad time, sighting kept
        b",https://a.example/k,2031-05-04\n"  # 8: missing key, line number as key
        b"8,,2031-05-04\n"  # 9: no URL
        b"9,https://a.example/\x00nul,2031-05-04\n"  # 10: NUL: stored as U+FFFD, control_chars
        b"10,https://a.example/ok,2031-05-04,extra\n"  # 11: too many fields
        b"11,https://a.example/fine,2031-05-04\n"  # 12: fine
    )
    jsonl_path = tmp_path / "bad.jsonl"
    jsonl_path.write_text('{"id": 1, "links": [{"url": "https://a.example/j1"}, {"url": 42}]}\n'
                          '{"id": 2}\n'
                          "{broken\n")
    summary = ingest_dump(engine, [csv_path], dataset="bad", key_column="id", time_column="t",
                          max_line_bytes=200)
    posts = ingest_dump(engine, [jsonl_path], dataset="bad-posts", url_column="links.*.url", key_column="id")
    found = rejects(engine)
    expected_csv = {(2, -1, "malformed_csv"), (3, -1, "invalid_utf8"), (4, -1, "line_too_long"),
                    (5, -1, "missing_column"), (6, 0, "not_http"), (7, -2, "bad_time"), (8, -1, "missing_key"),
                    (10, 0, "control_chars"), (11, -1, "field_count")}
    expected_jsonl = {(1, 1, "not_text"), (3, -1, "bad_json")}
    assert set(found) == expected_csv | expected_jsonl
    assert Counter(summary.rejects) == Counter(r for _l, _p, r in expected_csv)
    # A row without a URL (line 9; the post without links) is counted, not rejected.
    assert (summary.rows_without_url, posts.rows_without_url) == (1, 1)
    assert summary.as_dict()["rows_without_url"] == 1 and "1 row without a URL" in "\n".join(summary.lines())
    # Every other data line of the CSV left a sighting or a reject: nothing vanished.
    traced = {line for line, *_ in sightings(engine)} | {line for line, _p, _r in found}
    assert set(range(2, 13)) - traced == {9}
    by_line = {r[0]: r for r in sightings(engine)}
    assert by_line[6][3] == "javascript:alert(1)" and by_line[6][4] is None  # kept, not canonical
    assert by_line[7][4] == "https://a.example/t"  # bad time: sighting kept
    assert by_line[8][2] == "8"  # missing key: the line number
    assert by_line[10][3] == "https://a.example/\ufffdnul" and by_line[10][4] is None
    with engine.connect() as conn:
        errors = dict(conn.execute(sa.select(t.raw_urls.c.raw, t.raw_urls.c.reason)).all())
        rows = list(iter_rejects(conn, get_dataset(conn, "bad")["id"]))
    assert errors["javascript:alert(1)"] == "not_http"
    assert errors["https://a.example/\ufffdnul"] == "control_chars"
    assert all(r["file"] == "bad.csv" and r["detail"] for r in rows)
    assert next(r for r in rows if r["reason"] == "not_http")["excerpt"] == "javascript:alert(1)"


def test_several_urls_in_one_row_give_several_sightings(engine, tmp_path):
    path = tmp_path / "posts.jsonl"
    path.write_text(json.dumps({"id": "p1", "entities": {"links": [
        {"url": "https://a.example/1"}, {"url": "https://b.example/2"}, {"url": "https://c.example/3"}]}}) + "\n")
    summary = ingest_dump(engine, [path], dataset="posts", url_column="entities.links.*.url", key_column="id")
    assert summary.sightings == 3
    assert [(r[0], r[1], r[2]) for r in sightings(engine)] == [(1, 0, "p1"), (1, 1, "p1"), (1, 2, "p1")]


def test_gzip_input(engine, tmp_path):
    path = tmp_path / "urls.txt.gz"
    path.write_bytes(gzip.compress(b"https://a.example/1\nhttps://a.example/2\n"))
    summary = ingest_dump(engine, [path], dataset="list")
    assert summary.sightings == 2 and [r[2] for r in sightings(engine)] == ["1", "2"]


def test_missing_url_column_fails_before_writing(engine, tmp_path):
    good = tmp_path / "good.csv"
    good.write_text("url\nhttps://a.example/1\n")
    wrong = tmp_path / "wrong.csv"
    wrong.write_text("id,link\n1,https://a.example/\n")
    with pytest.raises(MissingColumnError) as err:
        ingest_dump(engine, [good, wrong], dataset="d", url_column="url")
    assert "wrong.csv" in str(err.value) and "'id', 'link'" in str(err.value)
    assert all(n == 0 for n in counts(engine).values())
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(t.runs)).scalar_one() == 0


def test_not_json_lines_fails_before_writing(engine, tmp_path):
    path = tmp_path / "x.jsonl"
    path.write_text("url\nhttps://a.example/\n")
    with pytest.raises(DumpFormatError):
        ingest_dump(engine, [path], dataset="d")
    assert all(n == 0 for n in counts(engine).values())


def test_same_file_twice_adds_nothing_and_says_so(engine, tmp_path):
    path = tmp_path / "panel.csv"
    path.write_text(PANEL)
    ingest_dump(engine, [path], dataset="panel", key_column="visit_id")
    before = counts(engine)
    copy = tmp_path / "renamed-copy.csv"
    copy.write_bytes(path.read_bytes())
    again = ingest_dump(engine, [copy], dataset="panel", key_column="visit_id")
    assert again.files[0].outcome is FileOutcome.ALREADY_LOADED
    assert not again.added_anything and "nothing new" in "\n".join(again.lines())
    assert counts(engine) == before


def test_different_file_appends_and_other_dataset_is_separate(engine, tmp_path):
    a = tmp_path / "a.csv"
    a.write_text("url\nhttps://a.example/1\nhttps://a.example/2\n")
    b = tmp_path / "b.csv"
    b.write_text("url\nhttps://a.example/2\nhttps://a.example/3\n")
    ingest_dump(engine, [a], dataset="d")
    second = ingest_dump(engine, [b], dataset="d")
    assert (second.sightings, second.new_raw_urls) == (2, 1)  # a.example/2 was known already
    third = ingest_dump(engine, [a], dataset="other")
    assert third.files[0].outcome is FileOutcome.LOADED and third.new_raw_urls == 0
    c = counts(engine)
    assert (c["datasets"], c["dataset_files"], c["sightings"], c["raw_urls"]) == (2, 3, 6, 3)


class _Crash(Exception):
    pass


def _crash_after(monkeypatch, calls: int, exc: type[BaseException] = _Crash) -> None:
    """Make the canonicaliser fail on its ``calls``-th URL: the load dies mid-batch, like a kill would."""
    real = load_module.Canonicaliser

    class Dying(real):  # type: ignore[misc, valid-type]
        seen = 0

        def __call__(self, raw):
            Dying.seen += 1
            if Dying.seen == calls:
                raise exc("simulated crash")
            return super().__call__(raw)

    monkeypatch.setattr(load_module, "Canonicaliser", Dying)


@pytest.mark.parametrize("interrupt", [_Crash, KeyboardInterrupt])
def test_crash_mid_load_keeps_whole_batches_and_rerun_completes(engine, tmp_path, monkeypatch, interrupt):
    path = tmp_path / "big.csv"
    lines = ["id,url,t"] + [f"r{i},https://a.example/{i % 37}/{i},{'bad' if i % 11 == 0 else '2031-05-04'}"
                            for i in range(1, 1001)]
    path.write_text("\n".join(lines) + "\n")
    _crash_after(monkeypatch, 437, interrupt)
    with pytest.raises(interrupt):
        ingest_dump(engine, [path], dataset="d", key_column="id", time_column="t", batch_size=100)
    with engine.connect() as conn:
        (f,) = conn.execute(sa.select(t.dataset_files)).mappings().all()
        run = conn.execute(sa.select(t.runs)).mappings().one()
    # Four whole batches of 100 rows were committed, the fifth rolled back.
    assert (f["state"], f["rows"], f["sightings"], f["lines_done"]) == ("loading", 400, 400, 401)
    assert counts(engine)["sightings"] == 400
    assert run["state"] == ("interrupted" if interrupt is KeyboardInterrupt else "failed")
    monkeypatch.undo()
    summary = ingest_dump(engine, [path], dataset="d", key_column="id", time_column="t", batch_size=100)
    assert summary.files[0].outcome is FileOutcome.RESUMED and summary.files[0].resumed_after_line == 401
    assert summary.rows == 600
    c = counts(engine)
    assert c["sightings"] == 1000 and c["rejects"] == 1000 // 11
    with engine.connect() as conn:
        (f,) = conn.execute(sa.select(t.dataset_files)).mappings().all()
        dup = conn.execute(sa.select(t.sightings.c.line_no).group_by(t.sightings.c.file_id, t.sightings.c.line_no,
                                                                     t.sightings.c.position)
                           .having(sa.func.count() > 1)).all()
    assert not dup
    assert (f["state"], f["rows"], f["sightings"], f["rejects"]) == ("complete", 1000, 1000, 90)
    assert ingest_dump(engine, [path], dataset="d", key_column="id", time_column="t").files[0].outcome \
        is FileOutcome.ALREADY_LOADED


def test_resume_must_read_the_file_the_same_way(engine, tmp_path, monkeypatch):
    path = tmp_path / "a.csv"
    path.write_text("id,url\n" + "".join(f"{i},https://a.example/{i}\n" for i in range(50)))
    _crash_after(monkeypatch, 30)
    with pytest.raises(_Crash):
        ingest_dump(engine, [path], dataset="d", key_column="id", batch_size=10)
    monkeypatch.undo()
    with pytest.raises(InputError, match="same --format"):
        ingest_dump(engine, [path], dataset="d", batch_size=10)  # no --key-column this time


def test_a_second_loader_of_the_same_file_is_refused(engine, tmp_path):
    path = tmp_path / "a.csv"
    path.write_text("url\nhttps://a.example/1\n")
    with engine.begin() as conn:
        ds = ensure_dataset(conn, "d", description=None, ruleset_id=None)
        f = create_file(conn, dataset_id=ds, file_name="a.csv", sha256="0" * 64, size_bytes=1,
                                 fmt="csv", options={}, ruleset_id=None, run_id=None)
    with engine.begin() as conn, pytest.raises(LockHeld):
        # This loader believes the file is at line 0; another one has moved it to 100.
        conn.execute(sa.update(t.dataset_files).values(lines_done=100))
        write_batch(conn, dataset_id=ds, file_id=f["id"], ruleset_id=None, sightings=[], rejects=[], row_count=0,
                             lines_before=0, lines_after=10)


def test_file_changed_after_hashing_is_not_completed(engine, tmp_path, monkeypatch):
    path = tmp_path / "a.csv"
    path.write_text("url\nhttps://a.example/1\n")
    real_plan = load_module.plan_file

    def plan_then_change(*args, **kwargs):
        plan = real_plan(*args, **kwargs)
        path.write_text("url\nhttps://a.example/other\n")
        return plan

    monkeypatch.setattr(load_module, "plan_file", plan_then_change)
    with pytest.raises(InputError, match="changed while"):
        ingest_dump(engine, [path], dataset="d")
    with engine.connect() as conn:
        assert conn.execute(sa.select(t.dataset_files.c.state)).scalar_one() == "loading"


def test_dataset_name_is_required(engine, tmp_path):
    path = tmp_path / "a.txt"
    path.write_text("https://a.example/\n")
    with pytest.raises(Exception, match="name"):
        ingest_dump(engine, [path], dataset="  ")


def test_ruleset_by_version_and_unknown_version(engine, tmp_path):
    from linkfold.errors import NotFound

    path = tmp_path / "a.txt"
    path.write_text("https://a.example/\n")
    first = ingest_dump(engine, [path], dataset="d")
    other = tmp_path / "b.txt"
    other.write_text("https://b.example/\n")
    assert ingest_dump(engine, [other], dataset="d", ruleset=first.ruleset_version).ruleset_version == \
        first.ruleset_version
    with pytest.raises(NotFound):
        ingest_dump(engine, [other], dataset="e", ruleset=999)


def test_awkward_text_is_stored_verbatim(engine, tmp_path):
    # Tabs, newlines, backslashes and quotes survive the COPY text format on PostgreSQL (escaped as the
    # PostgreSQL manual's COPY "Text Format" section prescribes) and plain inserts on SQLite.
    key = 'k\t1\\n"x"\nend'
    url = "https://a.example/p\\q\tr?x=\\N"
    path = tmp_path / "odd.csv"
    with path.open("w", newline="", encoding="utf-8") as fh:
        import csv

        csv.writer(fh).writerows([["id", "url"], [key, url], ["\\N", "https://a.example/ü"]])
    ingest_dump(engine, [path], dataset="odd", key_column="id")
    rows = sightings(engine)
    assert [(r[2], r[3]) for r in rows] == [(key, url), ("\\N", "https://a.example/ü")]


def test_a_failure_on_the_writer_thread_reaches_the_caller(engine, tmp_path, monkeypatch):
    path = tmp_path / "a.csv"
    path.write_text("url\n" + "".join(f"https://a.example/{i}\n" for i in range(100)))
    real = write_batch
    calls = {"n": 0}

    def second_fails(conn, **kwargs):
        calls["n"] += 1
        if calls["n"] == 2:
            raise LockHeld("simulated: another loader moved the resume point")
        return real(conn, **kwargs)

    monkeypatch.setattr(loads, "write_batch", second_fails)
    with pytest.raises(LockHeld, match="simulated"):
        ingest_dump(engine, [path], dataset="d", batch_size=10)
    with engine.connect() as conn:
        f = conn.execute(sa.select(t.dataset_files)).mappings().one()
        run = conn.execute(sa.select(t.runs)).mappings().one()
    assert (f["state"], f["rows"], f["lines_done"]) == ("loading", 10, 11)  # the first batch only
    assert run["state"] == "failed" and "simulated" in run["detail"]


def test_in_memory_sqlite_registry_loads_on_one_thread(tmp_path):
    from linkfold.store import make_engine, upgrade

    engine = make_engine("sqlite://")  # one database per connection: the writer must not use a thread
    try:
        upgrade(engine)
        path = tmp_path / "a.txt"
        path.write_text("".join(f"https://a.example/{i}\n" for i in range(25)))
        assert ingest_dump(engine, [path], dataset="d", batch_size=10).sightings == 25
        assert counts(engine)["sightings"] == 25
    finally:
        engine.dispose()


def _spy_on_writes(monkeypatch, read):
    """Record ``read()`` as seen inside each batch's write (on the writer thread when there is one)."""
    seen: list = []
    real = write_batch

    def spy(conn, **kwargs):
        seen.append(read())
        return real(conn, **kwargs)

    monkeypatch.setattr(loads, "write_batch", spy)
    return seen


def _interpreter_settings():
    import gc
    import sys

    return gc.get_threshold(), sys.getswitchinterval()


def test_the_library_leaves_the_interpreter_settings_alone(engine, tmp_path, monkeypatch):
    # The collector's threshold and the thread switch interval are process-wide: a lab's script that
    # calls ingest_dump keeps its own, during the load and after it, also when the load fails.
    before = _interpreter_settings()
    seen = _spy_on_writes(monkeypatch, _interpreter_settings)
    path = tmp_path / "a.csv"
    path.write_text("url\n" + "".join(f"https://a.example/{i}\n" for i in range(30)))
    ingest_dump(engine, [path], dataset="d", batch_size=10)
    assert seen and set(seen) == {before}
    assert _interpreter_settings() == before

    def fails(conn, **kwargs):
        raise LockHeld("simulated")

    monkeypatch.setattr(loads, "write_batch", fails)
    with pytest.raises(LockHeld):
        ingest_dump(engine, [path], dataset="e", batch_size=10)
    assert _interpreter_settings() == before


def test_the_command_tunes_the_interpreter_for_its_own_run_only(db_url, tmp_path, monkeypatch):
    # The linkfold command (cli.main) raises the collector's threshold and lowers the switch interval
    # while it runs (measured tunings, see cli.py), and gives both back when it returns, failed or not.
    from linkfold import cli

    before = _interpreter_settings()
    seen = _spy_on_writes(monkeypatch, _interpreter_settings)
    path = tmp_path / "a.csv"
    path.write_text("url\n" + "".join(f"https://a.example/{i}\n" for i in range(30)))
    assert cli.main(["-q", "--db", db_url, "datasets", "load", str(path), "--dataset", "d"]) == 0
    tuned_gc, tuned_switch = seen[0]
    assert tuned_gc == (max(before[0][0], cli.GC_THRESHOLD), *before[0][1:])
    assert tuned_switch == pytest.approx(min(before[1], cli.SWITCH_INTERVAL))  # kept in microseconds
    assert _interpreter_settings() == before

    def fails(conn, **kwargs):
        raise LockHeld("simulated")

    monkeypatch.setattr(loads, "write_batch", fails)
    assert cli.main(["-q", "--db", db_url, "datasets", "load", str(path), "--dataset", "e"]) == LockHeld.exit_code
    assert _interpreter_settings() == before
