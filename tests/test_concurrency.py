"""Several writers on one registry at once (issue 16): concurrent loads, work committed out of id order,
and runs whose process is gone.

The concurrency tests use real ``linkfold`` processes against a real PostgreSQL database, since the
failures they pin down (deadlocks between two loads' inserts, ids handed out before commit) only exist
between server sessions; the SQLite tests check the one-writer-at-a-time behaviour of the embedded file.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pytest
import sqlalchemy as sa

from linkfold.store import make_engine
from linkfold.store import tables as t

ROOT = Path(__file__).resolve().parent.parent


def _env(db_url: str, **more: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("LINKFOLD_")}
    env.update(LINKFOLD_DATABASE_URL=db_url, PYTHONPATH=str(ROOT / "service"), **more)
    return env


def _ingest_cmd(path: Path, dataset: str) -> list[str]:
    return [sys.executable, "-m", "linkfold.cli", "--quiet", "datasets", "load", str(path), "--dataset", dataset,
            "--key-column", "id"]


def _dump(path: Path, start: int, n: int, *, seed: int) -> Path:
    """A panel-like dump: URLs over a shared range (so two dumps overlap), in an order of their own (so two
    loads meet the shared URLs in different orders), with tracking parameters and repeats."""
    import random

    rng = random.Random(seed)
    ids = list(range(start, start + n))
    rng.shuffle(ids)
    with path.open("w") as fh:
        fh.write("id,url\n")
        for row, i in enumerate(ids):
            fh.write(f"{seed}-{row},https://www.outlet{i % 23}.example/2031/{i % 12 + 1:02d}/story-{i}"
                     f"?utm_source=s{row % 5}\n")
    return path


def registry_state(db_url: str) -> dict[str, object]:
    """What a load leaves, independent of the order loads ran in: canonical and raw URLs (with the
    canonical URL each maps to) and the sightings of each dataset."""
    engine = make_engine(db_url)
    try:
        with engine.connect() as conn:
            c, r, s, d, f = t.canonical_urls, t.raw_urls, t.sightings, t.datasets, t.dataset_files
            canon = sorted(conn.execute(sa.select(c.c.url_key, c.c.url)).all())
            raws = sorted(conn.execute(sa.select(r.c.raw, c.c.url_key).select_from(
                r.outerjoin(c, c.c.id == r.c.canonical_id))).all())
            sightings = Counter(conn.execute(sa.select(d.c.name, s.c.row_key, r.c.raw).select_from(
                s.join(f, f.c.id == s.c.file_id).join(d, d.c.id == f.c.dataset_id)
                .join(r, r.c.id == s.c.raw_url_id))).all())
            files = sorted(conn.execute(sa.select(f.c.file_name, f.c.state, f.c.rows, f.c.sightings)).all())
    finally:
        engine.dispose()
    return {"canonical": canon, "raw": raws, "sightings": sightings, "files": files}


@pytest.mark.postgres
def test_two_ingest_processes_at_once_both_succeed_and_equal_a_serial_load(pg_server, tmp_path):
    """Issue 16, item 1: two loads of overlapping URL sets at once into one PostgreSQL registry. Before
    the fix one of the two died with exit 1 on a deadlock in 4 of 4 trials. Small batches make the two
    loads' transactions interleave many times a trial."""
    from conftest import PG_ADMIN_URL, _with_database

    a = _dump(tmp_path / "a.csv", 0, 8000, seed=1)
    b = _dump(tmp_path / "b.csv", 2000, 8000, seed=2)
    serial = _with_database(PG_ADMIN_URL, pg_server.create(template=pg_server.migrated_template()))
    for path, name in ((a, "panel-a"), (b, "panel-b")):
        done = subprocess.run(_ingest_cmd(path, name), env=_env(serial), capture_output=True, text=True,
                              timeout=300)
        assert done.returncode == 0, done.stderr
    expected = registry_state(serial)

    for trial in range(4):
        url = _with_database(PG_ADMIN_URL, pg_server.create(template=pg_server.migrated_template()))
        env = _env(url, LINKFOLD_INGEST_BATCH_SIZE="250")
        procs = [subprocess.Popen(_ingest_cmd(path, name), env=env, stdout=subprocess.DEVNULL,
                                  stderr=subprocess.PIPE, text=True)
                 for path, name in ((a, "panel-a"), (b, "panel-b"))]
        outcomes = []
        for p in procs:
            _out, err = p.communicate(timeout=300)
            outcomes.append((p.returncode, err))
        for code, err in outcomes:
            assert code == 0, f"trial {trial}: exit {code}: {err}"
        assert registry_state(url) == expected, f"trial {trial}"


