"""Soak test: lookups over HTTP at a steady rate while ingests and a nightly run write to the same registry.

Bounded and loopback only: a real ``linkfold serve`` process on 127.0.0.1, writers started as ``linkfold``
processes with no contact set (so the nightly job skips the two stages that would reach the network, and no
name is ever resolved), invented outlets on reserved names.

What happens, in a fresh registry (``--pg``: a new database on that server, dropped afterwards; default: a
SQLite file in a temporary folder):
  1. a base dataset of ``--urls`` generated URLs is loaded, with documents for a share of them (near copies
     among them), so lookups find something and the nightly job has work;
  2. the server starts with a read token; for ``--seconds`` lookups go out at ``--rate`` a second, spread
     over ``--clients`` keep-alive connections and paced on a fixed schedule (open loop: a slow answer does
     not slow the next request, it shows as latency): single lookups, and every tenth a batch of 50;
  3. meanwhile ``--ingests`` new dumps are loaded one after another, each by its own ``linkfold datasets load``
     process, and one ``linkfold nightly`` run (extract and dedupe over the new documents) starts a third of
     the way in.

Reported: requests sent, errors (any transport failure or non-200 answer, and a batch whose stream holds an
error line or too few answers; the goal is none), latency percentiles p50/p95/p99 and max for single and
batch lookups, separately for the quiet part and for the time writers were running, how late requests went
out when every client was still busy (latency hides that wait), and each writer's exit status and time. Exit status 1 when there was an error or a writer failed. Nothing else is asserted: the
machine is shared and noisy, so the figures are for reading, and repeated runs vary.

Run:  python bench/soak.py [--pg postgresql+psycopg://postgres@127.0.0.1:5432/postgres] [--seconds 60]
                           [--rate 40] [--clients 4] [--urls 20000] [--ingests 3] [--ingest-rows 20000]
"""

from __future__ import annotations

import argparse
import json
import os
import random
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

import httpx
import sqlalchemy as sa

from linkfold.store import make_engine, upgrade
from linkfold.store.tokens import create_token

HOSTS = [f"outlet{i}.example" for i in range(150)] + ["harbour-gazette.example", "valley-courier.test"]
WORDS = ["tide", "barrier", "council", "ferry", "market", "budget", "library", "storm", "pier", "school",
         "harbour", "orchard", "bridge", "vote", "festival", "museum", "tram", "river", "clinic", "park"]
BATCH = 50


def generate(n: int, rng: random.Random, tag: str) -> list[str]:
    out = []
    for i in range(n):
        slug = "-".join(rng.sample(WORDS, 3))
        out.append(f"https://{rng.choice(HOSTS)}/2031/{rng.randint(1, 12):02d}/{slug}-{tag}{i}"
                   + rng.choice(["", "", "?utm_source=feed", "?utm_medium=social&ref=front"]))
    return out


def documents(urls: list[str], rng: random.Random) -> list[str]:
    """JSON lines for the documents stage: every fourth URL gets a text; every tenth text is a near copy of
    the one before it (a syndicated copy), so dedupe forms clusters."""
    lines, previous = [], None
    for i, url in enumerate(urls[::4]):
        if previous is not None and i % 10 == 0:
            words = previous[:-5] + rng.choices(WORDS, k=5)
        else:
            words = rng.choices(WORDS, k=rng.randint(180, 260))
        previous = words
        lines.append(json.dumps({"url": url, "title": " ".join(words[:6]).capitalize(),
                                 "text": " ".join(words).capitalize() + ".", "published": "2031-05-04T08:00:00Z"}))
    return lines


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def quiet_env() -> dict[str, str]:
    # No LINKFOLD_* from the caller's shell: no contact (network stages skip), no allowed networks.
    return {k: v for k, v in os.environ.items() if not k.startswith("LINKFOLD_")}


def cli(db_url: str, *args: str) -> list[str]:
    return [sys.executable, "-m", "linkfold.cli", "--db", db_url, "-q", *args]


@dataclass
class Sample:
    at: float  # seconds since the start of the lookup phase
    kind: str  # single | batch
    seconds: float
    error: str | None = None
    late: float = 0.0  # how long after its scheduled time the request went out (the client fell behind)


@dataclass
class Writer:
    name: str
    args: list[str]
    start_after: float
    started: float | None = None
    ended: float | None = None
    status: int | None = None
    output: str = ""


@dataclass
class Soak:
    samples: list[Sample] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def add(self, sample: Sample) -> None:
        with self.lock:
            self.samples.append(sample)


