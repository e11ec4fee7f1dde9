"""The network page (issue 18, item 5) in a real browser: Debian's headless Chromium driven by playwright,
against a real ``linkfold serve`` process on loopback, on both backends; and its pictures in process.

Screenshots go to test-artifacts/ at the repository root.
"""

from __future__ import annotations

import re

import pytest

from linkfold.api import create_app
from linkfold.api.network_svg import LAYOUT_SEED, PALETTE, network_svg
from linkfold.network import co_exposure, exposure_distribution
from linkfold.store.tokens import create_token
from network_world import REGION, load_region
from test_api_support import AsgiClient, LiveServer, settings_for
from test_pages_browser import ARTIFACTS, _sign_in, browser  # noqa: F401  (the browser fixture)


@pytest.fixture
def region(engine, db_url, tmp_path):
    load_region(engine, tmp_path)
    return {"engine": engine, "read": create_token(engine, scope="read", note="network page").secret}


def test_the_picture_is_the_network_and_stays_the_same(region):
    net = co_exposure(region["engine"], datasets=["region-panel"], min_units=5)
    svg = network_svg(net, attribute="type", weight="jaccard")
    assert svg.count("<circle class=\"n\"") == len(net.nodes) and svg.count("<line class=\"e\"") == len(net.edges)
    assert svg == network_svg(net, attribute="type", weight="jaccard")  # fixed seed: same layout (LAYOUT_SEED)
    assert LAYOUT_SEED and PALETTE[0] in svg and "<script" not in svg
    # The most common type gets the first colour; every type in the legend.
    for _h, _o, ty, _r in REGION:
        assert f">{ty}</text>" in svg


def test_distribution_suppresses_small_buckets(region):
    dist = exposure_distribution(region["engine"], datasets=["region-panel"], min_units=5)
    assert dist and all(v is None or v == 0 or v >= 5 for counts in dist.values() for v in counts)
    assert any(v is None for counts in dist.values() for v in counts)  # long tails have small buckets


def test_page_needs_a_token_and_keeps_the_floor(region, db_url):
    api = AsgiClient(create_app(settings_for(db_url), engine=region["engine"]), token=region["read"])
    assert api.get("/network", token=None).status_code == 401
    assert api.get("/network", params={"min_units": 2}).status_code == 422
    page = api.get("/network", params={"dataset": "region-panel", "color": "type", "weight": "lift"})
    assert page.status_code == 200 and "id=\"network-svg\"" in page.text and "hs256:" not in page.text


def test_network_page_in_chromium(browser, region, db_url, tmp_path, backend):  # noqa: F811
    with LiveServer(db_url, cwd=tmp_path) as server:
        base = server.url
        context = browser.new_context(viewport={"width": 1280, "height": 900})
        requested: list[str] = []
        context.on("request", lambda req: requested.append(req.url))
        page = context.new_page()
        try:
            _sign_in(page, base, region["read"])
            page.goto(base + "/network?dataset=region-panel&color=type&weight=jaccard")
            page.wait_for_selector("#network-svg")
            net = co_exposure(region["engine"], datasets=["region-panel"])
            assert page.locator("#network-svg circle.n").count() == len(net.nodes) == len(REGION)
            assert page.locator("#network-svg line.e").count() == len(net.edges) > 0
            assert page.locator("#edges tbody tr").count() == min(25, len(net.edges))
            box = page.locator("#network-svg").bounding_box()
            assert box is not None and box["width"] > 600
            page.screenshot(path=str(ARTIFACTS / f"network-page-{backend}.png"), full_page=True)
            # Another attribute through the form: colours change, the layout does not.
            page.select_option("select[name=color]", "reach")
            page.click("#network-form button[type=submit]")
            page.wait_for_url(re.compile(r".*color=reach.*"))
            assert page.locator("#network-svg text", has_text="medium").count() >= 1
            page.locator("#distribution-svg").screenshot(path=str(ARTIFACTS / f"network-distribution-{backend}.png"))
        finally:
            context.close()
    outside = [u for u in requested if not re.match(r"^http://127\.0\.0\.1:\d+/", u)]
    assert outside == []
