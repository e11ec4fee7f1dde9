"""Exposure and the co-exposure network on PostgreSQL against the same aggregation in DuckDB, same run.

Generates N sightings over U units and O outlets (M canonical URLs, a tenth of them not articles) straight
into the registry's tables with ``generate_series`` — set-based in SQL, not through ingest, so a large
registry is built in seconds. Each unit reads a handful of outlets of its own (up to 12 slots, the first
ones more often); every sighting has a unit. Then, as ``--repeat`` pairs, each in a fresh process so its
peak memory is its own:

  ours      the exposure aggregation (``bipartite_rows``: unit × outlet with sightings, streamed to the
            client and dropped) and the network (``co_exposure``: nodes, N, edges of ≥ K units), through
            our functions on PostgreSQL;
  baseline  the same three aggregations in DuckDB over the same sightings exported once to Parquet
            (unit, outlet, is_article), the export not timed.

Printed: the median time of each, the ratio (ours / DuckDB; below 1 we are faster), and the peak resident
memory of each process (``ru_maxrss``); the two networks are checked equal (edges and units). Run at two
sizes to see whether memory stays flat in rows. Needs ``pip install -e '.[bench]'`` (duckdb).

Run:  python bench/network_bench.py [--rows 1000000 10000000] [--units 100000] [--outlets 300]
                                    [--urls 200000] [--min-units 5] [--repeat 3] [--pg URL]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from ingest_bench import Scratch

from linkfold.store import make_engine, upgrade

SLOTS = 12


def build(url: str, *, rows: int, units: int, outlets: int, urls: int) -> float:
    """Fill an empty registry: one ruleset, one dataset and file, ``urls`` canonical and raw URLs spread
    over ``outlets`` outlets, ``rows`` sightings. Returns the seconds it took."""
    per = max(1, urls // outlets)
    t0 = time.perf_counter()
    engine = make_engine(url)
    upgrade(engine)
    with engine.begin() as conn:
        run = conn.exec_driver_sql
        run("INSERT INTO rulesets (id, name, digest, source, canon_version, psl_version, created_at) "
            "VALUES (1, 'bench', 'bench', '', 'bench', 'bench', now())")
        run("INSERT INTO datasets (id, name, created_at, ruleset_id) VALUES (1, 'bench', now(), 1)")
        run("INSERT INTO dataset_files (id, dataset_id, file_name, sha256, size_bytes, format, state, "
            "started_at, loaded_at) VALUES (1, 1, 'generated', 'x', 0, 'csv', 'complete', now(), now())")
        # URL i belongs to outlet (i - 1) / per; every tenth is a page that is not an article.
        run(f"INSERT INTO canonical_urls (id, url_key, url, host, domain, outlet, is_article, ruleset_id, created_at) "
            f"SELECT i, 'k' || i, 'https://outlet-' || ((i - 1) / {per}) || '.example/a/' || i, "
            f"'outlet-' || ((i - 1) / {per}) || '.example', 'outlet-' || ((i - 1) / {per}) || '.example', "
            f"'Outlet ' || lpad(((i - 1) / {per})::text, 4, '0'), mod(i, 10) <> 0, 1, now() "
            f"FROM generate_series(1, {per * outlets}) i")
        run(f"INSERT INTO raw_urls (id, raw_hash, raw, canonical_id, ruleset_id, created_at) "
            f"SELECT i, md5(i::text), 'https://outlet-' || ((i - 1) / {per}) || '.example/a/' || i, i, 1, now() "
            f"FROM generate_series(1, {per * outlets}) i")
        # A unit's outlets are its slots 0..11 (slot s taken with falling probability: floor(12·r²));
        # the outlet of slot s is a fixed mix of unit and slot, so audiences overlap unevenly.
        run(f"INSERT INTO sightings (dataset_id, file_id, line_no, position, row_key, raw_url_id, unit) "
            f"SELECT 1, 1, g, 0, 'v' || g, o * {per} + floor(random() * {per})::int + 1, 'hs256:' || md5(u::text) "
            f"FROM (SELECT g, u, mod(u * 31 + s * s * 7 + s * 13, {outlets}) AS o FROM "
            f"(SELECT g, floor(random() * {units})::int AS u, floor({SLOTS} * random() ^ 2)::int AS s "
            f"FROM generate_series(1, {rows}) g) x) y")
        for table in ("canonical_urls", "raw_urls", "sightings"):
            run(f"ANALYZE {table}")
    engine.dispose()
    return time.perf_counter() - t0


def export_parquet(url: str, path: Path) -> None:
    """The sightings with what each counts for (unit, outlet, is_article), through COPY to CSV, then to
    Parquet by DuckDB (not timed: the baseline's input)."""
    import duckdb

    engine = make_engine(url)
    csv_path = path.with_suffix(".csv")
    with engine.connect() as conn, csv_path.open("wb") as fh:
        cur = conn.connection.driver_connection.cursor()
        with cur.copy("COPY (SELECT s.unit, c.outlet, c.is_article FROM sightings s JOIN raw_urls r ON "
                      "r.id = s.raw_url_id JOIN canonical_urls c ON c.id = r.canonical_id) TO STDOUT "
                      "WITH (FORMAT csv, HEADER)") as copy:
            for chunk in copy:
                fh.write(chunk)
    engine.dispose()
    duckdb.sql(f"COPY (SELECT * FROM read_csv('{csv_path}', header = true, "
               f"columns = {{'unit': 'VARCHAR', 'outlet': 'VARCHAR', 'is_article': 'BOOLEAN'}})) "
               f"TO '{path}' (FORMAT parquet)")
    csv_path.unlink()


def measure_ours(url: str, min_units: int) -> dict:
    from linkfold.network import bipartite_rows, co_exposure

    engine = make_engine(url)
    t0 = time.perf_counter()
    pairs = sum(1 for _ in bipartite_rows(engine, datasets=["bench"]))
    t1 = time.perf_counter()
    net = co_exposure(engine, datasets=["bench"], min_units=min_units, attributes=False)
    t2 = time.perf_counter()
    engine.dispose()
    return {"exposure": t1 - t0, "network": t2 - t1, "pairs": pairs, "units": net.units,
            "edges": len(net.edges), "edge_units": sum(e["units"] for e in net.edges)}


def measure_duckdb(path: Path, min_units: int) -> dict:
    import duckdb

    con = duckdb.connect()
    src = f"read_parquet('{path}')"
    pairs_sql = f"SELECT unit, outlet, count(*) AS sightings FROM {src} WHERE is_article GROUP BY unit, outlet"
    t0 = time.perf_counter()
    # The exposure table, fetched to the client in batches and dropped, as ours is.
    result = con.execute(pairs_sql + " ORDER BY unit, outlet")
    pairs = 0
    while batch := result.fetchmany(10000):
        pairs += len(batch)
    t1 = time.perf_counter()
    con.execute(f"CREATE TEMP VIEW pairs AS {pairs_sql}")
    con.execute("SELECT outlet, count(*), sum(sightings) FROM pairs GROUP BY outlet").fetchall()
    units = con.execute("SELECT count(DISTINCT unit) FROM pairs").fetchone()[0]
    edges = con.execute("SELECT a.outlet, b.outlet, count(*) AS n FROM pairs a JOIN pairs b ON a.unit = b.unit "
                        f"AND a.outlet < b.outlet GROUP BY a.outlet, b.outlet HAVING count(*) >= {min_units}"
                        ).fetchall()
    t2 = time.perf_counter()
    return {"exposure": t1 - t0, "network": t2 - t1, "pairs": pairs, "units": units, "edges": len(edges),
            "edge_units": sum(int(e[2]) for e in edges)}


def peak_rss_mb() -> float:
    """This process's peak resident memory (VmHWM). Not ``ru_maxrss``: Linux carries the parent's high-water
    mark across fork and exec into it, so a child started by a large parent would report the parent's."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _child(kind: str, target: str, min_units: int) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", kind, "--target", target, "--min-units",
                          str(min_units)], check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--rows", type=int, nargs="+", default=[1_000_000, 10_000_000])
    p.add_argument("--units", type=int, default=100_000)
    p.add_argument("--outlets", type=int, default=300)
    p.add_argument("--urls", type=int, default=200_000)
    p.add_argument("--min-units", type=int, default=5)
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--pg", default=os.environ.get("LINKFOLD_TEST_PG",
                                                  "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"))
    p.add_argument("--child", choices=["ours", "duckdb"], help=argparse.SUPPRESS)
    p.add_argument("--target", help=argparse.SUPPRESS)
    args = p.parse_args()
    if args.child:
        got = (measure_ours(args.target, args.min_units) if args.child == "ours"
               else measure_duckdb(Path(args.target), args.min_units))
        got["peak_rss_mb"] = peak_rss_mb()
        print(json.dumps(got))
        return
    for rows in args.rows:
        with Scratch(args.pg) as url, tempfile.TemporaryDirectory() as tmp:
            built = build(url, rows=rows, units=args.units, outlets=args.outlets, urls=args.urls)
            parquet = Path(tmp) / "sightings.parquet"
            export_parquet(url, parquet)
            print(f"{rows:,} sightings, {args.units:,} units, {args.outlets} outlets, {args.urls:,} URLs "
                  f"(built in {built:.1f} s; Parquet {parquet.stat().st_size / 1e6:.1f} MB)", flush=True)
            ours, base = [], []
            for i in range(args.repeat):
                ours.append(_child("ours", url, args.min_units))
                base.append(_child("duckdb", str(parquet), args.min_units))
                o, b = ours[-1], base[-1]
                if (o["pairs"], o["units"], o["edges"], o["edge_units"]) != \
                        (b["pairs"], b["units"], b["edges"], b["edge_units"]):
                    raise SystemExit(f"the two disagree: ours {o}, DuckDB {b}")
                print(f"  pair {i + 1}: ours exposure {o['exposure']:.2f} s network {o['network']:.2f} s "
                      f"({o['peak_rss_mb']:.0f} MB); DuckDB exposure {b['exposure']:.2f} s network "
                      f"{b['network']:.2f} s ({b['peak_rss_mb']:.0f} MB)", flush=True)
            for part in ("exposure", "network"):
                mo = statistics.median(x[part] for x in ours)
                mb = statistics.median(x[part] for x in base)
                print(f"  {part}: ours {mo:.2f} s, DuckDB {mb:.2f} s, ratio ours/DuckDB {mo / mb:.2f} (median)")
            print(f"  peak memory: ours {statistics.median(x['peak_rss_mb'] for x in ours):.0f} MB, DuckDB "
                  f"{statistics.median(x['peak_rss_mb'] for x in base):.0f} MB; {ours[-1]['pairs']:,} unit × outlet "
                  f"pairs, {ours[-1]['edges']:,} edges of ≥ {args.min_units} units over {ours[-1]['units']:,} units",
                  flush=True)


if __name__ == "__main__":
    main()
