"""HTTP API benchmark, as ratios against the same lookups done in process in the same run.

A registry (SQLite file in a temporary folder, or --db) is loaded with N generated URLs of invented
outlets; a real ``linkfold serve`` process is started on a free loopback port with a read token.

Measured:
  (a) single lookups in process: ``lookup(engine, [url])`` one URL at a time, S times;
  (b) single lookups over HTTP: ``GET /v1/lookup?q=`` through one keep-alive connection, S times;
  (c) a batch in process: ``lookup(engine, urls)`` over B URLs;
  (d) a batch over HTTP: ``POST /v1/lookup`` with B URLs, the streamed JSON lines read to the end.

Reported: lookups per second of each, and the ratios (b)/(a) and (d)/(c): the share of in-process speed
the API keeps. HTTP costs a fixed amount per request, so (b)/(a) is expected to be far lower than (d)/(c);
nothing is asserted.
Run:  python bench/api_bench.py [--urls 20000] [--singles 1000] [--batch 10000] [--db URL]
"""

from __future__ import annotations

import argparse
import os
import random
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import httpx

from linkfold.ingest import ingest_dump, lookup
from linkfold.store import make_engine, upgrade
from linkfold.store.tokens import create_token

HOSTS = [f"outlet{i}.example" for i in range(200)] + ["harbour-gazette.example", "valley-courier.test"]
WORDS = ["tide", "barrier", "council", "ferry", "market", "budget", "library", "storm", "pier", "school"]


def generate(n: int, seed: int = 11) -> list[str]:
    rng = random.Random(seed)
    out = []
    for i in range(n):
        slug = "-".join(rng.sample(WORDS, 3))
        out.append(f"https://{rng.choice(HOSTS)}/2031/{rng.randint(1, 12):02d}/{slug}-{i}?utm_source=feed")
    return out


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def serve(db_url: str, port: int, log: Path) -> subprocess.Popen:
    env = {k: v for k, v in os.environ.items() if not k.startswith("LINKFOLD_")}
    proc = subprocess.Popen([sys.executable, "-m", "linkfold.cli", "--db", db_url, "--quiet", "serve",
                             "--port", str(port)], stdout=log.open("wb"), stderr=subprocess.STDOUT, env=env)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"http://127.0.0.1:{port}/v1/health", timeout=1).status_code == 200:
                return proc
        except httpx.TransportError:
            time.sleep(0.1)
    proc.kill()
    raise SystemExit(f"the server did not start: {log.read_text(errors='replace')}")


def rate(n: int, seconds: float) -> float:
    return n / max(seconds, 1e-9)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--urls", type=int, default=20000)
    ap.add_argument("--singles", type=int, default=1000)
    ap.add_argument("--batch", type=int, default=10000)
    ap.add_argument("--db", help="registry URL to use (default: a new SQLite file in a temporary folder)")
    args = ap.parse_args()

    tmp = Path(tempfile.mkdtemp(prefix="linkfold-api-bench-"))
    db_url = args.db or f"sqlite:///{tmp / 'bench.db'}"
    engine = make_engine(db_url)
    upgrade(engine)
    urls = generate(args.urls)
    dump = tmp / "bench.txt"
    dump.write_text("\n".join(urls) + "\n", encoding="utf-8")
    t0 = time.perf_counter()
    ingest_dump(engine, [dump], dataset="api-bench")
    print(f"loaded {len(urls):,} URLs in {time.perf_counter() - t0:.1f} s into {engine.url.render_as_string()}")
    token = create_token(engine, scope="read", note="api bench").secret

    rng = random.Random(5)
    singles = [rng.choice(urls) for _ in range(args.singles)]
    batch = [rng.choice(urls) for _ in range(args.batch)]

    port = free_port()
    proc = serve(db_url, port, tmp / "serve.log")
    try:
        with httpx.Client(base_url=f"http://127.0.0.1:{port}/v1", timeout=120,
                          headers={"Authorization": f"Bearer {token}"}) as http:
            for url in singles[:20]:  # warm both sides: connection, caches, parsed ruleset
                http.get("/lookup", params={"q": url}).raise_for_status()
                next(iter(lookup(engine, [url])))

            t0 = time.perf_counter()
            for url in singles:
                next(iter(lookup(engine, [url])))
            in_single = time.perf_counter() - t0

            t0 = time.perf_counter()
            for url in singles:
                http.get("/lookup", params={"q": url}).raise_for_status()
            http_single = time.perf_counter() - t0

            t0 = time.perf_counter()
            n_in = sum(1 for _ in lookup(engine, batch))
            in_batch = time.perf_counter() - t0

            t0 = time.perf_counter()
            n_http = 0
            with http.stream("POST", "/lookup", json={"urls": batch}) as response:
                response.raise_for_status()
                for line in response.iter_lines():
                    n_http += bool(line)
            http_batch = time.perf_counter() - t0
    finally:
        proc.terminate()
        proc.wait(timeout=10)
        engine.dispose()
    assert n_in == n_http == len(batch), (n_in, n_http)

    rows = [("single lookups, in process", rate(len(singles), in_single)),
            ("single lookups, HTTP", rate(len(singles), http_single)),
            (f"batch of {len(batch):,}, in process", rate(len(batch), in_batch)),
            (f"batch of {len(batch):,}, HTTP", rate(len(batch), http_batch))]
    for name, value in rows:
        print(f"{name:32s} {value:12,.0f} lookups/s")
    print(f"ratio single HTTP / in process: {http_single and in_single / http_single:.2f}")
    print(f"ratio batch  HTTP / in process: {http_batch and in_batch / http_batch:.2f} "
          f"(batch over HTTP: {http_batch:.2f} s for {len(batch):,} URLs)")


if __name__ == "__main__":
    main()
