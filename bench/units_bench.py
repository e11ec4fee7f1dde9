"""What carrying units costs a load, on PostgreSQL: the same generated panel loaded without and with its
person column as units (``--unit-column``), in fresh databases, as interleaved pairs.

The panel is ``ingest_bench.py``'s (visit id, URL drawn with a Zipf-like skew, time, a column that is not
stored) plus a ``person`` column of K distinct panellists drawn with a skew. Each pair loads the file
without a unit column, then the file with it, one right after the other (the machine's speed drifts
between runs); the median of the speed ratios is reported. Nothing is asserted.

Run:  python bench/units_bench.py [--rows 200000] [--units 20000] [--pairs 5] [--pg URL]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import ingest_bench as ib  # the sibling benchmark: its generator and loader


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, default=200_000)
    ap.add_argument("--distinct", type=int, default=None, help="distinct URLs (default rows/5)")
    ap.add_argument("--units", type=int, default=20_000, help="distinct panellists")
    ap.add_argument("--pairs", type=int, default=5)
    ap.add_argument("--pg", default=os.environ.get("LINKFOLD_TEST_PG",
                                                   "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"))
    args = ap.parse_args()
    n, d = args.rows, args.distinct or max(args.rows // 5, 1)
    with tempfile.TemporaryDirectory(prefix="lf-units-") as tmp:
        folder = Path(tmp)
        ib.write_dump(folder / "plain.csv", folder / "plain.urls", n, d)
        ib.write_dump(folder / "units.csv", folder / "units.urls", n, d, units=args.units)
        ratios = []
        for k in range(args.pairs):
            with ib.Scratch(args.pg) as url:
                plain = ib.run_ingest(url, folder / "plain.csv", 65536, 0)
            with ib.Scratch(args.pg) as url:
                units = ib.run_ingest(url, folder / "units.csv", 65536, args.units)
            ratios.append(plain["seconds"] / units["seconds"])
            print(f"pair {k + 1}/{args.pairs}: without units {n / plain['seconds']:,.0f} rows/s "
                  f"({plain['seconds']:.1f} s), with units {n / units['seconds']:,.0f} rows/s "
                  f"({units['seconds']:.1f} s): {ratios[-1]:.2f}x; peak RSS {plain['rss_kib'] / 1024:,.0f} / "
                  f"{units['rss_kib'] / 1024:,.0f} MiB", flush=True)
    print(f"loading with units runs at {statistics.median(ratios):.2f}x the speed without (median of "
          f"{len(ratios)} pairs; {min(ratios):.2f}-{max(ratios):.2f}x)")


if __name__ == "__main__":
    main()
