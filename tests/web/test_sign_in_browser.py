"""Browser sign-in in a real Chromium (Playwright) against the live service (gunicorn, Celery).

Keys are made and revoked with the real `drawyard keys` command. What the cookie must be is from
RFC 6265 (section 4.1.2.5 Secure, 4.1.2.6 HttpOnly) and RFC 6265bis (section 4.1.2.7 SameSite);
the form token from the OWASP Cross-Site Request Forgery Prevention Cheat Sheet. Tenant isolation
answers 404 for another tenant's job, as the API does (service/access/tenancy.py).
"""

from __future__ import annotations

import re
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import requests
from playwright.sync_api import Browser, BrowserContext, expect, sync_playwright

from service.store import migrate
from tests.conftest import sqlite_url
from tests.security.access_helpers import create_key, drawyard
from tests.service.bodies import normal_mean
from tests.web.browser import CHROMIUM, CHROMIUM_ARGS, VIEWPORT, screenshot

SESSION_COOKIE = "drawyard_session"
# A small run: the point is the signed-in page following it to the end, not the sampler.
CHAINS, WARMUP, DRAWS = 2, 100, 100


@pytest.fixture(scope="module")
def browser() -> Iterator[Browser]:
    if not CHROMIUM.exists():
        pytest.fail(f"{CHROMIUM} is missing; run `bash tests/harness/install_browser.sh`")
    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        yield chromium
        chromium.close()


def new_context(browser: Browser) -> BrowserContext:
    return browser.new_context(viewport=VIEWPORT)


def session_cookie(context: BrowserContext) -> dict:
    found = [c for c in context.cookies() if c["name"] == SESSION_COOKIE]
    assert len(found) == 1, context.cookies()
    return found[0]


def sign_in(context: BrowserContext, base: str, secret: str, path: str = "/jobs"):
    page = context.new_page()
    page.goto(base + path)
    # Not signed in: sent to the sign-in page, which brings the browser back afterwards.
    page.wait_for_url(re.compile(r"/sign-in\?next="))
    page.fill("#key", secret)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(re.compile(re.escape(path) + "$"))
    return page


def reopened_with(browser: Browser, base: str, cookie: dict) -> str:
    """Open /jobs in a fresh browser holding only ``cookie``; the URL it ends on."""
    context = new_context(browser)
    context.add_cookies([{k: cookie[k] for k in ("name", "value", "domain", "path")}])
    page = context.new_page()
    page.goto(base + "/jobs")
    url = page.url
    context.close()
    return url


