"""Discrete quantities on the job page, in a real Chromium (headless, Playwright) against the real
service (gunicorn, a Celery worker, Redis, SQLite on loopback): the table of integer-valued
quantities, the joint-pattern and inclusion tables, and the bar chart of posterior probabilities
in place of the density plot, downloadable as SVG and PNG like the other plots.

What the page shows is checked against the JSON summary of the same job, which the page does not
use (it is rendered on the server from the store). The model is the beta-binomial of
tests/service/test_discrete_summary_resource.py (invented counts).
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import requests
from playwright.sync_api import Browser, Page, expect, sync_playwright

from service.store import migrate
from tests.conftest import sqlite_url
from tests.service.test_discrete_summary_resource import BODY
from tests.web.browser import CHROMIUM, CHROMIUM_ARGS, VIEWPORT, screenshot

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (W3C, 2003), section 5.2


@pytest.fixture(scope="module")
def browser() -> Iterator[Browser]:
    if not CHROMIUM.exists():
        pytest.fail(f"{CHROMIUM} is missing; run `bash tests/harness/install_browser.sh`")
    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        yield chromium
        chromium.close()


@pytest.fixture
def page(browser: Browser) -> Iterator[Page]:
    context = browser.new_context(viewport=VIEWPORT, accept_downloads=True)
    yield context.new_page()
    context.close()


def _finished_job(base: str, logs) -> str:
    answer = requests.post(f"{base}/v1/jobs", json=BODY, timeout=30)
    assert answer.status_code == 202, answer.text
    job_id = answer.json()["id"]
    deadline = time.monotonic() + 240
    while time.monotonic() < deadline:
        state = requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()["state"]
        if state not in ("queued", "running"):
            break
        time.sleep(0.5)
    assert state == "succeeded", logs()
    return job_id


def _shown(value: float, digits: int = 3) -> str:
    """What the page's number macro prints: %.3g (service/templates/job.html)."""
    return f"{value:.{digits}g}"


def test_discrete_quantities_as_tables_and_bar_charts(
    page: Page, live_service, redis_url: str, tmp_path: Path
) -> None:
    url = sqlite_url(tmp_path / "store.sqlite")
    migrate(url)
    service = live_service(url, redis_url, workers=1,
                           env={"DRAWYARD_PLOT_CACHE": str(tmp_path / "plots")})
    base = service.base_url
    job_id = _finished_job(base, service.logs)
    summary = requests.get(f"{base}/v1/jobs/{job_id}/summary", timeout=30).json()
    discrete = [r for r in summary["quantities"] if r["discrete"]]

    page.goto(f"{base}/jobs/{job_id}?quantity=picked%5B1%5D")
    expect(page.locator("#discrete-table tbody tr")).to_have_count(len(discrete))
    for record in discrete:
        row = page.locator(f"#discrete-table tr[data-quantity='{record['name']}']")
        one = record["discrete"]["probability_of_one"]
        if one is not None:
            expect(row.locator("td").nth(3)).to_have_text(
                f"{_shown(one['probability'])} ± {_shown(one['error'], 2)}")
        else:
            expect(row.locator("td").nth(3)).to_have_text("–")
    (table,) = summary["patterns"]
    patterns = page.locator("table[data-patterns='picked'] tbody tr")
    expect(patterns).to_have_count(len(table["patterns"]) + (table["other"] is not None))
    first = table["patterns"][0]
    expect(patterns.first).to_contain_text(", ".join(first["included"]) or "none")
    expect(patterns.first.locator("td").nth(1)).to_have_text(_shown(first["probability"]))
    inclusion = page.locator("table[data-inclusion='picked'] tbody tr")
    expect(inclusion).to_have_count(3)
    for i, item in enumerate(table["inclusion"]):
        expect(inclusion.nth(i).locator("td").first).to_have_text(_shown(item["probability"]))

    # The bar chart replaces the density for an integer-valued quantity.
    expect(page.locator("figure[data-plot=density]")).to_have_count(0)
    image = page.locator("figure[data-plot=probabilities] img")
    image.scroll_into_view_if_needed()
    page.wait_for_function("img => img.complete && img.naturalWidth > 0",
                           arg=image.element_handle(), timeout=60_000)
    screenshot(page, "job-discrete")
    with page.expect_download() as started:
        page.locator("figure[data-plot=probabilities] a[data-image=png]").click()
    assert Path(started.value.path()).read_bytes().startswith(PNG_SIGNATURE)
    assert started.value.suggested_filename == f"{job_id}-probabilities.png"
    source = image.get_attribute("src")
    answer = page.goto(f"{base}{source}")
    assert answer is not None and answer.status == 200
    assert answer.headers["content-type"].startswith("image/svg+xml")
    assert b"Posterior probabilities of picked[1]" in answer.body()
    screenshot(page, "plot-probabilities", full_page=False)

    # A real quantity keeps its density, and has no bar chart to ask for.
    page.goto(f"{base}/jobs/{job_id}?quantity=p%5B1%5D")
    expect(page.locator("figure[data-plot=density]")).to_have_count(1)
    expect(page.locator("figure[data-plot=probabilities]")).to_have_count(0)
    refused = requests.get(f"{base}/jobs/{job_id}/plots/probabilities.svg",
                           params={"quantity": "p[1]"}, timeout=30)
    assert refused.status_code == 400
    assert "not integer-valued" in refused.text
