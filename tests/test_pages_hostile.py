"""The pages under hostile data in a real browser (Debian's Chromium, as in tests/test_pages_browser.py):
stored markup and script rendered inert (checked on the DOM), and decisions that a page on another origin
cannot make in a signed-in reviewer's name. The in-process side is tests/test_api_hostile.py.

References: the HTML standard's parsing of escaped text (the browser's own DOM is the check); the Fetch
standard's `Origin` header, which a browser sends with every cross-origin POST (`null` from an opaque
origin); RFC 6454 §4 (an origin is scheme, host and port: another port is another origin, though the
same "site", so a SameSite=Strict cookie still goes with the request, RFC 6265bis §5.2).
"""

from __future__ import annotations

import http.server
import json
import re
import threading
from pathlib import Path

import pytest
import sqlalchemy as sa

from linkfold.content.loading import load_documents
from linkfold.dedupe.stage import list_clusters, record_decision, run_dedupe
from linkfold.ingest import ingest_dump
from linkfold.store import tables as t
from linkfold.store.tokens import create_token
from test_api_support import LiveServer, free_port, settings_for
from test_pages_browser import CHROMIUM_ARGS, browser  # noqa: F401  (the fixture)

# Each payload, if it ever ran, would set window.__pwned, open a dialog, or leave an element with an id
# starting "pwned" in the DOM. Attribute breakers (quotes, ">") come first so that a value put into an
# attribute unescaped would open one.
PAYLOADS = [
    '"\'><script>window.__pwned=1;alert(1)</script>',
    '<img id="pwned-img" src="/nothing" onerror="window.__pwned=1;alert(2)">',
    "<svg id=\"pwned-svg\" onload=\"window.__pwned=1;alert(3)\"></svg>",
    '</textarea></title></code><b id="pwned-b">x</b><!--',
    "javascript:window.__pwned=1",
]
HOSTILE_TITLE = " ".join(PAYLOADS)
HOSTILE_URLS = {
    "original": "https://harbour-gazette.example/2031/05/barrier?ref='><b id=pwned-q>x</b>",
    "print": "https://harbour-gazette.example/print/2031/05/barrier?ref='><b id=pwned-q>x</b>",
    "copy": "https://valley-courier.test/news/barrier/\"><script>window.__pwned=1</script>",
    "other": "https://valley-courier.test/news/orchard",
}


def build_hostile_world(engine, tmp_path: Path, settings) -> dict[str, str]:
    """The test_api_support world, with markup and script in every stored text a page shows: URLs,
    titles, texts, the dataset name, decision names and notes."""
    import numpy as np

    from synthetic_texts import edited_copy, invented_vocabulary, random_words

    rng = np.random.default_rng(2031)
    vocab = invented_vocabulary(4000, rng)
    base = random_words(rng, vocab, 320)
    texts = {"original": base, "print": [*base[:300], *PAYLOADS[:2], *base[300:]],
             "copy": edited_copy(rng, base, 0.08, vocab), "other": random_words(rng, vocab, 280)}
    dump = tmp_path / "hostile.jsonl"
    dump.write_text("".join(json.dumps({"visit": f"w{i}", "url": u}) + "\n"
                            for i, u in enumerate(HOSTILE_URLS.values())), encoding="utf-8")
    ingest_dump(engine, [dump], dataset='<b id="pwned-ds">panel</b>', key_column="visit")
    docs = tmp_path / "hostile-documents.jsonl"
    docs.write_text("".join(json.dumps({"url": HOSTILE_URLS[role], "title": f"{HOSTILE_TITLE} ({role})",
                                        "text": " ".join(words) + " " + HOSTILE_TITLE + ".",
                                        "published": "2024-05-04T08:00:00Z"}) + "\n"
                            for role, words in texts.items()), encoding="utf-8")
    load_documents(engine, docs, settings=settings)
    run_dedupe(engine, settings=settings)
    (article,) = [c.id for c in list_clusters(engine, level="article", min_size=2, limit=10)]
    record_decision(engine, "same", HOSTILE_URLS["original"], HOSTILE_URLS["print"], decided_by=PAYLOADS[1],
                    note=PAYLOADS[0])
    return {"article": article}


def _cluster_ids(engine) -> list[str]:
    return [c.id for level in ("article", "story") for c in list_clusters(engine, level=level, min_size=1,
                                                                          limit=100)]


@pytest.fixture
def hostile(sqlite_url, tmp_path):
    from linkfold.store import ensure_schema, make_engine

    engine = make_engine(sqlite_url)
    ensure_schema(engine)
    settings = settings_for(sqlite_url)
    world = build_hostile_world(engine, tmp_path, settings)
    write = create_token(engine, scope="write", note="hostile-page reviewer").secret
    with LiveServer(sqlite_url, cwd=tmp_path) as server:
        yield {"server": server, "engine": engine, "write": write, **world}
    engine.dispose()


