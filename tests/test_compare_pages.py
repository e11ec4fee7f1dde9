"""The compare page (issue 20, item 2) in a real browser: Debian's headless Chromium driven by playwright,
against a real ``linkfold serve`` process on loopback, on both backends; and its pictures in process.

Screenshots go to test-artifacts/ at the repository root.
"""

from __future__ import annotations

import re

import pytest

import corpus_world as cw
from linkfold.api import create_app
from linkfold.api.compare_svg import overlap_svg, shares_svg
from linkfold.compare import compare_datasets
from linkfold.store.tokens import create_token
from test_api_support import AsgiClient, LiveServer, settings_for
from test_pages_browser import ARTIFACTS, _sign_in, browser  # noqa: F401  (the browser fixture)


@pytest.fixture
def world(engine, tmp_path):
    cw.load(engine, tmp_path, cw.generate())
    return {"engine": engine, "read": create_token(engine, scope="read", note="compare page").secret}


def test_the_pictures_show_every_pair_and_outlet(world):
    c = compare_datasets(world["engine"], datasets=["panel", "posts"]).as_dict()
    overlap = overlap_svg(c)
    (pair,) = c["overlap"]
    assert overlap.count('class="seg"') == 3 and f"Jaccard {pair['jaccard']:.3f}" in overlap
    shares = shares_svg(c)
    outlets = {r["outlet"] for r in c["outlets"]}
    assert all(f">{o}</text>" in shares for o in outlets) and "<script" not in shares
    # One bar per dataset and outlet that has a share of sightings.
    assert shares.count('class="bar"') == len(c["outlets"])


def test_page_needs_a_token_and_keeps_the_floor(world, db_url):
    api = AsgiClient(create_app(settings_for(db_url), engine=world["engine"]), token=world["read"])
    assert api.get("/compare", token=None).status_code == 401
    assert api.get("/compare", params={"min_units": 9}).status_code == 422  # exposure's floor, 10
    page = api.get("/compare", params={"dataset": ["panel", "posts"]})
    assert page.status_code == 200 and 'id="overlap-svg"' in page.text and "hs256:" not in page.text


def test_compare_page_in_chromium(browser, world, db_url, tmp_path, backend):  # noqa: F811
    c = compare_datasets(world["engine"], datasets=["panel", "posts"])
    with LiveServer(db_url, cwd=tmp_path) as server:
        base = server.url
        context = browser.new_context(viewport={"width": 1280, "height": 900})
        requested: list[str] = []
        context.on("request", lambda req: requested.append(req.url))
        page = context.new_page()
        try:
            _sign_in(page, base, world["read"])
            page.goto(base + "/compare?dataset=panel&dataset=posts")
            page.wait_for_selector("#overlap-svg")
            assert page.locator("#overlap-svg rect.seg").count() == 3
            assert page.locator("#shares-sightings-svg rect.bar").count() == len(c.outlets)
            assert page.locator("#datasets tbody tr").count() == 2
            assert page.locator("#top tbody tr").count() == len(c.top)
            box = page.locator("#shares-sightings-svg").bounding_box()
            assert box is not None and box["width"] > 600
            page.screenshot(path=str(ARTIFACTS / f"compare-page-{backend}.png"), full_page=True)
            # Article level through the form.
            page.select_option("select[name=level]", "article")
            page.click("#compare-form button[type=submit]")
            page.wait_for_url(re.compile(r".*level=article.*"))
            assert page.locator("#top thead th", has_text="article_id").count() == 1
            page.locator("#overlap-svg").screenshot(path=str(ARTIFACTS / f"compare-overlap-{backend}.png"))
        finally:
            context.close()
    outside = [u for u in requested if not re.match(r"^http://127\.0\.0\.1:\d+/", u)]
    assert outside == []
