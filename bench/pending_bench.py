"""What the pending-work trigger (migration 0013) costs the statements that insert canonical URLs.

Each new canonical URL of a load is announced in ``stage_pending`` by a statement-level trigger, in the
inserting transaction (linkfold.store.pending). This measures that on its own, on PostgreSQL: batches of
new canonical URLs inserted the way a load inserts them (``INSERT … SELECT … ORDER BY url_key ON
CONFLICT DO NOTHING`` from an unindexed temporary table), with the trigger enabled and, as the baseline
in the same run, disabled (``ALTER TABLE … DISABLE TRIGGER``); pairs alternate which goes first and the
median ratio is printed, of the wall time and of the server backend's CPU time (``/proc/PID/stat``, the
server on this machine), which a busy shared machine disturbs much less. Whole loads
(bench/ingest_bench.py) vary by more than this effect on a shared machine; this isolates it.

Run:  python bench/pending_bench.py [--rows 200000] [--batch 5000] [--repeat 5] [--pg ADMIN_URL]
"""

from __future__ import annotations

import argparse
import os
import statistics
import time
import uuid

import sqlalchemy as sa

from linkfold.store import make_engine, upgrade


def _with_database(url: str, name: str) -> str:
    return sa.engine.make_url(url).set(database=name).render_as_string(hide_password=False)


def backend_cpu(pid: int) -> float:
    """CPU seconds (user + system) the server process ``pid`` has used (proc(5), fields 14 and 15)."""
    with open(f"/proc/{pid}/stat", encoding="ascii") as fh:
        fields = fh.read().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def one_load(engine: sa.Engine, *, rows: int, batch: int, start: int, trigger: bool) -> tuple[float, float]:
    """(wall seconds, backend CPU seconds) to insert ``rows`` new canonical URLs in batches of ``batch``,
    with or without the trigger."""
    with engine.begin() as conn:
        conn.exec_driver_sql(f"ALTER TABLE canonical_urls {'ENABLE' if trigger else 'DISABLE'} TRIGGER "
                             "lf_pending_canonical_urls")
    took = cpu = 0.0
    for lo in range(start, start + rows, batch):
        with engine.begin() as conn:
            pid = conn.exec_driver_sql("SELECT pg_backend_pid()").scalar_one()
            conn.exec_driver_sql("CREATE TEMPORARY TABLE lf_b (url_key varchar(32), url text, host varchar(255), "
                                 "domain varchar(255)) ON COMMIT DROP")
            conn.exec_driver_sql(
                "INSERT INTO lf_b SELECT md5(i::text), 'https://outlet' || mod(i, 300) || '.example/news/' || i, "
                "'outlet' || mod(i, 300) || '.example', 'outlet' || mod(i, 300) || '.example' "
                f"FROM generate_series({lo}, {lo + batch - 1}) AS i")
            t0, c0 = time.perf_counter(), backend_cpu(pid)
            conn.exec_driver_sql(
                "INSERT INTO canonical_urls (url_key, url, host, domain, outlet, is_article, ruleset_id, created_at) "
                "SELECT url_key, url, host, domain, NULL, true, NULL, now() FROM lf_b ORDER BY url_key "
                "ON CONFLICT (url_key) DO NOTHING")
            took += time.perf_counter() - t0
            cpu += backend_cpu(pid) - c0
    return took, cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=200_000)
    ap.add_argument("--batch", type=int, default=5000)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--pg", default=os.environ.get("LINKFOLD_TEST_PG",
                                                   "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"))
    args = ap.parse_args()
    admin = make_engine(args.pg, isolation_level="AUTOCOMMIT")
    name = f"lf_bench_{uuid.uuid4().hex[:10]}"
    with admin.connect() as conn:
        conn.exec_driver_sql(f'CREATE DATABASE "{name}"')
    try:
        engine = make_engine(_with_database(args.pg, name))
        upgrade(engine)
        ratios, cpu_ratios = [], []
        start = 0
        for pair in range(args.repeat):
            times = {}
            for trigger in ((True, False) if pair % 2 else (False, True)):
                times[trigger] = one_load(engine, rows=args.rows, batch=args.batch, start=start, trigger=trigger)
                start += args.rows
            ratios.append(times[True][0] / times[False][0])
            cpu_ratios.append(times[True][1] / max(times[False][1], 1e-9))
            print(f"pair {pair + 1}/{args.repeat}: without the trigger {times[False][0]:.2f} s "
                  f"(backend CPU {times[False][1]:.2f} s), with it {times[True][0]:.2f} s "
                  f"({times[True][1]:.2f} s): {ratios[-1]:.3f}x wall, {cpu_ratios[-1]:.3f}x CPU")
        with engine.connect() as conn:
            entries = conn.execute(sa.text("SELECT count(*) FROM stage_pending WHERE topic = 'dedupe.canonical'"))
            print(f"stage_pending entries written: {entries.scalar_one()} (one per batch with the trigger)")
        print(f"inserting new canonical URLs with the trigger / without: median {statistics.median(ratios):.3f}x "
              f"wall over {args.repeat} pairs ({min(ratios):.3f}-{max(ratios):.3f}x); backend CPU median "
              f"{statistics.median(cpu_ratios):.3f}x ({min(cpu_ratios):.3f}-{max(cpu_ratios):.3f}x)")
        engine.dispose()
    finally:
        with admin.connect() as conn:
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()


if __name__ == "__main__":
    main()