def _sign_in(page, base: str, token: str) -> None:
    page.goto(base + "/")
    page.fill("#token", token)
    page.click("form.token button[type=submit]")
    page.wait_for_url(base + "/")


def _inert(page) -> None:
    assert page.evaluate("() => window.__pwned === undefined")
    assert page.evaluate("() => document.querySelectorAll('[id^=pwned]').length") == 0
    assert page.evaluate("() => document.scripts.length") == 0  # the pages have no script of their own
    assert page.evaluate("() => document.querySelectorAll('[onerror],[onload],iframe,object,embed').length") == 0


def test_stored_markup_is_inert_on_every_page(browser, hostile):  # noqa: F811
    base, engine = hostile["server"].url, hostile["engine"]
    context = browser.new_context()
    page = context.new_page()
    dialogs: list[str] = []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    requested: list[str] = []
    page.on("request", lambda r: requested.append(r.url))
    try:
        _sign_in(page, base, hostile["write"])
        from urllib.parse import quote

        paths = ["/", "/charts", "/charts/similarity.svg", "/charts/cluster-sizes.svg",
                 "/clusters?level=article&min_size=1", "/clusters?level=story&min_size=1",
                 f"/clusters?outlet={quote(PAYLOADS[0])}",
                 f"/lookup?q={quote(PAYLOADS[0])}", f"/lookup?q={quote(HOSTILE_URLS['copy'])}",
                 f"/clusters/{quote(PAYLOADS[1], safe='')}", f"/ids/{quote(PAYLOADS[3], safe='')}",
                 f"/nowhere/{quote(PAYLOADS[2], safe='')}"]
        for cid in _cluster_ids(engine):
            paths += [f"/clusters/{cid}", f"/ids/{cid}"]
        shown = []
        for path in paths:
            page.goto(base + path)
            _inert(page)
            shown.append(page.content())
        # The payloads were on the pages, as text: escaped, not dropped.
        html = "\n".join(shown)
        assert "&lt;script&gt;window.__pwned=1;alert(1)&lt;/script&gt;" in html
        assert "&lt;img id=\"pwned-img\"" in html or "&lt;img id=&#34;pwned-img&#34;" in html
        page.goto(f"{base}/clusters/{hostile['article']}")
        assert PAYLOADS[1] in page.inner_text("#decisions")  # a decision's name, shown as text
        assert PAYLOADS[0] in page.inner_text("#members")  # a title
    finally:
        context.close()
    assert dialogs == []
    assert [u for u in requested if not re.match(r"^http://127\.0\.0\.1:\d+/", u)] == []


class _Attacker(http.server.ThreadingHTTPServer):
    """Another origin on the same host: a page whose form posts to the registry on load."""

    page = b""


class _AttackerHandler(http.server.BaseHTTPRequestHandler):
    def do_GET(self) -> None:
        body = self.server.page  # type: ignore[attr-defined]
        self.send_response(200)
        self.send_header("Content-Type", "text/html; charset=utf-8")
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, *args) -> None:
        pass


def _decisions(engine) -> int:
    with engine.connect() as conn:
        return conn.execute(sa.select(sa.func.count()).select_from(t.decisions)).scalar_one()


@pytest.mark.parametrize("policy", ["", "no-referrer"], ids=["origin", "origin-null"])
def test_another_origin_cannot_post_a_decision_in_a_reviewers_name(browser, hostile, policy):  # noqa: F811
    base, engine, article = hostile["server"].url, hostile["engine"], hostile["article"]
    attacker = _Attacker(("127.0.0.1", free_port()), _AttackerHandler)
    meta = f'<meta name="referrer" content="{policy}">' if policy else ""
    attacker.page = (f"<!doctype html><html><head>{meta}</head><body>"
                     f'<form id="f" method="post" action="{base}/clusters/{article}/decide">'
                     '<input name="verdict" value="different"><input name="member" value="x">'
                     '<input name="by" value="someone else"><button id="go">go</button></form>'
                     "</body></html>").encode()
    thread = threading.Thread(target=attacker.serve_forever, daemon=True)
    thread.start()
    context = browser.new_context()
    page = context.new_page()
    try:
        _sign_in(page, base, hostile["write"])  # the reviewer's cookie is in this browser
        before = _decisions(engine)
        page.goto(f"http://127.0.0.1:{attacker.server_address[1]}/")
        with page.expect_navigation():
            page.click("#go")
        assert page.url.startswith(f"{base}/clusters/{article}/decide")
        assert "another origin" in page.inner_text("body")
        assert _decisions(engine) == before
        # The reviewer's own form, on the registry's origin, still works.
        page.goto(f"{base}/clusters/{article}")
        page.fill("#decide input[name=by]", "the reviewer")
        page.click("#decide button.different")
        page.wait_for_selector("#decided")
        assert _decisions(engine) == before + 1
    finally:
        context.close()
        attacker.shutdown()
        attacker.server_close()