def test_two_ingest_processes_into_one_sqlite_file_take_turns(tmp_path, sqlite_url):
    """SQLite has one writer at a time: the second load's batches wait for the first's (busy timeout)
    instead of failing, and both loads complete as if run one after the other."""
    a = _dump(tmp_path / "a.csv", 0, 4000, seed=1)
    b = _dump(tmp_path / "b.csv", 1000, 4000, seed=2)
    serial = f"sqlite:///{tmp_path / 'serial.db'}"
    from linkfold.store import upgrade

    eng = make_engine(serial)
    upgrade(eng)
    eng.dispose()
    for path, name in ((a, "panel-a"), (b, "panel-b")):
        done = subprocess.run(_ingest_cmd(path, name), env=_env(serial), capture_output=True, text=True,
                              timeout=300)
        assert done.returncode == 0, done.stderr
    env = _env(sqlite_url, LINKFOLD_INGEST_BATCH_SIZE="200")
    procs = [subprocess.Popen(_ingest_cmd(path, name), env=env, stdout=subprocess.DEVNULL,
                              stderr=subprocess.PIPE, text=True) for path, name in ((a, "panel-a"), (b, "panel-b"))]
    for p in procs:
        _out, err = p.communicate(timeout=300)
        assert p.returncode == 0, err
    assert registry_state(sqlite_url) == registry_state(serial)


