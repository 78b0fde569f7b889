"""The documentation served with the pages (service/web/docs_pages.py), through Flask's test
client against a real SQLite store, and in a real Chromium against the live service: every page
of docs/ and the README render, links between them lead to served pages and to the headings they
name, and the submit form reaches the spec language reference."""

from __future__ import annotations

import re
from collections.abc import Iterator
from pathlib import Path

import pytest
from flask.testing import FlaskClient
from playwright.sync_api import Browser, expect, sync_playwright

from service.store import migrate
from tests.conftest import sqlite_url
from tests.web.browser import CHROMIUM, CHROMIUM_ARGS, VIEWPORT, screenshot
from tests.web.test_views import make_app

DOCS = Path(__file__).resolve().parents[2] / "docs"
PAGES = sorted(page.stem for page in DOCS.glob("*.md"))


@pytest.fixture
def client(tmp_path: Path, redis_url: str) -> FlaskClient:
    return make_app(tmp_path, redis_url).test_client()


def hrefs(html: str) -> list[str]:
    return re.findall(r'href="([^"]+)"', html)


def test_every_page_renders_with_its_headings_anchored(client: FlaskClient) -> None:
    for name in ["", *PAGES]:
        answer = client.get(f"/docs/{name}")
        assert answer.status_code == 200, name
        html = answer.get_data(as_text=True)
        assert re.search(r'<h1 id="[\w-]+">', html), name
        assert "<script" not in html.split("</header>")[1].split("<footer")[0], name


def test_links_lead_to_served_pages_and_their_headings(client: FlaskClient) -> None:
    seen = 0
    for name in ["", *PAGES]:
        for href in hrefs(client.get(f"/docs/{name}").get_data(as_text=True)):
            if not href.startswith("/docs/"):
                continue
            path, _, fragment = href.partition("#")
            target = client.get(path)
            assert target.status_code == 200, (name, href)
            if fragment:
                assert f'id="{fragment}"' in target.get_data(as_text=True), (name, href)
            seen += 1
    assert seen > 50


def test_files_that_are_not_served_keep_their_words_but_no_link(client: FlaskClient) -> None:
    html = client.get("/docs/web").get_data(as_text=True)
    # The screenshots live under tests/, which is not served: their alt text stays.
    assert "Rank histograms" in html and "<img" not in html
    assert not any("screenshots" in href for href in hrefs(html))


def test_example_files_are_served_as_text_and_nothing_else(client: FlaskClient) -> None:
    answer = client.get("/docs/examples/job.json")
    assert answer.status_code == 200 and answer.mimetype == "text/plain"
    assert answer.get_data() == (DOCS / "examples" / "job.json").read_bytes()
    for path in ("/docs/examples/..%2f..%2fREADME.md", "/docs/examples/.env", "/docs/nope",
                 "/docs/..%2fDEVELOPERS", "/docs/examples/"):
        assert client.get(path).status_code == 404, path
    # A page, not a problem document: the reader came by browser.
    assert client.get("/docs/nope").mimetype == "text/html"


def test_the_submit_form_links_the_spec_reference(client: FlaskClient) -> None:
    html = client.get("/submit").get_data(as_text=True)
    assert "/docs/model-spec" in hrefs(html) and "/docs/expressions" in hrefs(html)
    assert "/docs/" in hrefs(client.get("/jobs").get_data(as_text=True))


@pytest.fixture(scope="module")
def browser() -> Iterator[Browser]:
    if not CHROMIUM.exists():
        pytest.fail(f"{CHROMIUM} is missing; run `bash tests/harness/install_browser.sh`")
    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        yield chromium
        chromium.close()


def test_from_the_submit_form_to_the_expression_syntax_in_a_browser(
    browser: Browser, live_service, redis_url: str, tmp_path: Path
) -> None:
    url = sqlite_url(tmp_path / "store.sqlite")
    migrate(url)
    service = live_service(url, redis_url, workers=1)
    context = browser.new_context(viewport=VIEWPORT)
    page = context.new_page()
    try:
        page.goto(f"{service.base_url}/submit")
        page.locator("#spec-reference").click()
        expect(page.get_by_role("heading", level=1)).to_have_text("The model spec")
        page.get_by_role("link", name="the expression language").first.click()
        expect(page.get_by_role("heading", level=1)).to_have_text("The expression language")
        screenshot(page, "docs-expressions")
        page.get_by_role("link", name="Documentation").click()
        page.get_by_role("link", name="Samplers", exact=True).click()
        expect(page.get_by_role("heading", name="Warm-up", exact=True)).to_be_visible()
        # A link to a heading of another page lands on that heading.
        page.goto(f"{service.base_url}/docs/diagnostics")
        page.get_by_role("link", name="Upgrading").click()
        assert page.url.endswith("/docs/deployment#upgrading")
        expect(page.locator("#upgrading")).to_be_in_viewport()
    finally:
        context.close()
