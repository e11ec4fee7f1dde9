"""A real HTTP server on 127.0.0.1 for the link-following and client tests.

It serves the situations the follower must survive: redirect chains with every redirect status,
relative Locations, loops, long chains, servers that refuse HEAD, slow answers, huge bodies, 429/503
with Retry-After, and a configurable robots.txt. Every request is recorded (method, path, Host header,
User-Agent) so tests can check what was sent, and how much of a body was written.

Routes (all under one port):

* ``/final``, ``/final/<anything>``: 200 with a small HTML page.
* ``/to?status=S&loc=L``: status S (default 302) with ``Location: L`` sent byte for byte.
* ``/cookie``: sets a cookie and redirects to ``/final``.
* ``/clean?…``: 301 to itself without ``utm_*`` parameters, 200 when there are none.
* ``/noloc``: 302 without a Location header.
* ``/chain/<n>``: ``/chain/<n-1>`` by a relative 301, and ``/chain/0`` answers 200.
* ``/loop/a`` ↔ ``/loop/b``: 302 to each other.
* ``/nohead/<status>``: HEAD answers 405 (or the given status); GET redirects to ``/final``.
* ``/slow``: waits ``slow_seconds`` before answering.
* ``/huge``: GET streams an endless body (until the client goes away); HEAD answers 200.
* ``/huge-declared``: declares a Content-Length of 10⁹ and sends a little.
* ``/busy/<key>?n=N&after=A``: 429 with ``Retry-After: A`` for the first N requests of that key, then 200.
* ``/unavailable``: always 503 with ``Retry-After: 1``.
* ``/status/<code>``: that status, empty body.
* ``/robots.txt``: ``robots_text`` with ``robots_status``.
"""

from __future__ import annotations

import contextlib
import threading
import time
from collections import Counter
from dataclasses import dataclass
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from urllib.parse import parse_qs, urlencode, urlsplit

import httpcore

PAGE = b"<!doctype html><html><head><title>Bridge reopens</title></head><body><p>ok</p></body></html>"


@dataclass(frozen=True)
class Seen:
    method: str
    path: str
    host: str
    user_agent: str
    cookie: str | None = None


class _Handler(BaseHTTPRequestHandler):
    protocol_version = "HTTP/1.1"
    server: _Server

    def log_message(self, format: str, *args: object) -> None:  # quiet: pytest shows failures anyway
        pass

    def do_HEAD(self) -> None:
        self._route("HEAD")

    def do_GET(self) -> None:
        self._route("GET")

    def _send(self, status: int, headers: dict[str, str] | None = None, body: bytes = b"",
              *, method: str) -> None:
        self.send_response(status)
        for name, value in (headers or {}).items():
            self.send_header(name, value)
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        if method != "HEAD" and body:
            self.wfile.write(body)

    def _redirect_raw(self, status: int, location: bytes, method: str) -> None:
        # Location byte for byte: send_header encodes text as Latin-1, so bytes pass through unchanged
        # when decoded as Latin-1 first (tests need raw UTF-8 in it).
        self.send_response(status)
        self.send_header("Location", location.decode("latin-1"))
        self.send_header("Content-Length", "0")
        self.end_headers()

    def _route(self, method: str) -> None:
        srv = self.server.owner
        parts = urlsplit(self.path)
        path, query = parts.path, parse_qs(parts.query)
        srv.seen.append(Seen(method, self.path, self.headers.get("Host", ""),
                             self.headers.get("User-Agent", ""), self.headers.get("Cookie")))
        # The client may stop reading (a capped body, a timeout): that is the point, not an error.
        with contextlib.suppress(BrokenPipeError, ConnectionResetError):
            self._dispatch(srv, method, path, query)

    def _dispatch(self, srv: LoopbackServer, method: str, path: str, query: dict[str, list[str]]) -> None:
        if path == "/robots.txt":
            self._send(srv.robots_status, {"Content-Type": "text/plain"}, srv.robots_text.encode(),
                       method=method)
        elif path == "/final" or path.startswith("/final/"):
            self._send(200, {"Content-Type": "text/html; charset=utf-8"}, PAGE, method=method)
        elif path == "/to":
            status = int(query.get("status", ["302"])[0])
            self._redirect_raw(status, query.get("loc", ["/final"])[0].encode("utf-8"), method)
        elif path == "/cookie":
            self._send(302, {"Set-Cookie": "visitor=abc123; Path=/", "Location": "/final"}, method=method)
        elif path == "/clean":
            # Redirects to itself without analytics parameters, as many sites do.
            kept = [(k, v) for k, vs in query.items() for v in vs if not k.startswith("utm_")]
            if len(kept) != sum(len(vs) for vs in query.values()):
                self._redirect_raw(301, ("/clean?" + urlencode(kept)).encode(), method)
            else:
                self._send(200, {"Content-Type": "text/html"}, PAGE, method=method)
        elif path == "/noloc":
            self._send(302, method=method)
        elif path.startswith("/chain/"):
            n = int(path.rsplit("/", 1)[1])
            if n == 0:
                self._send(200, {"Content-Type": "text/html"}, PAGE, method=method)
            else:
                self._redirect_raw(301, str(n - 1).encode(), method)  # relative: RFC 3986 §5.2
        elif path == "/loop/a":
            self._redirect_raw(302, b"/loop/b", method)
        elif path == "/loop/b":
            self._redirect_raw(302, b"a", method)
        elif path.startswith("/nohead"):
            refusal = int(path.rsplit("/", 1)[1]) if path.count("/") == 2 else 405
            if method == "HEAD":
                self._send(refusal, method=method)
            else:
                self._redirect_raw(302, b"/final/after-get", method)
        elif path == "/slow":
            with srv.lock:
                srv.active += 1
                srv.max_active = max(srv.max_active, srv.active)
            try:
                time.sleep(srv.slow_seconds)
            finally:
                with srv.lock:
                    srv.active -= 1
            self._send(200, {"Content-Type": "text/html"}, PAGE, method=method)
        elif path == "/huge":
            if method == "HEAD":
                self._send(200, {"Content-Type": "text/html"}, method=method)
                return
            self.send_response(200)
            self.send_header("Content-Type", "text/html")
            self.send_header("Connection", "close")
            self.end_headers()
            chunk = b"x" * 65536
            while srv.huge_written < 1_000_000_000:  # "endless", bounded so a broken test cannot hang
                self.wfile.write(chunk)
                srv.huge_written += len(chunk)
        elif path == "/huge-declared":
            self.send_response(200)
            self.send_header("Content-Length", str(10**9))
            self.send_header("Connection", "close")
            self.end_headers()
            if method != "HEAD":
                self.wfile.write(b"x" * 1000)
            self.close_connection = True
        elif path.startswith("/busy/"):
            key = path.rsplit("/", 1)[1]
            srv.counts[key] += 1
            if srv.counts[key] <= int(query.get("n", ["1"])[0]):
                self._send(429, {"Retry-After": query.get("after", ["1"])[0]}, method=method)
            else:
                self._send(200, {"Content-Type": "text/html"}, PAGE, method=method)
        elif path == "/unavailable":
            self._send(503, {"Retry-After": "1"}, method=method)
        elif path.startswith("/status/"):
            self._send(int(path.rsplit("/", 1)[1]), method=method)
        else:
            self._send(404, method=method)


