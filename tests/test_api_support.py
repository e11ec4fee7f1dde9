"""Shared helpers of the API, client and page tests (no tests here).

* :class:`AsgiClient`: in-process requests through httpx's ASGITransport, with a synchronous face.
* :class:`LiveServer`: a real ``linkfold serve`` process on a free loopback port, waited for and stopped.
* :func:`load_demo_dump`: a small invented dataset loaded through ``ingest_dump``.
"""

from __future__ import annotations

import asyncio
import os
import socket
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import httpx

from linkfold.ingest import ingest_dump
from linkfold.settings import load_settings

# Invented outlets on reserved names (RFC 2606 .example / .test).
DUMP_ROWS = [
    ("v1", "https://www.harbour-gazette.example/2031/05/bridge-reopens?utm_source=feed"),
    ("v2", "https://harbour-gazette.example/2031/05/bridge-reopens"),
    ("v3", "https://www.harbour-gazette.example/2031/05/bridge-reopens#comments"),
    ("v4", "https://valley-courier.test/news/ferry-timetable"),
    ("v5", "not a url at all"),
]


def load_demo_dump(engine, tmp_path: Path, *, dataset: str = "panel-a") -> None:
    path = tmp_path / f"{dataset}.csv"
    lines = ["visit,url"] + [f"{k},{u}" for k, u in DUMP_ROWS]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    ingest_dump(engine, [path], dataset=dataset, key_column="visit")


def settings_for(db_url: str, **overrides: Any):
    return load_settings({"database_url": db_url, **overrides}, environ={})


class AsgiClient:
    """Requests to an ASGI app in this process; each call runs in its own event loop."""

    def __init__(self, app, *, token: str | None = None) -> None:
        self.app = app
        self.token = token

    def request(self, method: str, url: str, *, token: str | bool | None = True, **kwargs) -> httpx.Response:
        headers = dict(kwargs.pop("headers", {}) or {})
        chosen = self.token if token is True else (token or None)
        if chosen:
            headers["Authorization"] = f"Bearer {chosen}"

        async def go() -> httpx.Response:
            # raise_app_exceptions=False: a bug must come back as the 500 envelope, as a real server sends.
            transport = httpx.ASGITransport(app=self.app, raise_app_exceptions=False)
            async with httpx.AsyncClient(transport=transport, base_url="http://testserver") as client:
                response = await client.request(method, url, headers=headers, **kwargs)
                await response.aread()
                return response

        return asyncio.run(go())

    def get(self, url: str, **kwargs) -> httpx.Response:
        return self.request("GET", url, **kwargs)

    def post(self, url: str, **kwargs) -> httpx.Response:
        return self.request("POST", url, **kwargs)


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class LiveServer:
    """``linkfold serve`` in a subprocess on 127.0.0.1; ``url`` is its base URL once started."""

    def __init__(self, db_url: str, *, env: dict[str, str] | None = None, cwd: Path | None = None) -> None:
        self.db_url = db_url
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.env = {k: v for k, v in os.environ.items() if not k.startswith("LINKFOLD_")} | (env or {})
        self.cwd = cwd
        self.proc: subprocess.Popen | None = None
        self.log_path: Path | None = None

    def __enter__(self) -> LiveServer:
        import tempfile

        self._log = tempfile.NamedTemporaryFile(prefix="linkfold-serve-", suffix=".log", delete=False)
        self.log_path = Path(self._log.name)
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "linkfold.cli", "--db", self.db_url, "serve", "--host", "127.0.0.1",
             "--port", str(self.port)],
            stdout=self._log, stderr=subprocess.STDOUT, env=self.env, cwd=self.cwd)
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"linkfold serve exited with {self.proc.returncode}: {self.log()}")
            try:
                if httpx.get(self.url + "/v1/health", timeout=1.0).status_code == 200:
                    return self
            except httpx.TransportError:
                pass
            time.sleep(0.1)
        self.__exit__(None, None, None)
        raise RuntimeError(f"linkfold serve did not answer within 30 s: {self.log()}")

    def log(self) -> str:
        self._log.flush()
        return self.log_path.read_text(encoding="utf-8", errors="replace") if self.log_path else ""

    def __exit__(self, *exc: object) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self._log.close()


# --- a small invented world with clusters: two outlets, one article at two URLs, a syndicated copy -------
WORLD_URLS = {
    "original": "https://harbour-gazette.example/2031/05/tide-barrier-vote",
    "print": "https://harbour-gazette.example/print/2031/05/tide-barrier-vote",
    "copy": "https://valley-courier.test/news/tide-barrier-vote",
    "other": "https://valley-courier.test/news/orchard-festival",
}


def _words(rng, vocab, n):
    from synthetic_texts import random_words

    return random_words(rng, vocab, n)


def build_world(engine, tmp_path: Path, settings) -> dict[str, str]:
    """Load the world's URLs and documents through the ingest and content stages, run dedupe once.

    The URLs are in canonical form already (the dump adds a tracking parameter that canonicalisation drops).

    ``print`` is a near-exact same-outlet copy of ``original`` (one article); ``copy`` is an edited
    cross-outlet copy (one story); ``other`` is unrelated. Returns the URLs by role.
    """
    import numpy as np

    from linkfold.content.loading import load_documents
    from linkfold.dedupe.stage import run_dedupe
    from synthetic_texts import edited_copy, invented_vocabulary

    rng = np.random.default_rng(2031)
    vocab = invented_vocabulary(4000, rng)
    base = _words(rng, vocab, 320)
    texts = {"original": base, "print": [*base[:300], "closing", "note", *base[300:]],
             "copy": edited_copy(rng, base, 0.08, vocab), "other": _words(rng, vocab, 280)}
    dump = tmp_path / "world-panel.csv"
    dump.write_text("visit,url\n" + "".join(f"w{i},{u}?utm_medium=social\n"
                                            for i, u in enumerate(WORLD_URLS.values())), encoding="utf-8")
    ingest_dump(engine, [dump], dataset="world-panel", key_column="visit")
    docs = tmp_path / "world-documents.jsonl"
    import json as _json

    docs.write_text("".join(_json.dumps({"url": WORLD_URLS[role], "title": f"Tide barrier vote ({role})"
                                         if role != "other" else "Orchard festival opens",
                                         "text": " ".join(words).capitalize() + ".",
                                         "published": "2024-05-04T08:00:00Z"}) + "\n"
                            for role, words in texts.items()), encoding="utf-8")
    load_documents(engine, docs, settings=settings)
    run_dedupe(engine, settings=settings)
    return dict(WORLD_URLS)
