"""The pages in a real Chromium (headless, driven by Playwright) against the real service.

The service is the harness's live_service: gunicorn, real Celery workers, a private Redis and a
SQLite store, all on loopback. Every run saves a screenshot of each page to tests/web/screenshots/.
What the pages show is checked against the JSON API of the same job, which the browser does not
use to render them (the pages are rendered on the server from the store).
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Iterator
from pathlib import Path

import pytest
import requests
from playwright.sync_api import Browser, Page, expect, sync_playwright
from playwright.sync_api import TimeoutError as PlaywrightTimeoutError

from service.store import migrate
from tests.conftest import sqlite_url
from tests.harness.live_service import LiveService
from tests.web.browser import CHROMIUM, CHROMIUM_ARGS, VIEWPORT, screenshot

# Settings that finish in well under a minute on two cores, yet keep the job running for several of
# the page's 1 s polls, so the test sees the table move before the job ends and the page reloads.
CHAINS, WARMUP, DRAWS = 4, 150, 1500
FINISH_TIMEOUT_MS = 240_000
PLOT_KINDS = ("trace", "ranks", "density", "scatter")


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


def start_service(live_service, redis_url: str, tmp_path: Path, workers: int) -> LiveService:
    url = sqlite_url(tmp_path / "store.sqlite")
    migrate(url)
    return live_service(url, redis_url, workers=workers,
                        env={"DRAWYARD_PLOT_CACHE": str(tmp_path / "plots")})


def load_demo(page: Page, base_url: str) -> None:
    page.goto(f"{base_url}/submit")
    screenshot(page, "submit-empty")
    page.get_by_role("button", name="Load the demo").click()
    expect(page.locator("#model_text")).to_contain_text("branch_log_orders")


@pytest.mark.slow
def test_demo_submitted_followed_and_read(
    page: Page, live_service, redis_url: str, tmp_path: Path
) -> None:
    service = start_service(live_service, redis_url, tmp_path, workers=2)
    base = service.base_url

    # Keyboard users reach the skip link first (WCAG 2.1, 2.4.1 Bypass Blocks).
    page.goto(f"{base}/jobs")
    page.keyboard.press("Tab")
    assert page.evaluate("document.activeElement.textContent") == "Skip to the content"
    # and the focused element carries the visible outline of the stylesheet (WCAG 2.1, 2.4.7).
    outline = page.evaluate(
        "(() => { const s = getComputedStyle(document.activeElement);"
        " return [s.outlineStyle, s.outlineWidth]; })()")
    assert outline == ["solid", "3px"]

    load_demo(page, base)
    page.fill("#chains", str(CHAINS))
    page.fill("#warmup_iterations", str(WARMUP))
    page.fill("#draws", str(DRAWS))
    screenshot(page, "submit-demo")
    page.get_by_role("button", name="Submit the job").click()
    page.wait_for_url(re.compile(r"/jobs/[0-9a-f]{32}$"))
    job_id = page.url.rsplit("/", 1)[1]
    expect(page.locator("#chains tbody tr[data-chain]")).to_have_count(CHAINS)
    # The table moves while the job runs, without a reload: job.js polls the JSON status. The
    # cells as rendered are kept in the page's own window object, which a reload would replace.
    table = "() => [...document.querySelectorAll('#chains [data-field]')].map(c => c.textContent)"
    page.evaluate(f"window.renderedCells = ({table})()")
    try:
        page.wait_for_function(
            f"""() => window.renderedCells !== undefined
                  && document.querySelector('#job').dataset.terminal === 'no'
                  && ({table})().some((text, i) => text !== window.renderedCells[i])""",
            timeout=FINISH_TIMEOUT_MS,
        )
    except PlaywrightTimeoutError:
        status = requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()
        pytest.fail(f"the table never moved while the job ran; status {status}\n{service.logs()}")
    # "Started" fills in once a chain has started, by the same polling, with no reload (it used
    # to stay blank until the page was reloaded).
    page.wait_for_function(
        "() => window.renderedCells !== undefined && /^\\d{4}-\\d\\d-\\d\\d \\d\\d:\\d\\d:"
        "\\d\\d UTC$/.test(document.getElementById('job-started').textContent)",
        timeout=5000,
    )
    screenshot(page, "job-running")

    # The page polls the status and reloads itself when the job ends; then the verdict appears.
    page.locator("#job[data-terminal=yes]").wait_for(timeout=FINISH_TIMEOUT_MS)
    job = requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()
    assert job["state"] == "succeeded", service.logs()
    page.locator("#verdict").wait_for()
    summary = requests.get(f"{base}/v1/jobs/{job_id}/summary", timeout=30).json()
    passed = summary["verdict"]["passed"]
    heading = page.locator("#verdict-heading").inner_text()
    assert ("passed" if passed else "failed") in heading
    assert page.locator("#verdict").get_attribute("data-passed") == ("yes" if passed else "no")
    failed_kinds = {f["check"] for f in summary["verdict"]["failed_checks"]}
    shown_kinds = set(page.locator(".failed-check").evaluate_all(
        "nodes => nodes.map(n => n.dataset.check)"))
    assert shown_kinds == failed_kinds
    for row in page.locator("#chains tbody tr[data-chain]").all():
        assert row.locator("[data-field=state]").inner_text() == "succeeded"
        assert row.locator("[data-field=iteration]").inner_text() == str(WARMUP + DRAWS)
    expect(page.locator("#summary tbody tr")).to_have_count(len(summary["quantities"]))
    expect(page.get_by_text("does not prove the model right")).to_be_visible()
    expect(page.get_by_text("qualified statistician")).to_be_visible()

    # Each plot loads as a non-empty image in the page, and opens on its own.
    figures = page.locator("figure.plot")
    expect(figures).to_have_count(len(PLOT_KINDS))
    for kind in PLOT_KINDS:
        image = page.locator(f"figure[data-plot={kind}] img")
        image.scroll_into_view_if_needed()
        page.wait_for_function(
            "img => img.complete && img.naturalWidth > 0 && img.naturalHeight > 0",
            arg=image.element_handle(), timeout=60_000,
        )
    screenshot(page, "job-finished")
    sources = [page.locator(f"figure[data-plot={k}] img").get_attribute("src") for k in PLOT_KINDS]
    for kind, source in zip(PLOT_KINDS, sources, strict=True):
        response = page.goto(f"{base}{source}")
        assert response is not None and response.status == 200
        assert response.headers["content-type"].startswith("image/svg+xml")
        body = response.body()
        assert b"<svg" in body and len(body) > 5_000
        screenshot(page, f"plot-{kind}", full_page=False)
    page.goto(f"{base}/jobs/{job_id}")

    # The CSV download's header is chain, draw and the quantities, as the JSON draws name them.
    with page.expect_download() as started:
        page.get_by_role("link", name="Draws (CSV)").click()
    text = Path(started.value.path()).read_text()
    rows = list(csv.reader(io.StringIO(text)))
    quantities = requests.get(
        f"{base}/v1/jobs/{job_id}/draws", params={"format": "json"}, timeout=60
    ).json()["quantities"]
    assert rows[0] == ["chain", "draw", *quantities]
    assert len(rows) == 1 + CHAINS * DRAWS

    # The jobs list shows the job with its state, verdict and label, and filters by label.
    page.goto(f"{base}/jobs")
    page.fill("#label", "scenario:bakery-demo")
    page.get_by_role("button", name="Show jobs").click()
    row = page.locator("table.jobs tbody tr", has=page.locator(f"a[href='/jobs/{job_id}']"))
    expect(row).to_have_count(1)
    expect(row).to_contain_text("succeeded")
    expect(row).to_contain_text("passed" if passed else "failed")
    expect(row).to_contain_text("scenario: bakery-demo")
    screenshot(page, "jobs-list")
    page.fill("#label", "scenario:no-such-scenario")
    page.get_by_role("button", name="Show jobs").click()
    expect(page.get_by_text("No job matches these filters.")).to_be_visible()


def test_bad_spec_shows_the_problem_beside_its_line(
    page: Page, live_service, redis_url: str, tmp_path: Path
) -> None:
    service = start_service(live_service, redis_url, tmp_path, workers=0)
    load_demo(page, service.base_url)
    spec = page.locator("#model_text").input_value()
    assert spec.count('"half_normal"') == 1
    page.fill("#model_text", spec.replace('"half_normal"', '"half_norml"'))
    page.fill("#chains", "two")
    page.get_by_role("button", name="Submit the job").click()

    alert = page.locator("#problem-summary")
    expect(alert).to_be_visible()
    # Focus moves to the list of problems (submit.js), so it is announced.
    expect(alert).to_be_focused()
    problem = page.locator("#field-model .problems li[data-pointer='/model/priors/1/distribution']")
    expect(problem).to_contain_text("half_norml")
    text_lines = page.locator("#model_text").input_value().splitlines()
    expected_line = 1 + next(i for i, line in enumerate(text_lines) if "half_norml" in line)
    assert problem.get_attribute("data-line") == str(expected_line)
    flagged = page.locator("#field-model .listing li.flagged")
    expect(flagged).to_have_count(1)
    assert flagged.get_attribute("value") == str(expected_line)
    expect(flagged).to_contain_text('"distribution": "half_norml"')
    expect(page.locator("#model_text")).to_have_attribute("aria-invalid", "true")
    # The spec's text area is scrolled to the flagged line (submit.js).
    assert page.locator("#model_text").evaluate("area => area.scrollTop") > 0
    # The data are fine, and the chains problem sits beside the chains box.
    expect(page.locator("#field-data .problems")).to_have_count(0)
    chains = page.locator("#problems-sampler-chains li[data-pointer='/sampler/chains']")
    expect(chains).to_contain_text("two")
    screenshot(page, "submit-problems")
    jobs = requests.get(f"{service.base_url}/v1/jobs", timeout=30).json()["jobs"]
    assert jobs == []

    # A job that does not exist gets a page saying so, not a bare error document.
    answer = page.goto(f"{service.base_url}/jobs/{'0' * 32}")
    assert answer is not None and answer.status == 404
    expect(page.get_by_role("heading", name="No such job")).to_be_visible()
    screenshot(page, "job-not-found")
