"""The outlet list's cost on PostgreSQL, as ratios against a baseline measured in the same run.

The panel of ``finals_bench.py`` (N rows over D distinct URLs on about 300 hosts, a share of short links,
half of them resolved) is loaded once, with an outlet list that names every other host, grouped five
hosts to an outlet, with two attributes. Then, as ``--repeat`` pairs, one right after the other:

  per final outlet   ``GROUP BY final_outlet`` over the view as migration 0012 left it (baseline) against
                     ``sighting_links`` with the list applied (migration 0021): the two outer joins on
                     ``outlet_entries``;
  whole table        ``SELECT *`` of both views sent to the client (``COPY … TO STDOUT``);
  outlets table      ``linkfold outlets`` (``outlet_table``: datasets, sightings, units, distinct URLs,
                     articles and stories per outlet) against the baseline's plain count per final outlet.

The median of the ratios (baseline time / measured time; 1.0 = no cost) is printed; nothing is asserted.

Run:  python bench/outlets_bench.py [--rows 1000000] [--distinct 200000] [--repeat 5] [--pg URL]
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from finals_bench import build, timed_copy
from ingest_bench import Scratch

from linkfold.outlets import load_outlet_list, outlet_table
from linkfold.store import make_engine

ROOT = Path(__file__).resolve().parents[1]


def view_0012() -> str:
    """The view as migration 0012 created it, renamed, from the migration that keeps it for downgrades."""
    migration = ROOT / "service" / "linkfold" / "migrations" / "versions" / "0021_listed_final_outlet.py"
    spec = importlib.util.spec_from_file_location("m0021", migration)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.VIEW_0012.replace("CREATE VIEW sighting_links", "CREATE VIEW bench_links_0012")


def add_list(url: str) -> int:
    engine = make_engine(url)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "outlets.csv"
        lines = ["domain,outlet,type,reach"]
        lines += [f"outlet{i}.example,Group {i // 10},type-{i // 10 % 3},{1000 + i // 10}" for i in range(0, 300, 2)]
        path.write_text("\n".join(lines) + "\n", encoding="utf-8")
        loaded = load_outlet_list(engine, path)
    with engine.begin() as conn:
        conn.exec_driver_sql(view_0012())
        conn.exec_driver_sql("ANALYZE")
    engine.dispose()
    return loaded.entries


def timed_table(url: str) -> float:
    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            start = time.perf_counter()
            outlet_table(conn)
            return time.perf_counter() - start
    finally:
        engine.dispose()


def report(name: str, pairs: list[tuple[float, float]]) -> None:
    ratios = sorted(b / a for b, a in pairs)
    print(f"{name}: baseline {statistics.median(b for b, _ in pairs):.2f} s, measured "
          f"{statistics.median(a for _, a in pairs):.2f} s; median ratio {statistics.median(ratios):.2f}x "
          f"(pairs {', '.join(f'{r:.2f}' for r in ratios)})")


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
    base_count = "SELECT final_outlet, count(*) FROM bench_links_0012 GROUP BY final_outlet"
    queries = {
        "per final outlet": (base_count, "SELECT final_outlet, count(*) FROM sighting_links GROUP BY final_outlet"),
        "whole table": ("SELECT * FROM bench_links_0012", "SELECT * FROM sighting_links"),
    }
    with Scratch(args.pg) as url:
        build(url, args.rows, d, args.short_share)
        entries = add_list(url)
        print(f"outlet list: {entries} entries", file=sys.stderr)
        for name, (before, after) in queries.items():
            timed_copy(url, before), timed_copy(url, after)  # warm the cache once
            report(name, [(timed_copy(url, before), timed_copy(url, after)) for _ in range(args.repeat)])
        timed_table(url)
        report("outlets table", [(timed_copy(url, base_count), timed_table(url)) for _ in range(args.repeat)])


if __name__ == "__main__":
    main()