@pytest.mark.slow
def test_sign_in_submit_read_sign_out_revoke(
    browser: Browser, live_service, redis_url: str, tmp_path: Path
) -> None:
    url = sqlite_url(tmp_path / "store.sqlite")
    migrate(url)
    alpha = create_key(url, "alpha")
    beta = create_key(url, "beta")
    service = live_service(url, redis_url, workers=1,
                           env={"DRAWYARD_PLOT_CACHE": str(tmp_path / "plots")})
    base = service.base_url
    other = requests.post(f"{base}/v1/jobs", json=normal_mean(chains=1, warmup=50, draws=50),
                          headers=beta.headers, timeout=30).json()["id"]

    context = new_context(browser)
    page = context.new_page()
    page.goto(base + "/jobs")
    page.wait_for_url(re.compile(r"/sign-in"))
    screenshot(page, "sign-in")
    # A wrong key: the page says so, and no session cookie is set.
    page.fill("#key", alpha.secret[:-2] + "xx")
    with page.expect_response(lambda r: r.request.method == "POST") as answer:
        page.get_by_role("button", name="Sign in").click()
    assert answer.value.status == 401
    expect(page.locator("#sign-in-problem")).to_contain_text("not valid")
    assert not [c for c in context.cookies() if c["name"] == SESSION_COOKIE]
    context.close()

    context = new_context(browser)
    page = sign_in(context, base, alpha.secret)
    cookie = session_cookie(context)
    assert cookie["httpOnly"] and cookie["sameSite"] == "Strict"
    assert cookie["secure"] is False  # plain HTTP here; the flag follows the request's scheme
    # Expiring: a lifetime of DRAWYARD_SESSION_HOURS (8 h by default), not a browser-session cookie.
    assert abs(cookie["expires"] - (time.time() + 8 * 3600)) < 120
    assert alpha.secret not in cookie["value"]
    assert SESSION_COOKIE not in page.evaluate("document.cookie")  # HttpOnly: scripts cannot read
    expect(page.locator("#signed-in-tenant")).to_have_text("alpha")
    expect(page.locator(f"a[href='/jobs/{other}']")).to_have_count(0)  # beta's job is not listed

    # Submit through the form, then read the job as the page follows it to the end.
    page.goto(base + "/submit")
    page.get_by_role("button", name="Load the demo").click()
    page.fill("#chains", str(CHAINS))
    page.fill("#warmup_iterations", str(WARMUP))
    page.fill("#draws", str(DRAWS))
    page.get_by_role("button", name="Submit the job").click()
    page.wait_for_url(re.compile(r"/jobs/[0-9a-f]{32}$"))
    job_id = page.url.rsplit("/", 1)[1]
    page.locator("#job[data-terminal=yes]").wait_for(timeout=240_000)
    expect(page.locator("#verdict")).to_be_visible()
    screenshot(page, "signed-in-job")
    job = requests.get(f"{base}/v1/jobs/{job_id}", headers=alpha.headers, timeout=30)
    assert job.json()["state"] == "succeeded", service.logs()
    # The job is alpha's: beta's key cannot see it, and alpha's job list holds it.
    assert requests.get(f"{base}/v1/jobs/{job_id}", headers=beta.headers,
                        timeout=30).status_code == 404
    page.goto(base + "/jobs")
    expect(page.locator(f"a[href='/jobs/{job_id}']")).to_have_count(1)

    # Another tenant's job is a 404 page, exactly like a job that does not exist.
    foreign = page.goto(f"{base}/jobs/{other}")
    assert foreign is not None and foreign.status == 404
    missing = page.goto(f"{base}/jobs/{'0' * 32}")
    assert missing is not None and missing.status == 404

    # The session reads the API (the job page polls it) but may not change anything there.
    jar = {SESSION_COOKIE: cookie["value"]}
    assert requests.get(f"{base}/v1/jobs/{job_id}", cookies=jar, timeout=30).status_code == 200
    posted = requests.post(f"{base}/v1/jobs", json=normal_mean(), cookies=jar, timeout=30)
    assert posted.status_code == 401
    # A form sent with the cookie but without the page's token, or from another origin, is refused.
    page.goto(base + "/submit")
    token = page.locator("form.submit input[name=csrf]").get_attribute("value")
    assert token
    for data, headers in (({}, {}), ({"csrf": "0" * 64}, {}),
                          ({"csrf": token}, {"Origin": "http://elsewhere.invalid"})):
        forged = requests.post(f"{base}/sign-out", data=data, headers=headers, cookies=jar,
                               timeout=30, allow_redirects=False)
        assert forged.status_code == 403, forged.text
    assert requests.get(f"{base}/v1/jobs/{job_id}", cookies=jar, timeout=30).status_code == 200

    # A forged cookie (the signature broken, or a value of the attacker's own) gets nothing.
    value = cookie["value"]
    for forged_value in (value[:-1] + ("A" if value[-1] != "A" else "B"), "e30.forged.value"):
        assert "/sign-in" in reopened_with(browser, base, {**cookie, "value": forged_value})
        assert requests.get(f"{base}/v1/jobs", cookies={SESSION_COOKIE: forged_value},
                            timeout=30).status_code == 401

    # Sign out: back to the sign-in page, and the same cookie replayed afterwards gets nothing.
    page.goto(base + "/jobs")
    page.get_by_role("button", name="Sign out").click()
    page.wait_for_url(re.compile(r"/sign-in$"))
    assert not [c for c in context.cookies() if c["name"] == SESSION_COOKIE]
    assert "/sign-in" in reopened_with(browser, base, cookie)
    assert requests.get(f"{base}/v1/jobs", cookies=jar, timeout=30).status_code == 401
    context.close()

    # A revoked key's live session stops working on its next request.
    context = new_context(browser)
    page = sign_in(context, base, alpha.secret)
    expect(page.locator(f"a[href='/jobs/{job_id}']")).to_have_count(1)
    second = session_cookie(context)
    revoked = drawyard(url, "keys", "revoke", alpha.key_id)
    assert revoked.returncode == 0, revoked.stderr
    page.goto(base + "/jobs")
    page.wait_for_url(re.compile(r"/sign-in\?next="))
    assert requests.get(f"{base}/v1/jobs", cookies={SESSION_COOKIE: second["value"]},
                        timeout=30).status_code == 401
    context.close()