def client_loop(base: str, token: str, urls: list[str], schedule: list[float], start: float, soak: Soak,
                seed: int) -> None:
    rng = random.Random(seed)
    with httpx.Client(base_url=base, timeout=30, headers={"Authorization": f"Bearer {token}"}) as http:
        for k, due in enumerate(schedule):
            wait = start + due - time.perf_counter()
            if wait > 0:
                time.sleep(wait)
            kind = "batch" if k % 10 == 9 else "single"
            t0 = time.perf_counter()
            late = max(0.0, t0 - (start + due))
            error = None
            try:
                if kind == "single":
                    r = http.get("/v1/lookup", params={"q": rng.choice(urls)})
                    if r.status_code != 200:
                        error = f"HTTP {r.status_code}: {r.text[:200]}"
                    elif "input" not in r.json():
                        error = "answer without input"
                else:
                    items = [rng.choice(urls) for _ in range(BATCH)]
                    with http.stream("POST", "/v1/lookup", json={"urls": items}) as r:
                        if r.status_code != 200:
                            r.read()
                            error = f"HTTP {r.status_code}: {r.text[:200]}"
                        else:
                            lines = [json.loads(line) for line in r.iter_lines() if line]
                            if len(lines) != BATCH or any("error" in x and "input" not in x for x in lines):
                                error = f"batch stream: {len(lines)} lines, last {str(lines[-1:])[:200]}"
            except (httpx.HTTPError, ValueError) as exc:
                error = f"{type(exc).__name__}: {exc}"
            soak.add(Sample(t0 - start, kind, time.perf_counter() - t0, error, late))


def run_writers(writers: list[Writer], start: float, stop: threading.Event) -> None:
    """Start each writer at its time, one after another when they are ingests (a lab's scheduled loads)."""
    for w in writers:
        while time.perf_counter() - start < w.start_after and not stop.is_set():
            time.sleep(0.05)
        if stop.is_set():
            return

        def go(w: Writer = w) -> None:
            w.started = time.perf_counter() - start
            done = subprocess.run(w.args, capture_output=True, text=True, env=quiet_env(), timeout=1800)
            w.ended = time.perf_counter() - start
            w.status = done.returncode
            w.output = (done.stdout + done.stderr)[-2000:]

        thread = threading.Thread(target=go, daemon=True)
        thread.start()
        w.thread = thread  # type: ignore[attr-defined]
        if w.name.startswith("ingest"):
            thread.join()  # ingests one after another; the nightly run overlaps them


