"""The final columns of ``sighting_links`` on PostgreSQL, as ratios against the view without them.

A generated panel (as ``ingest_bench.py``: N rows over D distinct URLs with a Zipf-like skew) is loaded
once, with a share of its distinct URLs on a shortener host, and half of those given a resolved follow
outcome that leads to an article of the panel (``final_id`` set through ``refresh_all_finals``, as the
follow stage would). Then, as ``--repeat`` pairs, one right after the other:

  baseline  the view as it was before migration 0012 (its definition, created beside it for the run);
  measured  ``sighting_links`` with ``final_url``, ``final_domain``, ``final_outlet``, ``final_is_article``;

for two queries: the whole linkage table of the dataset sent to the client (``COPY (SELECT * …) TO
STDOUT``, read and dropped), and a per-outlet count (``GROUP BY outlet`` against ``GROUP BY
final_outlet``). The median ratio of each (baseline time / measured time; 1.0 = no cost) is printed;
nothing is asserted.

Run:  python bench/finals_bench.py [--rows 1000000] [--distinct 200000] [--short-share 0.05] [--repeat 5] [--pg URL]
"""

from __future__ import annotations

import argparse
import os
import random
import statistics
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

import sqlalchemy as sa

sys.path.insert(0, str(Path(__file__).resolve().parent))
from ingest_bench import Scratch, distinct_urls

from linkfold.canon import parse_rules
from linkfold.ingest import ingest_dump
from linkfold.store import make_engine, upgrade
from linkfold.store import tables as t
from linkfold.store.finals import refresh_all_finals
from linkfold.store.rulesets import store_ruleset

RULES = 'name = "bench"\nshortener_hosts = ["short.test"]\n'

# The view of migrations 0009-0011, kept beside the new one as the baseline.
OLD_VIEW = """
CREATE VIEW bench_links_before AS
SELECT d.name AS dataset, s.row_key, s.line_no, s.position, s.seen_at, r.raw AS raw_url, c.url AS canonical_url,
       c.url_key, c.domain, c.outlet, c.is_article, r.reason AS url_error, s.id AS sighting_id,
       am.cluster_id AS article_id, sm.cluster_id AS story_id, f.file_name AS file
FROM sightings s
JOIN dataset_files f ON f.id = s.file_id
JOIN datasets d ON d.id = f.dataset_id
JOIN raw_urls r ON r.id = s.raw_url_id
LEFT JOIN canonical_urls c ON c.id = r.canonical_id
LEFT JOIN cluster_members am ON am.canonical_id = c.id AND am.level = 'article'
LEFT JOIN cluster_members sm ON sm.canonical_id = c.id AND sm.level = 'story'
"""


def build(url: str, rows: int, d: int, short_share: float, seed: int = 4) -> None:
    rng = random.Random(seed)
    pool = distinct_urls(d, rng)
    for i in range(0, d, max(1, int(1 / short_share))):
        pool[i] = f"https://short.test/{i:x}"
    engine = make_engine(url)
    upgrade(engine)
    with engine.begin() as conn:
        store_ruleset(conn, parse_rules(RULES))
    with tempfile.TemporaryDirectory() as tmp:
        dump = Path(tmp) / "panel.csv"
        with dump.open("w", encoding="utf-8") as fh:
            fh.write("visit_id,url\n")
            for i in range(rows):
                fh.write(f"v{i},{pool[int(d * rng.random() ** 3)]}\n")
        ingest_dump(engine, [dump], dataset="bench", key_column="visit_id", url_column="url")
    c, fr = t.canonical_urls, t.follow_results
    now = datetime.now(UTC)
    with engine.begin() as conn:
        short = [int(i) for i in conn.execute(sa.select(c.c.id).where(c.c.host == "short.test").order_by(c.c.id))
                 .scalars()]
        others = [int(i) for i in conn.execute(sa.select(c.c.id).where(c.c.host != "short.test").limit(len(short)))
                  .scalars()]
        rows_fr = [{"canonical_id": s, "state": "resolved", "final_id": o, "hops": 1, "via": "fetched",
                    "attempts": 1, "first_attempt_at": now, "last_attempt_at": now}
                   for s, o in zip(short[::2], others, strict=False)]
        if rows_fr:
            conn.execute(sa.insert(fr), rows_fr)
        refresh_all_finals(conn)
        conn.exec_driver_sql(OLD_VIEW)
        conn.exec_driver_sql("ANALYZE")
    print(f"loaded {rows:,} sightings over {d:,} distinct URLs; {len(short):,} short links, "
          f"{len(rows_fr):,} of them resolved", file=sys.stderr)
    engine.dispose()


def timed_copy(url: str, query: str) -> float:
    import psycopg

    dsn = sa.engine.make_url(url).set(drivername="postgresql").render_as_string(hide_password=False)
    with psycopg.connect(dsn) as conn, conn.cursor() as cur:
        start = time.perf_counter()
        with cur.copy(f"COPY ({query}) TO STDOUT") as copy:
            for _block in copy:
                pass
        return time.perf_counter() - start


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--distinct", type=int, default=None, help="distinct URLs (default rows/5)")
    ap.add_argument("--short-share", type=float, default=0.05, help="share of distinct URLs on the shortener")
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--pg", default=os.environ.get("LINKFOLD_TEST_PG",
                                                   "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"))
    args = ap.parse_args()
    d = args.distinct or max(1, args.rows // 5)
    queries = {
        "whole table": ("SELECT * FROM bench_links_before WHERE dataset = 'bench'",
                        "SELECT * FROM sighting_links WHERE dataset = 'bench'"),
        "per outlet": ("SELECT outlet, count(*) FROM bench_links_before WHERE dataset = 'bench' GROUP BY outlet",
                       "SELECT final_outlet, count(*) FROM sighting_links WHERE dataset = 'bench' "
                       "GROUP BY final_outlet"),
    }
    with Scratch(args.pg) as url:
        build(url, args.rows, d, args.short_share)
        for name, (before, after) in queries.items():
            timed_copy(url, before), timed_copy(url, after)  # warm the cache once
            pairs = [(timed_copy(url, before), timed_copy(url, after)) for _ in range(args.repeat)]
            ratios = sorted(b / a for b, a in pairs)
            print(f"{name}: before {statistics.median(b for b, _ in pairs):.2f} s, with final columns "
                  f"{statistics.median(a for _, a in pairs):.2f} s; median ratio {statistics.median(ratios):.2f}x "
                  f"(pairs {', '.join(f'{r:.2f}' for r in ratios)}; fastest against fastest "
                  f"{min(b for b, _ in pairs) / min(a for _, a in pairs):.2f}x)")


if __name__ == "__main__":
    main()
