"""Redirect-following benchmark, as a ratio against a baseline measured in the same run.

Baseline: a bare ``httpx.AsyncClient(follow_redirects=True)`` sending HEAD requests over the same
chains with the same number of requests in flight — no guard, no robots, no per-host bookkeeping, no
loop detection, no canonicalisation. It is the least an httpx-based follower can cost.

Measured: ``follow_chain`` over :class:`linkfold.web.SafeClient` (guard with address pinning,
politeness slots with a zero host delay, retries armed) on the same chains.

Both run against a threaded HTTP server on 127.0.0.1 (in a process of its own) serving chains of
``--hops`` relative 301s. The server is the same for both, so the ratio shows what the safety machinery
costs per chain; with a server this fast, the client side is what limits either.

Target (issue 5): the safe follower at least 0.5x the baseline's chains per second; the ratio is
printed, nothing is asserted.
Run:  python bench/follow_bench.py [--chains 400] [--hops 3] [--concurrency 16]
"""

from __future__ import annotations

import argparse
import asyncio
import multiprocessing
import sys
import time
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import httpx

from linkfold.web import ClientConfig, SafeClient, follow_chain

TARGET = 0.5


class _Chains(BaseHTTPRequestHandler):
    protocol_version = "HTTP/1.1"

    def log_message(self, format: str, *args: object) -> None:
        pass

    def do_HEAD(self) -> None:
        # /c/<id>/<n>: n redirects left.
        _, _c, ident, n = self.path.split("/")
        left = int(n)
        if left:
            self.send_response(301)
            self.send_header("Location", f"../{ident}/{left - 1}")
        else:
            self.send_response(200)
        self.send_header("Content-Length", "0")
        self.end_headers()


def _serve(port_out) -> None:
    httpd = ThreadingHTTPServer(("127.0.0.1", 0), _Chains)
    httpd.daemon_threads = True
    port_out.put(httpd.server_address[1])
    httpd.serve_forever(poll_interval=0.05)


async def baseline(origin: str, chains: int, hops: int, concurrency: int) -> float:
    gate = asyncio.Semaphore(concurrency)
    async with httpx.AsyncClient(follow_redirects=True, trust_env=False,
                                 limits=httpx.Limits(max_connections=concurrency)) as client:
        async def one(i: int) -> None:
            async with gate:
                r = await client.head(f"{origin}/c/{i}/{hops}")
                assert r.status_code == 200 and len(r.history) == hops

        t0 = time.perf_counter()
        await asyncio.gather(*(one(i) for i in range(chains)))
        return time.perf_counter() - t0


async def safe(origin: str, chains: int, hops: int, concurrency: int) -> float:
    config = ClientConfig(contact="mailto:bench@university.example", concurrency=concurrency,
                          host_concurrency=concurrency, host_delay=0.0, allow_networks=("127.0.0.0/8",))
    gate = asyncio.Semaphore(concurrency)
    async with SafeClient(config) as client:
        async def one(i: int) -> None:
            async with gate:
                chain = await follow_chain(client, f"{origin}/c/{i}/{hops}", max_hops=hops)
                assert chain.state == "resolved" and len(chain.hops) == hops

        t0 = time.perf_counter()
        await asyncio.gather(*(one(i) for i in range(chains)))
        return time.perf_counter() - t0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--chains", type=int, default=400)
    ap.add_argument("--hops", type=int, default=3)
    ap.add_argument("--concurrency", type=int, default=16)
    args = ap.parse_args(argv)
    # The server runs in its own process, so that it does not share the interpreter lock with the
    # client under test: what is timed is the client side.
    ports: multiprocessing.Queue = multiprocessing.Queue()
    server = multiprocessing.Process(target=_serve, args=(ports,), daemon=True)
    server.start()
    origin = f"http://127.0.0.1:{ports.get(timeout=10)}"
    try:
        # Warm both once (imports, first connections), then measure.
        asyncio.run(baseline(origin, 20, args.hops, args.concurrency))
        asyncio.run(safe(origin, 20, args.hops, args.concurrency))
        base = asyncio.run(baseline(origin, args.chains, args.hops, args.concurrency))
        ours = asyncio.run(safe(origin, args.chains, args.hops, args.concurrency))
    finally:
        server.terminate()
        server.join(timeout=5)
    base_rate, our_rate = args.chains / base, args.chains / ours
    ratio = our_rate / base_rate
    print(f"chains: {args.chains} of {args.hops} hops, {args.concurrency} in flight")
    print(f"baseline (bare httpx, follow_redirects): {base_rate:8.1f} chains/s")
    print(f"safe follower (guard, slots, checks):   {our_rate:8.1f} chains/s")
    print(f"ratio: {ratio:.2f}x of baseline (target >= {TARGET}x): {'met' if ratio >= TARGET else 'NOT met'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
