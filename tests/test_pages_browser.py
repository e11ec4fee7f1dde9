"""The inspection pages in a real browser: Debian's headless Chromium driven by playwright, against a real
``linkfold serve`` process on loopback, on both backends.

The browser is the system's (``apt-get install chromium``); playwright's own browser download is never
used. Without /usr/bin/chromium these tests skip with the reason, except under CI=true, where they fail.
A screenshot of the cluster page is saved under test-artifacts/ at the repository root.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import pytest

from linkfold.dedupe.stage import run_dedupe
from linkfold.store.tokens import create_token
from test_api_support import LiveServer, build_world, settings_for

CHROMIUM = Path("/usr/bin/chromium")
ARTIFACTS = Path(__file__).resolve().parents[1] / "test-artifacts"
IN_CI = os.environ.get("CI", "").lower() in {"1", "true", "yes"}
# Without the background-networking switches Chromium reaches out on its own (updates, sync, field
# trials); on this closed network that means refused connections and slow starts.
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]


@pytest.fixture(scope="module")
def browser():
    if not CHROMIUM.is_file():
        reason = f"{CHROMIUM} is missing (install Debian's chromium package: apt-get install chromium)"
        if IN_CI:
            pytest.fail(f"CI=true but {reason}", pytrace=False)
        pytest.skip(reason)
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        chromium = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        yield chromium
        chromium.close()


@pytest.fixture
def served(db_url, engine, tmp_path):
    settings = settings_for(db_url)
    urls = build_world(engine, tmp_path, settings)
    write = create_token(engine, scope="write", note="browser test reviewer").secret
    with LiveServer(db_url, cwd=tmp_path) as server:
        yield {"server": server, "urls": urls, "write": write, "engine": engine, "settings": settings}


def _sign_in(page, base: str, token: str) -> None:
    page.goto(base + "/")
    page.fill("#token", token)
    page.click("form.token button[type=submit]")
    page.wait_for_url(base + "/")


def test_open_a_cluster_record_different_and_see_it_split(browser, served, backend):
    base, urls = served["server"].url, served["urls"]
    context = browser.new_context(viewport={"width": 1400, "height": 1000})
    page = context.new_page()
    # Nothing may leave loopback: every request the page makes is checked.
    requested: list[str] = []
    page.on("request", lambda request: requested.append(request.url))
    try:
        _sign_in(page, base, served["write"])
        page.fill("#q", urls["original"] + "?utm_campaign=spring")
        page.click("form.search button")
        page.wait_for_selector("#answer")
        assert urls["original"] in page.inner_text("#answer")

        page.goto(base + "/clusters?level=article")
        links = page.locator("#clusters tbody tr a")
        assert links.count() == 1
        cluster_id = links.first.inner_text()
        links.first.click()
        page.wait_for_selector("#sidebyside")
        assert page.inner_text("#cluster-id") == cluster_id
        assert page.inner_text("#member-count") == "2"
        assert page.locator("#text-left mark").count() >= 1  # the differing passage is marked
        ARTIFACTS.mkdir(exist_ok=True)
        page.screenshot(path=str(ARTIFACTS / f"cluster-page-{backend}.png"), full_page=True)

        page.fill("#decide input[name=by]", "browser reviewer")
        page.fill("#decide input[name=note]", "print view carries a correction: a different piece")
        page.click("#decide button.different")
        page.wait_for_selector("#decided")
        assert "takes effect at the next dedupe run" in page.inner_text("#decided")
        assert "different" in page.inner_text("#decisions")

        run_dedupe(served["engine"], settings=served["settings"])

        page.goto(f"{base}/clusters/{cluster_id}")
        assert page.inner_text("#member-count") == "1"
        page.goto(base + "/clusters?level=article")
        assert page.locator("#no-clusters").count() == 1
        page.goto(base + "/clusters?level=article&min_size=1")
        assert page.locator("#clusters tbody tr").count() == 4  # two articles where there was one
        page.screenshot(path=str(ARTIFACTS / f"clusters-after-split-{backend}.png"), full_page=True)

        page.goto(base + "/charts")
        for img in ("#similarity-chart", "#sizes-chart"):
            # naturalWidth is 0 when an image failed to load or to decode.
            assert page.eval_on_selector(img, "el => el.complete && el.naturalWidth > 0")
    finally:
        context.close()
    outside = [u for u in requested if not re.match(r"^http://127\.0\.0\.1:\d+/", u)]
    assert outside == []


def test_without_a_token_the_browser_gets_the_token_form(browser, served):
    base = served["server"].url
    context = browser.new_context()
    page = context.new_page()
    try:
        response = page.goto(base + "/clusters")
        assert response is not None and response.status == 401
        assert page.locator("form.token").count() == 1
        # A read-only visitor signs in and sees a cluster, without the decision buttons.
        read = create_token(served["engine"], scope="read", note="browser test reader").secret
        _sign_in(page, base, read)
        page.goto(base + "/clusters?level=story")
        page.locator("#clusters tbody tr a").first.click()
        page.wait_for_selector("#members")
        assert page.locator("#decide").count() == 0 and page.locator("#needs-write").count() == 1
    finally:
        context.close()
