"""Rule suggestions: quality per URL scheme, and learning time and peak memory as the registry grows.

An invented world (tests/suggest_world.py: outlets with eight known article schemes, their non-article
pages, parameter variants, a shortener, an image host, an archive alias) is stored in an SQLite registry
at each size, by adding more outlets of the same schemes (``--per-outlet`` URLs each), so a larger size
means more outlets, as a growing lab registry does. Then, in fresh processes, ``--repeat`` pairs, one
right after the other:

  baseline   the floor: streaming the same canonical URLs in the same order with their per-URL document
             summary (the query suggestions read) and splitting each URL, nothing learned;
  suggest    ``suggest_rules_file`` (learn, write the file in memory, check it with the rules parser).

Each pair gives a time ratio (suggest / baseline) and both processes' peak resident memory; medians are
printed. Quality: the suggested rules are applied to held-out URLs (never stored) of the eight base
outlets; precision and recall of ``is_article`` per scheme are printed. Nothing is asserted.

Run:  python bench/suggest_bench.py [--sizes 100000,300000] [--per-outlet 2000] [--repeat 3] [--keep DIR]
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))


def _child(mode: str, db: str, out: str) -> None:
    from linkfold.store import make_engine

    engine = make_engine(f"sqlite:///{db}")
    t0 = time.perf_counter()
    if mode == "baseline":
        from urllib.parse import urlsplit

        from linkfold.suggest.evidence import stream_urls

        n = 0
        with engine.connect() as conn:
            for row in stream_urls(conn):
                urlsplit(row.url)
                n += 1
        result = {"urls": n}
    else:
        from linkfold.suggest import suggest_rules_file

        got = suggest_rules_file(engine, min_support=10)
        Path(out).write_text(got.text, encoding="utf-8")
        result = got.suggestions.counts()
    seconds = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps({"seconds": seconds, "peak_mb": peak_mb, **result}))


def _run(mode: str, db: Path, out: Path) -> dict:
    done = subprocess.run([sys.executable, __file__, "--child", mode, str(db), str(out)], check=True,
                          capture_output=True, text=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def _quality(rules_path: Path) -> dict[str, tuple[float, float]]:
    from linkfold.canon import load_rules
    from suggest_world import quality

    return quality(load_rules(rules_path), 1000)


def _build(db: Path, size: int, per_outlet: int) -> dict[str, int]:
    from linkfold.store import ensure_schema, make_engine
    from suggest_world import build_world

    engine = make_engine(f"sqlite:///{db}")
    ensure_schema(engine)
    # About 1.9 stored URLs per article drawn (variants, pages that are not articles), per outlet.
    copies = max(1, round(size / (per_outlet * 1.9 * 8)))
    t0 = time.perf_counter()
    counts = build_world(engine, per_outlet=per_outlet, copies=copies, tmp=db.parent, batch=20000)
    counts["build_seconds"] = round(time.perf_counter() - t0)
    counts["outlets"] = copies * 8
    engine.dispose()
    return counts


def main() -> None:
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        _child(*sys.argv[2:5])
        return
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", default="100000,300000", help="stored URLs, comma-separated (approximate)")
    ap.add_argument("--per-outlet", type=int, default=2000, help="articles drawn per outlet")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--keep", type=Path, help="keep the registries in this folder (reused when present)")
    args = ap.parse_args()
    work = args.keep or Path(tempfile.mkdtemp(prefix="suggest-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    for size in (int(s) for s in args.sizes.split(",")):
        folder = work / f"n{size}"
        folder.mkdir(exist_ok=True)
        db = folder / "registry.db"
        if not db.exists():
            counts = _build(db, size, args.per_outlet)
            print(f"built {size:,}: {counts}", flush=True)
        ratios, base_mb, ours_mb, ours_s = [], [], [], []
        out = folder / "suggested.toml"
        for _ in range(args.repeat):
            b = _run("baseline", db, out)
            s = _run("suggest", db, out)
            ratios.append(s["seconds"] / b["seconds"])
            base_mb.append(b["peak_mb"])
            ours_mb.append(s["peak_mb"])
            ours_s.append(s["seconds"])
        print(f"size {b['urls']:,} stored URLs: suggest {statistics.median(ours_s):.1f} s, "
              f"{statistics.median(ratios):.2f}× the streaming floor ({args.repeat} pairs, median); peak memory "
              f"{statistics.median(ours_mb):.0f} MB (floor {statistics.median(base_mb):.0f} MB); {s}", flush=True)
        for scheme, (p, r) in _quality(out).items():
            print(f"  {scheme:12s} precision {p:.4f}  recall {r:.4f}")


if __name__ == "__main__":
    main()