def percentiles(values: list[float]) -> str:
    if not values:
        return "no samples"
    ms = sorted(v * 1000 for v in values)
    q = statistics.quantiles(ms, n=100, method="inclusive") if len(ms) > 1 else [ms[0]] * 99
    return f"n={len(ms):5d}  p50 {q[49]:7.1f}  p95 {q[94]:7.1f}  p99 {q[98]:7.1f}  max {ms[-1]:7.1f} ms"


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--pg", help="PostgreSQL admin URL: the soak runs in a new database there (dropped after)")
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--rate", type=float, default=40.0, help="lookup requests a second, all clients together")
    ap.add_argument("--clients", type=int, default=4)
    ap.add_argument("--urls", type=int, default=20000)
    ap.add_argument("--ingests", type=int, default=3)
    ap.add_argument("--ingest-rows", type=int, default=20000)
    ap.add_argument("--seed", type=int, default=2031)
    args = ap.parse_args()

    tmp = Path(tempfile.mkdtemp(prefix="linkfold-soak-"))
    admin = None
    if args.pg:
        admin = sa.create_engine(args.pg, isolation_level="AUTOCOMMIT")
        name = f"linkfold_soak_{uuid.uuid4().hex[:10]}"
        with admin.connect() as conn:
            conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
        db_url = make_engine(args.pg).url.set(database=name).render_as_string(hide_password=False)
    else:
        name = ""
        db_url = f"sqlite:///{tmp / 'soak.db'}"
    rng = random.Random(args.seed)
    engine = make_engine(db_url)
    proc = None
    try:
        upgrade(engine)
        base = generate(args.urls, rng, "b")
        (tmp / "base.txt").write_text("\n".join(base) + "\n", encoding="utf-8")
        subprocess.run(cli(db_url, "datasets", "load", str(tmp / "base.txt"), "--dataset", "soak-base"), check=True,
                       env=quiet_env())
        subprocess.run(cli(db_url, "nightly"), check=True, env=quiet_env(), capture_output=True)
        new_docs = tmp / "documents.jsonl"
        writers = []
        for i in range(args.ingests):
            urls = generate(args.ingest_rows, rng, f"n{i}-") + rng.sample(base, min(len(base), args.ingest_rows // 4))
            dump = tmp / f"panel-{i}.csv"
            dump.write_text("visit,url\n" + "".join(f"v{i}-{k},{u}\n" for k, u in enumerate(urls)), encoding="utf-8")
            writers.append(Writer(f"ingest {i + 1}", cli(db_url, "datasets", "load", str(dump), "--dataset", f"soak-panel-{i}",
                                                         "--key-column", "visit"), start_after=args.seconds * 0.1))
            if i == 0:
                new_docs.write_text("\n".join(documents(urls, rng)) + "\n", encoding="utf-8")
        writers.insert(1, Writer("documents load", cli(db_url, "documents", "load", str(new_docs)),
                                 start_after=args.seconds * 0.2))
        writers.append(Writer("nightly", cli(db_url, "nightly"), start_after=args.seconds / 3))
        token = create_token(engine, scope="read", note="soak").secret
        print(f"registry {engine.url.render_as_string()}: {len(base):,} base URLs; "
              f"{args.ingests} ingests of {args.ingest_rows + args.ingest_rows // 4:,} rows, a documents load "
              f"and a nightly run during {args.seconds:.0f} s of lookups at {args.rate:g}/s", flush=True)

        port = free_port()
        log = tmp / "serve.log"
        proc = subprocess.Popen(cli(db_url, "serve", "--host", "127.0.0.1", "--port", str(port)),
                                stdout=log.open("wb"), stderr=subprocess.STDOUT, env=quiet_env())
        url = f"http://127.0.0.1:{port}"
        deadline = time.monotonic() + 60
        while True:
            try:
                if httpx.get(url + "/v1/health", timeout=1).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            if time.monotonic() > deadline or proc.poll() is not None:
                raise SystemExit(f"the server did not start: {log.read_text(errors='replace')}")
            time.sleep(0.1)

        soak = Soak()
        total = int(args.seconds * args.rate)
        interval = 1.0 / args.rate
        schedules = [[k * interval for k in range(c, total, args.clients)] for c in range(args.clients)]
        start = time.perf_counter()
        stop = threading.Event()
        writer_thread = threading.Thread(target=run_writers, args=(writers, start, stop), daemon=True)
        writer_thread.start()
        clients = [threading.Thread(target=client_loop, args=(url, token, base, schedules[c], start, soak,
                                                               args.seed + c)) for c in range(args.clients)]
        for c in clients:
            c.start()
        for c in clients:
            c.join()
        lookups_end = time.perf_counter() - start
        writer_thread.join()
        for w in writers:
            thread = getattr(w, "thread", None)
            if thread is not None:
                thread.join()
        stop.set()
    finally:
        if proc is not None:
            proc.terminate()
            proc.wait(timeout=10)
        engine.dispose()
        if admin is not None:
            with admin.connect() as conn:
                conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
            admin.dispose()
        shutil.rmtree(tmp, ignore_errors=True)  # the folder this script made for its dumps and registry

    busy = [(w.started, w.ended) for w in writers if w.started is not None and w.ended is not None]

    def during(s: Sample) -> bool:
        return any(a <= s.at <= b for a, b in busy)

    errors = [s for s in soak.samples if s.error]
    print(f"\nlookup phase: {lookups_end:.1f} s, {len(soak.samples):,} requests "
          f"({len(soak.samples) / lookups_end:.1f}/s), errors: {len(errors)}")
    # Latency is measured from when a request went out; a request sent late (every client busy) hides its
    # wait there, so the lateness is reported beside it.
    print(f"  sent late: {percentiles([s.late for s in soak.samples])}")
    for kind in ("single", "batch"):
        for label, keep in (("quiet", lambda s: not during(s)), ("while writing", during)):
            values = [s.seconds for s in soak.samples if s.kind == kind and not s.error and keep(s)]
            print(f"  {kind:6s} {label:14s} {percentiles(values)}")
    for w in writers:
        when = (f"{w.started:6.1f}-{w.ended:6.1f} s" if w.started is not None and w.ended is not None
                else "did not run")
        print(f"  writer {w.name:15s} exit {w.status}  {when}")
        if w.status not in (0, None):
            print("    " + w.output.replace("\n", "\n    "))
    for s in errors[:10]:
        print(f"  error at {s.at:.1f} s ({s.kind}): {s.error}")
    failed = bool(errors) or any(w.status != 0 for w in writers)
    print("result:", "FAILED" if failed else "ok (no errors)")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
