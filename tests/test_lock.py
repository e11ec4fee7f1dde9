"""The registry lock: one holder at a time, a clear message naming it, and no lock outliving a kill."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import textwrap
import time
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa

from linkfold.errors import LockHeld
from linkfold.store import tables as t
from linkfold.store.locks import acquire_lock, hold_lock, read_lock


def test_second_holder_is_refused_with_who_holds_it(engine):
    with hold_lock(engine):
        with pytest.raises(LockHeld, match=f"pid {os.getpid()} on {socket.gethostname()}"):
            acquire_lock(engine)
        assert read_lock(engine).pid == os.getpid()
    assert read_lock(engine) is None
    acquire_lock(engine).release()


def test_a_row_left_by_a_dead_process_is_taken_over(engine):
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    now = datetime.now(UTC)
    with engine.begin() as conn:
        conn.execute(t.job_locks.insert().values(name="registry", host=socket.gethostname(),
                                                 pid=int(dead.stdout), run_id=None,
                                                 acquired_at=now, heartbeat_at=now))
    lock = acquire_lock(engine)
    assert read_lock(engine).pid == os.getpid()
    lock.release()


def test_a_row_with_an_old_heartbeat_from_another_host_is_stale(engine, backend):
    old = datetime.now(UTC) - timedelta(days=2)
    with engine.begin() as conn:
        conn.execute(t.job_locks.insert().values(name="registry", host="elsewhere.test", pid=1, run_id=None,
                                                 acquired_at=old, heartbeat_at=old))
    acquire_lock(engine, stale_after=3600).release()


def test_killed_holder_releases_the_lock(db_url, engine):
    script = textwrap.dedent(f"""
        import sys, time
        from linkfold.store import make_engine
        from linkfold.store.locks import acquire_lock
        lock = acquire_lock(make_engine({db_url!r}))
        print("held", flush=True)
        time.sleep(120)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "held"
        with pytest.raises(LockHeld):
            acquire_lock(engine)
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        proc.stdout.close()
    deadline = time.monotonic() + 10
    while True:  # the server notices the dead connection within moments
        try:
            acquire_lock(engine).release()
            break
        except LockHeld:
            if time.monotonic() > deadline:
                raise
            time.sleep(0.2)


def _settings(db_url):
    from linkfold.settings import load_settings

    return load_settings({"database_url": db_url}, environ={})


def test_run_dedupe_from_python_refuses_while_another_process_holds_the_lock(db_url, engine):
    # The library takes the lock, not the CLI: a script calling linkfold.run_dedupe is refused too, with
    # the holder named, and nothing is recorded as a dedupe run.
    import linkfold

    script = textwrap.dedent(f"""
        import sys
        from linkfold.store import make_engine
        from linkfold.store.locks import acquire_lock
        lock = acquire_lock(make_engine({db_url!r}))
        print("held", flush=True)
        sys.stdin.read()
        lock.release()
    """)
    holder = subprocess.Popen([sys.executable, "-c", script], stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                              text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        with pytest.raises(LockHeld, match=f"pid {holder.pid}"):
            linkfold.run_dedupe(engine, settings=_settings(db_url))
    finally:
        holder.communicate("", timeout=30)
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(t.runs)
                            .where(t.runs.c.stage == "dedupe")).scalar_one() == 0
    assert linkfold.run_dedupe(engine, settings=_settings(db_url)).run_id is not None  # released: it runs
    assert read_lock(engine) is None  # and lets go of the lock after


def test_run_dedupe_refuses_another_hold_in_the_same_process_but_runs_under_a_lent_one(db_url, engine):
    from linkfold.dedupe.stage import run_dedupe

    with hold_lock(engine) as lock:
        with pytest.raises(LockHeld):
            run_dedupe(engine, settings=_settings(db_url))  # a hold it was not lent
        with lock.lend():
            assert run_dedupe(engine, settings=_settings(db_url)).run_id is not None  # a job's stage
        assert read_lock(engine).pid == os.getpid()  # the job still holds it
    assert read_lock(engine) is None
