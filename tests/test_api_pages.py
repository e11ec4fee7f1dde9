"""The inspection pages in process: access, what each page shows, the decision form, the pictures.

The pages are driven in a real browser in tests/test_pages_browser.py; here the HTML is parsed with
html5lib (a reference implementation of the WHATWG HTML parsing algorithm) and the SVG with the standard
library's XML parser, so malformed markup fails here first.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import html5lib
import pytest

from linkfold.api import create_app
from linkfold.api.charts import SIZE_BUCKETS, similarity_bins, size_labels
from linkfold.dedupe.stage import run_dedupe
from linkfold.dedupe.textdiff import side_by_side
from linkfold.store.tokens import create_token
from test_api_support import AsgiClient, build_world, settings_for

SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture
def world(db_url, engine, tmp_path):
    settings = settings_for(db_url)
    urls = build_world(engine, tmp_path, settings)
    app = create_app(settings, engine=engine)
    return {"web": AsgiClient(app), "engine": engine, "settings": settings, "urls": urls,
            "read": create_token(engine, scope="read", note="r").secret,
            "write": create_token(engine, scope="write", note="w").secret}


def _cookie(token: str) -> dict[str, str]:
    return {"Cookie": f"linkfold_token={token}"}


def _html(response):
    assert response.headers["content-type"].startswith("text/html")
    # html5lib's strict mode raises on any parse error of the HTML standard's tokeniser and tree builder.
    return html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(response.text)


def _article_id(world) -> str:
    r = world["web"].get("/clusters?level=article", headers=_cookie(world["read"]))
    ids = re.findall(r'href="/clusters/(a[a-z2-7]{12})"', r.text)
    assert len(ids) == 1
    return ids[0]


def test_pages_without_a_token_show_the_token_form(world):
    r = world["web"].get("/clusters")
    assert r.status_code == 401
    page = _html(r)
    assert page.find(".//form[@action='/session']") is not None
    assert world["web"].get("/").status_code == 200  # the home page holds the search box and the form


def test_token_form_sets_a_strict_httponly_cookie_and_refuses_a_bad_token(world, caplog):
    r = world["web"].post("/session", data={"token": world["read"], "next": "/clusters"})
    assert r.status_code == 303 and r.headers["location"] == "/clusters"
    cookie = r.headers["set-cookie"].lower()
    assert "httponly" in cookie and "samesite=strict" in cookie
    # Only paths on this server: no open redirect.
    r = world["web"].post("/session", data={"token": world["read"], "next": "//elsewhere.example/x"})
    assert r.headers["location"] == "/"
    r = world["web"].post("/session", data={"token": "lf_wrong", "next": "/"})
    assert r.status_code == 401 and "not valid" in r.text
    # The refusal is logged, the token is not.
    assert any("POST /session" in rec.getMessage() for rec in caplog.records)
    assert all("lf_wrong" not in rec.getMessage() for rec in caplog.records)


def test_search_box_lookup_page(world):
    r = world["web"].get("/lookup", params={"q": world["urls"]["copy"] + "?utm_source=x"},
                         headers=_cookie(world["read"]))
    page = _html(r)
    answer = page.find(".//table[@id='answer']")
    assert answer is not None and world["urls"]["copy"] in r.text
    assert re.search(r'href="/clusters/a[a-z2-7]{12}"', r.text)


def test_clusters_list_filters_and_cluster_page(world):
    web, token = world["web"], world["read"]
    page = _html(web.get("/clusters?level=story&min_size=2", headers=_cookie(token)))
    rows = page.findall(".//table[@id='clusters']/tbody/tr")
    assert len(rows) == 1 and rows[0].findall("td")[1].text == "3"
    none = web.get("/clusters?level=story&min_size=2&outlet=nowhere.example", headers=_cookie(token))
    assert _html(none).find(".//p[@id='no-clusters']") is not None
    article = _article_id(world)
    r = web.get(f"/clusters/{article}", headers=_cookie(token))
    page = _html(r)
    assert len(page.findall(".//table[@id='members']/tbody/tr")) == 2
    assert len(page.findall(".//table[@id='links']/tbody/tr")) == 1
    marks = page.findall(".//div[@id='text-right']/mark")
    # The founder is the print view, which has two words the original lacks: marked on the left only.
    left = [m.text for m in page.findall(".//div[@id='text-left']/mark")]
    assert left == ["closing note "] and marks == []
    # A read token sees no buttons, only the note that a write token is needed.
    assert page.find(".//form[@id='decide']") is None and page.find(".//p[@id='needs-write']") is not None


def test_decision_form_records_and_redirects_then_dedupe_splits(world):
    web, write = world["web"], world["write"]
    article = _article_id(world)
    page = _html(web.get(f"/clusters/{article}", headers=_cookie(write)))
    form = page.find(".//form[@id='decide']")
    member = form.find(".//input[@name='member']").get("value")
    r = web.post(f"/clusters/{article}/decide", headers=_cookie(write),
                 data={"verdict": "different", "member": member, "by": "coder 3", "note": "not the same"})
    assert r.status_code == 303
    assert r.headers["location"].startswith(f"/clusters/{article}?compare={member}&decided=")
    shown = web.get(r.headers["location"], headers=_cookie(write))
    assert _html(shown).find(".//p[@id='decided']") is not None
    run_dedupe(world["engine"], settings=world["settings"])
    after = _html(web.get(f"/clusters/{article}", headers=_cookie(write)))
    assert after.find(".//span[@id='member-count']").text == "1"


def test_decision_form_needs_a_write_token_and_a_name(world):
    web = world["web"]
    article = _article_id(world)
    data = {"verdict": "different", "member": "x" * 24, "by": "c"}
    assert web.post(f"/clusters/{article}/decide", headers=_cookie(world["read"]), data=data).status_code == 403
    r = web.post(f"/clusters/{article}/decide", headers=_cookie(world["write"]), data={**data, "by": " "})
    assert r.status_code == 400 and "who decided" in r.text


def test_unknown_cluster_and_id_pages_are_the_error_page(world):
    r = world["web"].get("/clusters/a2222222222222", headers=_cookie(world["read"]))
    assert r.status_code == 404
    assert _html(r).find(".//p[@id='error-message']") is not None
    assert world["web"].get("/ids/nonsense", headers=_cookie(world["read"])).status_code == 404


def test_id_history_page(world):
    article = _article_id(world)
    page = _html(world["web"].get(f"/ids/{article}", headers=_cookie(world["read"])))
    events = page.findall(".//table[@id='events']/tbody/tr")
    assert [row.findall("td")[2].text for row in events] == ["minted"]


def test_charts_are_well_formed_svg_with_the_right_bars(world):
    web, token = world["web"], world["read"]
    r = web.get("/charts/similarity.svg", headers=_cookie(token))
    assert r.headers["content-type"].startswith("image/svg+xml")
    root = ET.fromstring(r.text)
    assert root.tag == f"{SVG}svg"
    bars = [rect.find(f"{SVG}title").text for rect in root.iter(f"{SVG}rect") if rect.find(f"{SVG}title") is not None]
    # One same-outlet link (≈0.97: bin 0.95) and two cross-outlet links (≈0.56: bin 0.55).
    assert "same outlet (articles) 0.95: 1" in bars and "across outlets (stories) 0.55: 2" in bars
    sizes = ET.fromstring(web.get("/charts/cluster-sizes.svg", headers=_cookie(token)).text)
    titles = [t.text for t in sizes.iter(f"{SVG}title")]
    assert "articles 2: 1" in titles and "articles 1: 2" in titles and "stories 3: 1" in titles
    assert _html(web.get("/charts", headers=_cookie(token))).find(".//img[@id='sizes-chart']") is not None


def test_static_files_are_local_and_no_page_loads_anything_from_elsewhere(world):
    web, token = world["web"], world["read"]
    assert web.get("/static/style.css").status_code == 200
    article = _article_id(world)
    for path in ("/", "/clusters", f"/clusters/{article}", f"/ids/{article}", "/charts", "/lookup?q=x"):
        text = web.get(path, headers=_cookie(token)).text
        for attr in re.findall(r'(?:src|href)="([^"]+)"', text):
            assert attr.startswith("/"), (path, attr)


def test_similarity_bins_edges():
    # Bins are [k/20, (k+1)/20); 1.0 belongs to the last bin, values outside [0, 1] to none.
    assert similarity_bins([0.0, 0.05, 0.0999, 1.0, 1.5, -0.1]) == [1, 2] + [0] * 17 + [1]


def test_size_labels_cover_every_size_once():
    assert size_labels()[:2] == ["1", "2"] and size_labels()[-1] == ">100"
    for size in range(1, 500):
        hits = [b for b in SIZE_BUCKETS if size >= b[0] and (b[1] is None or size <= b[1])]
        assert len(hits) == 1


def test_side_by_side_marks_only_the_differing_words():
    # A worked example: one word changed, one sentence added; the paragraph break is kept.
    view = side_by_side("The tide barrier vote passed.\n\nCouncil met late.",
                        "The tide barrier vote failed.\n\nCouncil met late. Protest followed.")
    left = [s.text for s in view.left if s.marked]
    right = [s.text for s in view.right if s.marked]
    assert left == ["passed.\n\n"] and right == ["failed.\n\n", "Protest followed."]
    assert "".join(s.text for s in view.left) == "The tide barrier vote passed.\n\nCouncil met late."
    assert (view.left_only, view.right_only) == (1, 3)


def test_pages_under_open_reads_log_no_refusal(db_url, engine, tmp_path, caplog):
    # Issue 15, item 9: a cluster page asked whether it may show its decision form, and every view under
    # open reads logged "access refused" for a write nobody attempted.
    import logging

    settings = settings_for(db_url, open_reads=True)
    build_world(engine, tmp_path, settings)
    web = AsgiClient(create_app(settings, engine=engine))
    caplog.set_level(logging.WARNING, logger="linkfold")
    listing = web.get("/clusters?level=article", token=False)
    assert listing.status_code == 200
    [cluster] = re.findall(r'href="/clusters/(a[a-z2-7]{12})"', listing.text)
    for path in ("/", f"/clusters/{cluster}", "/clusters?level=story", f"/ids/{cluster}", "/charts",
                 "/lookup?q=https%3A%2F%2Fdaily.example%2Fa"):
        assert web.get(path, token=False).status_code == 200, path
    page = _html(web.get(f"/clusters/{cluster}", token=False))
    assert page.find(".//form[@id='decide']") is None  # no write token: no decision form
    assert not [r.getMessage() for r in caplog.records if "refused" in r.getMessage()]
    # A write attempted without a token is still refused, and logged.
    r = web.post(f"/clusters/{cluster}/decide", token=False,
                 data={"verdict": "same", "member": "x", "by": "someone"})
    assert r.status_code == 401
    assert any("access refused" in r.getMessage() for r in caplog.records)


def test_lookup_page_of_an_id_shows_its_cluster(world):
    article_id = _article_id(world)
    r = world["web"].get(f"/lookup?q={article_id}", headers=_cookie(world["read"]))
    page = _html(r)
    cell = page.find(".//td[@id='cluster']")
    assert cell is not None and "2 URL(s)" in "".join(cell.itertext())
    assert "founded by" in "".join(cell.itertext())
