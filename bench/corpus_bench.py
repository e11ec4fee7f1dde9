"""The corpus export against writing the same texts straight out of the database with one query, same run.

Builds a registry on PostgreSQL straight into its tables with ``generate_series`` (set-based, not through
the stages, so a large one is built in seconds): S stories, each published by one to three outlets (a
canonical URL, an article ID and a usable document of about 2 KB each; the copies of a story share its
text and its story ID), and about three sightings per story over two datasets with units. Then, as
``--repeat`` interleaved pairs, each in a fresh process so its peak memory is its own:

  ours      ``write_corpus`` at story level, both datasets, JSON lines to a file: the sightings grouped
            per story and dataset, the representative chosen by a window function, members and outlets,
            every record with its per-dataset counts;
  baseline  one SELECT of every story's founder document (``cluster_ids`` join ``documents``: id, title,
            text, published), streamed with a server-side cursor and written as JSON lines to a file.

Printed: each pair, the medians, the speed ratio (baseline time / our time; 1 is as fast as the bare query,
the target is at least 0.5) and the peak resident memory of each (VmHWM). Run at two sizes to see that
memory stays flat in the number of stories.

Run:  python bench/corpus_bench.py [--stories 10000 100000] [--repeat 3] [--pg URL]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from ingest_bench import Scratch
from network_bench import peak_rss_mb

from linkfold.store import make_engine, upgrade


def build(url: str, *, stories: int) -> float:
    """Fill an empty registry (module doc). Returns the seconds it took."""
    t0 = time.perf_counter()
    engine = make_engine(url)
    upgrade(engine)
    with engine.begin() as conn:
        run = conn.exec_driver_sql
        run("INSERT INTO rulesets (id, name, digest, source, canon_version, psl_version, created_at) "
            "VALUES (1, 'bench', 'bench', '', 'bench', 'bench', now())")
        for d in (1, 2):
            run(f"INSERT INTO datasets (id, name, created_at, ruleset_id) VALUES ({d}, 'bench-{d}', now(), 1)")
            run(f"INSERT INTO dataset_files (id, dataset_id, file_name, sha256, size_bytes, format, state, "
                f"started_at, loaded_at) VALUES ({d}, {d}, 'generated', 'x{d}', 0, 'csv', 'complete', now(), now())")
        # Story k has copies j = 0 .. mod(k, 3); URL id = 3k + j + 1, on outlet mod(k + j, 50).
        run("CREATE TEMP TABLE copies AS SELECT k, j, 3 * k + j + 1 AS id, mod(k + j, 50) AS o "
            f"FROM generate_series(0, {stories - 1}) k, generate_series(0, 2) j WHERE j <= mod(k, 3)")
        run("INSERT INTO canonical_urls (id, url_key, url, host, domain, outlet, is_article, ruleset_id, created_at) "
            "SELECT id, 'k' || lpad(id::text, 12, '0'), 'https://outlet-' || o || '.example/a/' || id, "
            "'outlet-' || o || '.example', 'outlet-' || o || '.example', 'outlet-' || o || '.example', true, 1, "
            "now() FROM copies")
        run("INSERT INTO raw_urls (id, raw_hash, raw, canonical_id, ruleset_id, created_at) "
            "SELECT id, md5(id::text), 'https://outlet-' || o || '.example/a/' || id, id, 1, now() FROM copies")
        run("INSERT INTO cluster_ids (id, level, stem, founder_id, mint_order, state, minted_at) "
            "SELECT 'a' || id, 'article', 'a' || id, id, id, 'live', now() FROM copies")
        run("INSERT INTO cluster_ids (id, level, stem, founder_id, mint_order, state, minted_at) "
            "SELECT 's' || lpad(k::text, 8, '0'), 'story', 's' || k, 3 * k + 1, k, 'live', now() "
            "FROM copies WHERE j = 0")
        run("INSERT INTO cluster_members (level, canonical_id, cluster_id) SELECT 'article', id, 'a' || id FROM copies")
        run("INSERT INTO cluster_members (level, canonical_id, cluster_id) "
            "SELECT 'story', id, 's' || lpad(k::text, 8, '0') FROM copies")
        # About 2 KB of text a story, the same for its copies; the first copy is the earliest published.
        run("INSERT INTO documents (canonical_id, title, text, text_hash, word_count, published, language, "
            "state, extractor_version, source, created_at) "
            "SELECT id, 'Story ' || k, repeat(md5(k::text) || ' ', 62), md5(k::text), 62, "
            "timestamptz '2031-01-01' + (k || ' minutes')::interval + (j || ' hours')::interval, 'en', "
            "'usable', 'bench', 'bench', now() FROM copies")
        # Three sightings a story on average (each story at least once, so both sides write every story), on
        # a random copy, in dataset 1 or 2, by one of 20,000 units.
        run("INSERT INTO sightings (dataset_id, file_id, line_no, position, row_key, seen_at, raw_url_id, unit) "
            "SELECT d, d, g, 0, 'v' || g, timestamptz '2031-02-01' + (g || ' seconds')::interval, "
            "3 * k + floor(random() * (mod(k, 3) + 1))::int + 1, 'hs256:' || md5(floor(random() * 20000)::text) "
            f"FROM (SELECT g, CASE WHEN g <= {stories} THEN g - 1 ELSE floor(random() * {stories})::int END AS k, 1 + (random() < 0.4)::int AS d "
            f"FROM generate_series(1, {3 * stories}) g) x")
        for table in ("canonical_urls", "raw_urls", "cluster_ids", "cluster_members", "documents", "sightings"):
            run(f"ANALYZE {table}")
    engine.dispose()
    return time.perf_counter() - t0


def measure_ours(url: str, out: Path) -> dict:
    from linkfold.corpus import write_corpus

    engine = make_engine(url)
    t0 = time.perf_counter()
    summary = write_corpus(engine, datasets=["bench-1", "bench-2"], level="story", fmt="jsonl", out=out)
    seconds = time.perf_counter() - t0
    engine.dispose()
    return {"seconds": seconds, "records": summary.counts["written"], "bytes": out.stat().st_size}


def measure_baseline(url: str, out: Path) -> dict:
    engine = make_engine(url)
    t0 = time.perf_counter()
    n = 0
    with engine.connect() as conn, out.open("w", encoding="utf-8") as fh:
        result = conn.execution_options(stream_results=True, yield_per=2000).exec_driver_sql(
            "SELECT ci.id, d.title, d.text, d.published FROM cluster_ids ci "
            "JOIN documents d ON d.canonical_id = ci.founder_id WHERE ci.level = 'story' ORDER BY ci.id")
        for cid, title, text, published in result:
            fh.write(json.dumps({"story_id": cid, "title": title, "text": text,
                                 "published": published.isoformat()}, ensure_ascii=False) + "\n")
            n += 1
    seconds = time.perf_counter() - t0
    engine.dispose()
    return {"seconds": seconds, "records": n, "bytes": out.stat().st_size}


def _child(kind: str, url: str, out: Path) -> dict:
    done = subprocess.run([sys.executable, __file__, "--child", kind, "--target", url, "--out", str(out)],
                          check=True, capture_output=True, text=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--stories", type=int, nargs="+", default=[10_000, 100_000])
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--pg", default=os.environ.get("LINKFOLD_TEST_PG",
                                                  "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"))
    p.add_argument("--child", choices=["ours", "baseline"], help=argparse.SUPPRESS)
    p.add_argument("--target", help=argparse.SUPPRESS)
    p.add_argument("--out", help=argparse.SUPPRESS)
    args = p.parse_args()
    if args.child:
        measure = measure_ours if args.child == "ours" else measure_baseline
        got = measure(args.target, Path(args.out))
        got["peak_rss_mb"] = peak_rss_mb()
        print(json.dumps(got))
        return
    for stories in args.stories:
        with Scratch(args.pg) as url, tempfile.TemporaryDirectory() as tmp:
            built = build(url, stories=stories)
            print(f"{stories:,} stories, {3 * stories:,} sightings (built in {built:.1f} s)", flush=True)
            ours, base = [], []
            for i in range(args.repeat):
                # Interleaved, the baseline first in odd pairs: the shared machine's load drifts.
                order = ("baseline", "ours") if i % 2 == 0 else ("ours", "baseline")
                got = {kind: _child(kind, url, Path(tmp) / f"{kind}.jsonl") for kind in order}
                o, b = got["ours"], got["baseline"]
                if o["records"] != b["records"] or o["records"] != stories:
                    raise SystemExit(f"record counts differ: ours {o['records']:,}, baseline {b['records']:,}")
                ours.append(o)
                base.append(b)
                print(f"  pair {i + 1}: ours {o['seconds']:.2f} s ({o['peak_rss_mb']:.0f} MB, "
                      f"{o['bytes'] / 1e6:.0f} MB out); baseline {b['seconds']:.2f} s ({b['peak_rss_mb']:.0f} MB, "
                      f"{b['bytes'] / 1e6:.0f} MB out); ratio {b['seconds'] / o['seconds']:.2f}", flush=True)
            mo = statistics.median(x["seconds"] for x in ours)
            mb = statistics.median(x["seconds"] for x in base)
            print(f"  median: ours {mo:.2f} s, baseline {mb:.2f} s, speed ratio baseline/ours {mb / mo:.2f}; "
                  f"peak memory ours {statistics.median(x['peak_rss_mb'] for x in ours):.0f} MB, baseline "
                  f"{statistics.median(x['peak_rss_mb'] for x in base):.0f} MB", flush=True)


if __name__ == "__main__":
    main()
