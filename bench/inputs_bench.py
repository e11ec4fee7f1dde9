"""The shared input readers on their own (no database), as ratios against the standard library's floor.

Baselines, measured in the same run on the same generated files:
  CSV:         ``csv.reader`` over the decoded lines (parsing only: no limits, no checks, no rows kept);
  JSON lines:  ``json.loads`` of every line (parsing only).
Measured: ``linkfold.inputs.DumpReader`` reading the URL, key and time columns as ingest does (fast
lanes, every check), pieces counted and dropped. Each pair is baseline then reader, CPU time of this
process (``time.process_time``: less sensitive than wall time to other work on a shared machine);
``--repeat`` pairs, the median ratio reported. Nothing is asserted.

Run:  python bench/inputs_bench.py [--rows 200000] [--repeat 5]
"""

from __future__ import annotations

import argparse
import csv
import json
import random
import statistics
import tempfile
import time
from contextlib import closing
from pathlib import Path

from linkfold.inputs import DumpFormat, DumpReader, ReadOptions, RowBlock, open_binary, physical_lines

HOSTS = [f"outlet{i}.example" for i in range(300)]


def generate(folder: Path, rows: int) -> tuple[Path, Path]:
    rng = random.Random(7)
    table, lines = folder / "visits.csv", folder / "posts.jsonl"
    with table.open("w", encoding="utf-8") as fh:
        fh.write("visit_id,url,visited,note\n")
        for i in range(rows):
            fh.write(f"v{i},https://{rng.choice(HOSTS)}/news/{rng.randrange(50000)}?utm_source=x,"
                     f"2031-05-04T08:{i % 60:02d}:00Z,zz\n")
    with lines.open("w", encoding="utf-8") as fh:
        for i in range(rows):
            fh.write(json.dumps({"id": f"p{i}", "url": f"https://{rng.choice(HOSTS)}/n/{i}",
                                 "t": "2031-05-04T08:00:00Z"}) + "\n")
    return table, lines


def floor(path: Path, fmt: str) -> float:
    start = time.process_time()
    with path.open(encoding="utf-8", newline="") as fh:
        if fmt == "csv":
            for _row in csv.reader(fh):
                pass
        else:
            for line in fh:
                json.loads(line)
    return time.process_time() - start


def reader(path: Path, fmt: str) -> float:
    options = ReadOptions(fmt=DumpFormat(fmt), url_columns=("url",),
                          key_column="visit_id" if fmt == "csv" else "id",
                          time_column="visited" if fmt == "csv" else "t")
    start = time.process_time()
    rows = 0
    with closing(open_binary(path, gzipped=False)) as stream:
        for piece in DumpReader(physical_lines(stream.binary, 1 << 20), options, name=path.name).pieces():
            rows += len(piece) if isinstance(piece, RowBlock) else 1
    return time.process_time() - start


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=200_000)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        table, lines = generate(Path(tmp), args.rows)
        for label, path, fmt in (("CSV", table, "csv"), ("JSON lines", lines, "jsonl")):
            ratios = []
            for _ in range(args.repeat):
                base, ours = floor(path, fmt), reader(path, fmt)
                ratios.append(ours / base)
            print(f"{label}: the reader takes {statistics.median(ratios):.2f}x the standard library's parse "
                  f"(median of {args.repeat} pairs; {min(ratios):.2f}-{max(ratios):.2f}); "
                  f"{args.rows / ours:,.0f} rows/s in the last pair")


if __name__ == "__main__":
    main()
