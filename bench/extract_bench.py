"""Extraction over every core against bare trafilatura on one core, same pages, same run.

Baseline: ``trafilatura.extract(html)`` on each page, one after the other, in this process: what a user
would write for one core. Ours: :func:`linkfold.content.batch.extract_batch` (our full extraction: charset,
text, title, dates, declared canonical link, usable-text verdict) through the executor's local process
pool with one worker per core, batches of ``--batch`` pages, results back in this process.

Target (issue 21): ours ≥ 0.8 × cores × the baseline's pages per second. The pool's start-up (workers
importing the extraction library) is included in ours. Pairs run back to back; the medians are reported.

Run:  python bench/extract_bench.py [--pages N] [--repeat R] [--workers W] [--batch B]
"""

from __future__ import annotations

import argparse
import random
import statistics
import time
from datetime import UTC, datetime

from linkfold.content.batch import ExtractJob, extract_batch
from linkfold.content.pages import Page
from linkfold.executor import ProcessPool, cpu_count

TARGET = 0.8
WORDS = ["harbour", "council", "budget", "river", "bridge", "library", "festival", "storm", "pier", "school", "water", "park", "road", "market", "museum", "station", "ferry", "mayor", "vote", "plan", "repair", "opening", "week", "night", "crowd", "team", "report", "weather"]


def _sentence(rng: random.Random) -> str:
    words = [rng.choice(WORDS) for _ in range(rng.randrange(8, 22))]
    return " ".join(words).capitalize() + "."


def make_page(i: int, rng: random.Random) -> tuple[str, bytes]:
    """An article page shaped like a news site's: navigation, the article, related links, a footer."""
    url = f"https://riverton-daily.example/local/2026/11/{i:06d}/story-{i}"
    paragraphs = "\n".join(f"<p>{' '.join(_sentence(rng) for _ in range(rng.randrange(3, 7)))}</p>"
                           for _ in range(rng.randrange(6, 14)))
    nav = "".join(f'<li><a href="/section/{w}">{w}</a></li>' for w in WORDS[:12])
    related = "".join(f'<li><a href="/local/2026/11/{j:06d}/story-{j}">{_sentence(rng)}</a></li>'
                      for j in range(i + 1, i + 6))
    html = f"""<!doctype html><html lang="en"><head><meta charset="utf-8">
<title>Story {i} - Riverton Daily</title><link rel="canonical" href="{url}">
<meta property="article:published_time" content="2026-11-{1 + i % 28:02d}T08:00:00Z"></head>
<body><header><nav><ul>{nav}</ul></nav></header>
<main><article><h1>Story {i}: {_sentence(rng)}</h1><p class="byline">By a staff writer</p>
{paragraphs}</article><aside><h2>Related</h2><ul>{related}</ul></aside></main>
<footer><p>Contact the newsroom. All rights reserved.</p></footer></body></html>"""
    return url, html.encode("utf-8")


def bare_one_core(pages: list[tuple[str, bytes]]) -> float:
    import trafilatura

    t0 = time.perf_counter()
    for _url, body in pages:
        trafilatura.extract(body.decode("utf-8"))
    return time.perf_counter() - t0


def ours_every_core(pages: list[tuple[str, bytes]], workers: int, batch: int) -> tuple[float, int]:
    when = datetime(2026, 12, 1, tzinfo=UTC)
    objs = [Page(url=u, final_url=u, status=200, headers={"content-type": "text/html; charset=utf-8"},
                 body=b, fetched_at=when, source="bench") for u, b in pages]
    jobs = (ExtractJob(objs[lo:lo + batch], now=when) for lo in range(0, len(objs), batch))
    t0 = time.perf_counter()
    usable = 0
    with ProcessPool(workers) as pool:  # start-up included: a nightly run pays it too
        for docs in pool.map(extract_batch, jobs):
            usable += sum(1 for d in docs if d.unusable_reason is None)
    return time.perf_counter() - t0, usable


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--pages", type=int, default=2000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--workers", type=int, default=0, help="0: one per core")
    ap.add_argument("--batch", type=int, default=20)
    args = ap.parse_args()
    cores = args.workers or cpu_count()
    rng = random.Random(1)
    pages = [make_page(i, rng) for i in range(args.pages)]
    print(f"{len(pages)} pages, {sum(len(b) for _, b in pages) / len(pages) / 1024:.1f} KiB each on average; "
          f"{cores} workers")
    ratios = []
    for r in range(args.repeat):
        base = bare_one_core(pages)
        ours, usable = ours_every_core(pages, cores, args.batch)
        base_rate, ours_rate = len(pages) / base, len(pages) / ours
        ratio = ours_rate / (cores * base_rate)
        ratios.append(ratio)
        print(f"pair {r + 1}: bare one core {base_rate:7.1f} pages/s | ours on {cores} workers {ours_rate:7.1f} "
              f"pages/s ({usable} usable) | ours / ({cores} x bare) = {ratio:.2f}")
    median = statistics.median(ratios)
    print(f"median ratio {median:.2f} (target >= {TARGET}: {'met' if median >= TARGET else 'not met'})")


if __name__ == "__main__":
    main()