class _Server(ThreadingHTTPServer):
    daemon_threads = True
    block_on_close = False
    owner: LoopbackServer


class LoopbackServer:
    """Start with ``with LoopbackServer() as srv``; ``srv.url("/final")`` is an absolute URL."""

    def __init__(self) -> None:
        self.seen: list[Seen] = []
        self.counts: Counter[str] = Counter()
        self.robots_text = ""
        self.robots_status = 404
        self.slow_seconds = 2.0
        self.huge_written = 0
        self.lock = threading.Lock()
        self.active = 0  # requests to /slow being answered right now, and the most at once
        self.max_active = 0
        self._httpd = _Server(("127.0.0.1", 0), _Handler)
        self._httpd.owner = self
        self.port = self._httpd.server_address[1]
        self._thread = threading.Thread(target=self._httpd.serve_forever, kwargs={"poll_interval": 0.05},
                                        name="loopback-http", daemon=True)

    def __enter__(self) -> LoopbackServer:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._httpd.shutdown()
        self._httpd.server_close()
        self._thread.join(timeout=5)

    @property
    def origin(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def url(self, path: str, host: str = "127.0.0.1") -> str:
        return f"http://{host}:{self.port}{path}"

    def paths(self, method: str | None = None) -> list[str]:
        return [s.path for s in self.seen if method is None or s.method == method]


class LoopbackOnlyBackend(httpcore.AnyIOBackend):
    """A safety net under the guard in tests: connecting anywhere but loopback fails the test.

    The guard must refuse private and public addresses before this is ever called; if it did not, the
    test fails here instead of sending a packet off this machine.
    """

    def __init__(self) -> None:
        super().__init__()
        self.connected: list[tuple[str, int]] = []

    async def connect_tcp(self, host, port, timeout=None, local_address=None, socket_options=None):
        if not (host.startswith("127.") or host == "::1"):
            raise AssertionError(f"test tried to connect to {host}:{port}, which is not loopback")
        self.connected.append((host, port))
        return await super().connect_tcp(host, port, timeout=timeout, local_address=local_address,
                                         socket_options=socket_options)


def loopback_settings(db_url: str, **extra):
    """Settings for a stage that talks to the loopback server: a contact, loopback allowed, no waiting."""
    from linkfold.settings import load_settings

    values = {"database_url": db_url, "contact": "mailto:lab@university.example",
              "allow_networks": ("127.0.0.0/8",), "http_host_delay": 0.0, "http_timeout": 2.0,
              "http_retries": 0, **extra}
    return load_settings(values, environ={})


def load_url_list(engine, tmp_path, name: str, urls: list[str]):
    """Ingest ``urls`` as a plain-list dump into dataset ``name``."""
    from linkfold.ingest import ingest_dump

    path = tmp_path / f"{name}.txt"
    path.write_text("\n".join(urls) + "\n", encoding="utf-8")
    return ingest_dump(engine, [path], dataset=name)


def walk_chain(url: str, *, config, names, max_hops: int = 10, **kw):
    """One chain through the one redirect loop (``kw``: ``keep_body``, ``never_follow``), names pinned by a
    static resolver, sleeping faked, and nothing but loopback ever connected to."""
    import asyncio

    from linkfold.web import SafeClient, StaticResolver, follow_chain

    backend = LoopbackOnlyBackend()

    async def no_sleep(_seconds):
        await asyncio.sleep(0)

    async def go():
        async with SafeClient(config, resolver=StaticResolver(names), sleep=no_sleep, backend=backend) as c:
            return await follow_chain(c, url, max_hops=max_hops, **kw)

    chain = asyncio.run(go())
    assert all(host.startswith("127.") for host, _port in backend.connected)
    return chain