def test_a_writer_locked_out_past_the_busy_timeout_exits_11_and_says_why(tmp_path, sqlite_url):
    """A second writer that waits longer than ``busy_timeout`` for the SQLite file gets exit 11 (write
    conflict) with a message that names the setting, not a traceback; nothing of its batch is stored."""
    a = _dump(tmp_path / "a.csv", 0, 500, seed=1)
    db = sa.engine.make_url(sqlite_url).database
    holder = subprocess.Popen(
        [sys.executable, "-c",
         "import sqlite3, sys\n"
         f"c = sqlite3.connect({db!r}, isolation_level=None)\n"
         "c.execute('BEGIN IMMEDIATE')\n"
         "print('held', flush=True)\n"
         "sys.stdin.readline()\n"
         "c.execute('ROLLBACK')\n"],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout is not None and holder.stdout.readline().strip() == "held"
        done = subprocess.run(_ingest_cmd(a, "panel-a"), env=_env(sqlite_url, LINKFOLD_BUSY_TIMEOUT="0.5"),
                              capture_output=True, text=True, timeout=120)
    finally:
        holder.communicate("\n", timeout=30)
    assert done.returncode == 11, done.stderr
    assert "locked by another writer" in done.stderr and "LINKFOLD_BUSY_TIMEOUT" in done.stderr
    assert "Traceback" not in done.stderr
    engine = make_engine(sqlite_url)
    try:
        with engine.connect() as conn:
            assert conn.execute(sa.select(sa.func.count()).select_from(t.sightings)).scalar_one() == 0
    finally:
        engine.dispose()


# --- item 2: nothing pending is ever skipped ---------------------------------------------------------------
def _without_ids(engine) -> dict[str, int]:
    """Canonical URLs without an article ID, and without a story ID."""
    c, m = t.canonical_urls, t.cluster_members
    out = {}
    with engine.connect() as conn:
        for level in ("article", "story"):
            has = sa.select(m.c.canonical_id).where(m.c.level == level, m.c.canonical_id == c.c.id).exists()
            out[level] = int(conn.execute(sa.select(sa.func.count()).select_from(c).where(~has)).scalar_one())
    return out


def _waiting_on_a_lock(engine) -> int:
    with engine.connect() as conn:
        return int(conn.execute(sa.text(
            "SELECT count(*) FROM pg_stat_activity WHERE datname = current_database() "
            "AND wait_event_type = 'Lock'")).scalar_one())


@pytest.mark.postgres
def test_a_load_committed_after_a_later_load_and_a_nightly_run_is_picked_up(pg_url, tmp_path):
    """Issue 16, item 2, reproduced: load A takes its canonical URL ids, then waits with its transaction
    open (here: on a raw URL that another session is inserting, the way two loads meet); load B takes
    larger ids and commits; a nightly run clusters B. Then A commits. With id high-water marks the
    nightly run had moved past A's ids, and every later run said "nothing pending"; now the next nightly
    run gives every canonical URL an article and a story ID."""
    from linkfold.jobs.nightly import run_nightly
    from linkfold.settings import load_settings
    from linkfold.store.evidence import raw_hash

    a = _dump(tmp_path / "a.csv", 0, 1500, seed=1)
    b = _dump(tmp_path / "b.csv", 5000, 800, seed=2)
    blocked = "https://www.outlet0.example/held-back"
    with a.open("a") as fh:
        fh.write(f"held,{blocked}\n")
    engine = make_engine(pg_url)
    blocker = engine.connect()
    proc = None
    try:
        # Another session inserts one of A's raw URLs and keeps its transaction open: A inserts its
        # canonical URLs (taking their ids), then waits on that raw URL's unique key.
        blocker.begin()
        blocker.execute(sa.insert(t.raw_urls).values(raw_hash=raw_hash(blocked), raw=blocked, canonical_id=None,
                                                     ruleset_id=None, reason=None, created_at=sa.func.now()))
        proc = subprocess.Popen(_ingest_cmd(a, "panel-a"), env=_env(pg_url), stdout=subprocess.DEVNULL,
                                stderr=subprocess.PIPE, text=True)
        import time

        deadline = time.monotonic() + 120
        while _waiting_on_a_lock(engine) == 0:
            assert proc.poll() is None and time.monotonic() < deadline, "load A never reached the wait"
            time.sleep(0.05)
        done = subprocess.run(_ingest_cmd(b, "panel-b"), env=_env(pg_url), capture_output=True, text=True,
                              timeout=300)
        assert done.returncode == 0, done.stderr
        settings = load_settings(overrides={"database_url": pg_url}, environ={})
        first = run_nightly(engine, settings=settings)
        assert first.ok
        with engine.connect() as conn:
            smallest_b = conn.execute(sa.select(sa.func.min(t.canonical_urls.c.id))).scalar_one()
        assert _without_ids(engine) == {"article": 0, "story": 0}  # B only: A is not committed yet
        blocker.rollback()
        _out, err = proc.communicate(timeout=300)
        assert proc.returncode == 0, err
    finally:
        blocker.close()
        if proc is not None and proc.poll() is None:
            proc.kill()
            proc.wait()
    with engine.connect() as conn:
        c = t.canonical_urls
        late = conn.execute(sa.select(sa.func.count()).where(c.c.id < smallest_b)).scalar_one()
    assert late >= 1000, "load A's ids should lie below load B's: the gap was not reproduced"
    assert _without_ids(engine)["article"] >= late
    second = run_nightly(engine, settings=settings)
    assert second.ok
    assert {s.name: s.status for s in second.stages}["dedupe"] == "ok"
    assert _without_ids(engine) == {"article": 0, "story": 0}
    third = run_nightly(engine, settings=settings)
    assert {s.name: s.reason for s in third.stages}["dedupe"] == "nothing pending"
    engine.dispose()


def test_an_existing_registry_is_migrated_to_the_pending_queue_and_heals(empty_db_url, backend, tmp_path,
                                                                       monkeypatch):
    """Migration 0013 on a registry with data: rows past a stage mark stay pending; on PostgreSQL rows
    at or below it that the marks passed over (canonical URLs without an article ID) become pending too,
    so the next dedupe run gives every canonical URL its IDs."""
    from dedupe_world import settings
    from linkfold.dedupe.stage import count_pending, run_dedupe
    from linkfold.ingest import ingest_dump
    from linkfold.store import upgrade
    from linkfold.store.migrate import history

    before = next(down for rev, down, _doc in history() if rev == "0013")
    engine = make_engine(empty_db_url)
    try:
        # Loaded by today's loader at head (it writes today's columns and 64-bit ids), then taken back to
        # before 0013 with its data: what a registry of that time held.
        from linkfold.store import downgrade

        upgrade(engine)
        ingest_dump(engine, [_dump(tmp_path / "a.csv", 0, 300, seed=1)], dataset="panel-a", key_column="id")
        downgrade(engine, before)
        with engine.begin() as conn:
            conn.execute(sa.delete(t.stage_marks))  # the marks the downgrade left: the test sets its own
        with engine.begin() as conn:
            top = conn.execute(sa.select(sa.func.max(t.canonical_urls.c.id))).scalar_one()
            # A registry whose marks say "up to here is done" although nothing below was clustered: what
            # PostgreSQL registries were left with by loads committed out of id order. SQLite cannot get
            # there, so its mark stands at 0 (a registry that was never deduplicated).
            mark = top - 5 if backend == "postgres" else 0
            conn.execute(sa.insert(t.stage_marks).values(name="dedupe.canonical", value=mark, run_id=None,
                                                         updated_at=sa.func.now()))
        upgrade(engine)
        with engine.connect() as conn:
            entries = conn.execute(sa.select(t.stage_pending.c.topic, t.stage_pending.c.lo,
                                             t.stage_pending.c.hi)).all()
            marks = dict(conn.execute(sa.select(t.stage_marks.c.name, t.stage_marks.c.value)).all())
        if backend == "postgres":
            covered = {i for topic, lo, hi in entries if topic == "dedupe.canonical" for i in range(lo, hi + 1)}
            assert covered == set(range(1, top + 1))
            assert "dedupe.canonical" not in marks
        else:
            assert entries == [] and marks == {"dedupe.canonical": 0}
        assert count_pending(engine) >= top
        run_dedupe(engine, settings=settings())
        assert _without_ids(engine) == {"article": 0, "story": 0}
        assert count_pending(engine) == 0
    finally:
        engine.dispose()


def test_claims_join_ranges_and_stay_within_their_limit():
    from linkfold.store.pending import coalesce

    assert coalesce([(5, 9), (1, 3), (4, 4), (20, 30), (25, 26)]) == ((1, 9), (20, 30))
    assert coalesce([(1, 1), (10, 10), (12, 12), (40, 40)], limit=2) == ((1, 12), (40, 40))
    assert coalesce([]) == ()


# --- item 3: an honest run log -----------------------------------------------------------------------------
def test_a_run_whose_process_was_killed_shows_as_interrupted_everywhere(db_url, tmp_path):
    """Issue 16, item 3: a process killed outright records no end; its run must not read ``running``
    forever in ``linkfold runs``, ``linkfold runs show`` or the API, while a live process's run does."""
    import json

    from linkfold.api.app import create_app
    from linkfold.store.runs import list_runs, show_run
    from linkfold.store.tokens import create_token
    from test_api_support import AsgiClient, settings_for

    script = ("import sys, time\n"
              "from linkfold.store.runs import start_run\n"
              "from linkfold.store import make_engine\n"
              f"e = make_engine({db_url!r})\n"
              "print(start_run(e, sys.argv[1]), flush=True)\n"
              "time.sleep(600)\n")
    killed = subprocess.Popen([sys.executable, "-c", script, "ingest"], stdout=subprocess.PIPE, text=True,
                              env=_env(db_url))
    alive = subprocess.Popen([sys.executable, "-c", script, "follow"], stdout=subprocess.PIPE, text=True,
                             env=_env(db_url))
    try:
        assert killed.stdout is not None and alive.stdout is not None
        dead_id, live_id = int(killed.stdout.readline()), int(alive.stdout.readline())
        killed.send_signal(signal.SIGKILL)
        killed.wait(timeout=30)
        engine = make_engine(db_url)
        try:
            with engine.connect() as conn:  # the row itself still says what was recorded
                assert conn.execute(sa.select(t.runs.c.state).where(t.runs.c.id == dead_id)).scalar_one() == "running"
            listed = {r["id"]: r for r in list_runs(engine)}
            assert listed[dead_id]["status"] == "interrupted"
            assert f"process {killed.pid}" in listed[dead_id]["error"]
            assert listed[live_id]["status"] == "running"
            assert show_run(engine, dead_id)["status"] == "interrupted"
            assert show_run(engine, live_id)["status"] == "running"

            cli = subprocess.run([sys.executable, "-m", "linkfold.cli", "runs", "--format", "jsonl"],
                                 env=_env(db_url), capture_output=True, text=True, timeout=120)
            assert cli.returncode == 0, cli.stderr
            by_id = {r["id"]: r["status"] for r in map(json.loads, cli.stdout.splitlines())}
            assert by_id[dead_id] == "interrupted" and by_id[live_id] == "running"
            shown = subprocess.run([sys.executable, "-m", "linkfold.cli", "runs", "show", str(dead_id)],
                                   env=_env(db_url), capture_output=True, text=True, timeout=120)
            assert json.loads(shown.stdout)["status"] == "interrupted"

            api = AsgiClient(create_app(settings_for(db_url), engine=engine),
                             token=create_token(engine, scope="read", note="tests").secret)
            runs = {r["id"]: r["status"] for r in api.get("/v1/runs").json()["runs"]}
            assert runs[dead_id] == "interrupted" and runs[live_id] == "running"
            assert api.get(f"/v1/runs/{dead_id}").json()["status"] == "interrupted"
        finally:
            engine.dispose()
    finally:
        for p in (killed, alive):
            if p.poll() is None:
                p.kill()
            p.communicate(timeout=30)


def test_a_pid_taken_by_a_later_process_is_not_the_runs():
    """A pid is reused once its process is gone: a live process that started after the run did is not
    the run's (Linux /proc starttime, proc(5))."""
    import socket
    from datetime import UTC, datetime, timedelta

    from linkfold.store.runs import process_gone

    other = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        now = datetime.now(UTC)
        row = {"state": "running", "host": socket.gethostname(), "pid": other.pid}
        assert process_gone({**row, "started_at": now - timedelta(hours=1)})
        assert not process_gone({**row, "started_at": now + timedelta(minutes=1)})
        assert not process_gone({**row, "host": "elsewhere.test", "started_at": now - timedelta(hours=1)})
        assert not process_gone({**row, "state": "ok", "started_at": now - timedelta(hours=1)})
    finally:
        other.kill()
        other.wait()


@pytest.mark.postgres
def test_loads_an_import_and_a_nightly_run_at_once_equal_running_them_in_turn(pg_server, tmp_path):
    """Three loads of overlapping dumps, an import of expanded short links whose targets are in the dumps,
    and a nightly run, all at once on one PostgreSQL registry: every process exits 0, and after one more
    nightly run the registry holds what running them one after another leaves, every canonical URL with
    its IDs."""
    from conftest import PG_ADMIN_URL, _with_database
    from linkfold.jobs.nightly import run_nightly
    from linkfold.settings import load_settings

    dumps = [(_dump(tmp_path / f"d{i}.csv", 1500 * i, 3000, seed=i + 1), f"panel-{i}") for i in range(3)]
    pairs = tmp_path / "pairs.csv"
    with pairs.open("w") as fh:
        fh.write("short,expanded\n")
        for i in range(0, 6000, 7):
            fh.write(f"https://lnk.test/s{i},https://www.outlet{i % 23}.example/2031/{i % 12 + 1:02d}/story-{i}\n")
    commands = [_ingest_cmd(path, name) for path, name in dumps]
    commands.append([sys.executable, "-m", "linkfold.cli", "--quiet", "redirects", "load", str(pairs)])
    nightly = [sys.executable, "-m", "linkfold.cli", "--quiet", "nightly"]

    def state(url: str) -> dict[str, object]:
        out = registry_state(url)
        engine = make_engine(url)
        try:
            with engine.connect() as conn:
                lk, a, b = t.links, t.canonical_urls.alias("a"), t.canonical_urls.alias("b")
                out["links"] = sorted(conn.execute(sa.select(lk.c.kind, a.c.url_key, b.c.url_key).select_from(
                    lk.join(a, a.c.id == lk.c.src_id).join(b, b.c.id == lk.c.dst_id))).all())
        finally:
            engine.dispose()
        return out

    serial = _with_database(PG_ADMIN_URL, pg_server.create(template=pg_server.migrated_template()))
    for cmd in commands:
        done = subprocess.run(cmd, env=_env(serial), capture_output=True, text=True, timeout=300)
        assert done.returncode == 0, done.stderr

    url = _with_database(PG_ADMIN_URL, pg_server.create(template=pg_server.migrated_template()))
    env = _env(url, LINKFOLD_INGEST_BATCH_SIZE="300", LINKFOLD_BATCH_SIZE="200")
    procs = [subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
             for cmd in [*commands, nightly]]
    for cmd, p in zip([*commands, nightly], procs, strict=True):
        _out, err = p.communicate(timeout=600)
        assert p.returncode == 0, f"{cmd[4:6]}: exit {p.returncode}: {err}"
    engine = make_engine(url)
    try:
        assert run_nightly(engine, settings=load_settings(overrides={"database_url": url}, environ={})).ok
        assert _without_ids(engine) == {"article": 0, "story": 0}
    finally:
        engine.dispose()
    assert state(url) == state(serial)


def _losing(monkeypatch, fail_calls: set[int]) -> list[int]:
    """Make the ingest writer's transactions numbered in ``fail_calls`` lose as PostgreSQL makes a
    deadlock's loser lose: after the batch's rows are written, the server raises SQLSTATE 40P01 and the
    transaction rolls back (a real server error through the real driver, not a Python stand-in)."""
    from linkfold.store import loads

    calls: list[int] = []
    original = loads.write_batch

    def write_batch(conn, **kwargs):
        counts = original(conn, **kwargs)
        calls.append(len(calls) + 1)
        if len(calls) in fail_calls or (0 in fail_calls):
            conn.exec_driver_sql("DO $$ BEGIN RAISE EXCEPTION 'chosen as the loser' "
                                 "USING ERRCODE = 'deadlock_detected'; END $$")
        return counts

    monkeypatch.setattr(loads, "write_batch", write_batch)
    return calls


@pytest.mark.postgres
def test_a_batch_that_loses_a_deadlock_is_written_again_intact(pg_server, pg_url, tmp_path, monkeypatch):
    """The retry path itself: batch 2 loses twice, batch 3 once; the load completes, and the registry
    equals a load where nothing was lost (the batch's lists are not left half-resolved by the lost try,
    and no id learnt in a rolled-back transaction is used)."""
    from conftest import PG_ADMIN_URL, _with_database
    from linkfold.ingest import ingest_dump

    path = _dump(tmp_path / "a.csv", 0, 2000, seed=3)
    monkeypatch.setattr("linkfold.store.conflicts.time.sleep", lambda _s: None)
    calls = _losing(monkeypatch, {2, 3, 5})
    engine = make_engine(pg_url)
    try:
        summary = ingest_dump(engine, [path], dataset="panel-a", key_column="id", batch_size=300)
    finally:
        engine.dispose()
    assert len(calls) == 7 + 3 and (summary.rows, summary.sightings) == (2000, 2000)
    monkeypatch.undo()
    clean = _with_database(PG_ADMIN_URL, pg_server.create(template=pg_server.migrated_template()))
    engine = make_engine(clean)
    try:
        ingest_dump(engine, [path], dataset="panel-a", key_column="id", batch_size=300)
    finally:
        engine.dispose()
    assert registry_state(pg_url) == registry_state(clean)


@pytest.mark.postgres
def test_a_batch_that_keeps_losing_stops_with_exit_11_and_keeps_what_was_committed(pg_url, tmp_path,
                                                                                    monkeypatch, capsys):
    from linkfold.cli import main

    path = _dump(tmp_path / "a.csv", 0, 1000, seed=4)
    monkeypatch.setattr("linkfold.store.conflicts.time.sleep", lambda _s: None)
    monkeypatch.setenv("LINKFOLD_DATABASE_URL", pg_url)
    monkeypatch.setenv("LINKFOLD_INGEST_BATCH_SIZE", "300")
    calls = _losing(monkeypatch, set(range(2, 100)))
    code = main(["datasets", "load", str(path), "--dataset", "panel-a", "--key-column", "id"])
    err = capsys.readouterr().err
    assert code == 11, err
    assert "deadlock" in err and "5 times" in err and "Traceback" not in err
    assert len(calls) == 1 + 5
    engine = make_engine(pg_url)
    try:
        with engine.connect() as conn:
            f = conn.execute(sa.select(t.dataset_files)).mappings().one()
            stored = conn.execute(sa.select(sa.func.count()).select_from(t.sightings)).scalar_one()
    finally:
        engine.dispose()
    assert (f["state"], f["lines_done"], stored) == ("loading", 301, 300)
