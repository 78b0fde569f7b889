"""No secret reaches a log: the live service's every log file after requests that carry secrets.

Real gunicorn, a Celery worker and the sweeper on a private Redis and a SQLite store, keys required.
The requests carry an API key where it belongs (Authorization, the sign-in form), where it does not
(a query parameter, X-Request-Id), a wrong key, a Basic credential, and the browser session cookie;
the settings carry a session secret and a callback secret. Every line of every process's log is
then searched for each secret. The lines must still say who asked (the key id), so that the search
is over logs that did record these requests. RFC 6750 section 2.1 for the bearer header.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
import requests

from service.store import migrate
from tests.conftest import sqlite_url
from tests.security.access_helpers import create_key
from tests.service.bodies import normal_mean

SESSION_SECRET = "session-secret-" + "S" * 40
CALLBACK_SECRET = "callback-secret-" + "C" * 40
BASIC = "YWxpY2U6c2VjcmV0LXBhc3N3b3Jk"  # base64 of "alice:secret-password"


@pytest.mark.slow
def test_no_secret_in_any_log(live_service, redis_url: str, tmp_path: Path) -> None:
    url = sqlite_url(tmp_path / "store.sqlite")
    migrate(url)
    alpha = create_key(url, "alpha")
    service = live_service(url, redis_url, workers=1, env={
        "DRAWYARD_REQUIRE_KEYS": "1",
        "DRAWYARD_SESSION_SECRET": SESSION_SECRET,
        "DRAWYARD_CALLBACK_SECRET": CALLBACK_SECRET,
    })
    base = service.base_url
    wrong = alpha.secret[:-4] + "ZZZZ"
    made = requests.post(f"{base}/v1/jobs", json=normal_mean(chains=1, warmup=50, draws=50),
                         headers={**alpha.headers, "X-Request-Id": alpha.secret}, timeout=30)
    assert made.status_code == 202, made.text
    job_id = made.json()["id"]
    assert requests.get(f"{base}/v1/jobs", headers={"Authorization": f"Bearer {wrong}"},
                        timeout=30).status_code == 401
    assert requests.get(f"{base}/v1/jobs", headers={"Authorization": f"Basic {BASIC}"},
                        timeout=30).status_code == 401
    assert requests.get(f"{base}/v1/jobs/{job_id}?key={alpha.secret}", headers=alpha.headers,
                        timeout=30).status_code == 200
    assert requests.get(f"{base}/v1/jobs/{alpha.secret}", headers=alpha.headers,
                        timeout=30).status_code == 404

    browser = requests.Session()
    page = browser.get(f"{base}/sign-in", timeout=30).text
    token = re.search(r'name="csrf" value="([^"]+)"', page).group(1)
    signed = browser.post(f"{base}/sign-in", data={"csrf": token, "key": alpha.secret,
                                                  "next": "/jobs"}, timeout=30)
    assert signed.status_code == 200 and "alpha" in signed.text
    cookie = browser.cookies["drawyard_session"]
    page = browser.get(f"{base}/jobs/{job_id}", timeout=30).text
    token = re.search(r'name="csrf" value="([^"]+)"', page).group(1)
    assert browser.post(f"{base}/sign-out", data={"csrf": token}, timeout=30).status_code == 200

    requests.get(f"{base}/v1/jobs/{job_id}", headers=alpha.headers, timeout=30)
    logs = {path.name: path.read_text(errors="replace") for path in service.log_dir.glob("*.log")}
    assert {"api.log", "sweeper.log"} <= logs.keys() and any(n.startswith("worker") for n in logs)
    # The logs did record these requests, and say whose they were.
    assert alpha.key_id in logs["api.log"]
    assert logs["api.log"].count('"logger": "drawyard.access"') >= 8
    secret_part = alpha.secret.split(".", 1)[1]
    for name, text in logs.items():
        for secret in (alpha.secret, secret_part, wrong, BASIC, cookie, token, SESSION_SECRET,
                       CALLBACK_SECRET):
            assert secret not in text, f"{name} holds a secret"
