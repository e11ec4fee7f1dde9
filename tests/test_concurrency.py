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
    return [sys.executable, "-m", "linkfold.cli", "--quiet", "ingest", str(path), "--dataset", dataset,
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
            files = sorted(conn.execute(sa.select(f.c.file_name, f.c.status, f.c.rows, f.c.sightings)).all())
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
