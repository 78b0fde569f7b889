"""The pages' views through Flask's test client, against a real SQLite store and a real Redis.

No worker runs here: a finished job is made by running its chains and its finishing step in this
process through the same functions the Celery tasks call (service.chain_work.run_chain,
service.finishing.finish). What the pages show is compared with the JSON API's answers for the
same job, and with outside references named beside each check.
"""

from __future__ import annotations

import csv
import html
import io
import json
import re
import tempfile
from collections.abc import Iterator
from pathlib import Path
from urllib.parse import parse_qs, urlsplit

import pytest
from flask import Flask
from flask.testing import FlaskClient

from service.app import create_app
from service.chain_work import run_chain
from service.demo import demo_submission
from service.finishing import finish
from service.problem_details import ApiProblem
from service.store import migrate
from service.web.access import ACCESS_CHECK
from service.web.advice import ADVICE
from tests.conftest import sqlite_url

SMALL = {"chains": 2, "warmup": 100, "draws": 100}


def make_app(folder: Path, broker_url: str) -> Flask:
    url = sqlite_url(folder / "store.sqlite")
    migrate(url)
    app = create_app({"database_url": url, "broker_url": broker_url})
    app.config["DRAWYARD_PLOT_CACHE"] = str(folder / "plots")
    return app


@pytest.fixture
def client(tmp_path: Path, redis_url: str) -> FlaskClient:
    return make_app(tmp_path, redis_url).test_client()


def demo_form(**changes: str) -> dict[str, str]:
    body = demo_submission(SMALL["chains"], SMALL["warmup"], SMALL["draws"])
    form = {
        "model_text": json.dumps(body["model"]),
        "data_text": json.dumps(body["data"]),
        "chains": str(SMALL["chains"]),
        "warmup_iterations": str(SMALL["warmup"]),
        "draws": str(SMALL["draws"]),
        "seed": "11",
        "labels_text": "scenario=bakery-demo\nowner=analytics\n",
        "token": "form-token-1",
    }
    form.update(changes)
    return form


def post_form(client: FlaskClient, path: str, data: dict | None = None, **options):
    """POST a page's form as the browser would: with the "csrf" field the page rendered."""
    page = client.get("/submit").get_data(as_text=True)
    match = re.search(r'name="csrf" value="([^"]+)"', page)
    fields = dict(data or {})
    if match is not None:
        fields["csrf"] = match.group(1)
    return client.post(path, data=fields, **options)


def problems_of(page: str, field: str) -> list[dict[str, str]]:
    """The problems the page lists beside one field: pointer, line and message."""
    block = re.search(rf'<ul class="problems" id="problems-{field}".*?</ul>', page, re.S)
    if block is None:
        return []
    found = []
    for item in re.finditer(r'<li data-pointer="([^"]*)"(?: data-line="(\d+)")?>(.*?)</li>',
                            block.group(0), re.S):
        message = re.search(r'<span class="message">(.*?)</span>', item.group(3), re.S)
        found.append({"pointer": item.group(1), "line": item.group(2),
                      "message": message.group(1) if message else ""})
    return found


def textarea(page: str, name: str) -> str:
    import html

    match = re.search(rf'<textarea id="{name}"[^>]*>(.*?)</textarea>', page, re.S)
    assert match is not None
    return html.unescape(match.group(1))


def test_pages_render_and_the_demo_button_fills_in_the_demo(client: FlaskClient) -> None:
    assert client.get("/").headers["Location"].endswith("/jobs")
    jobs = client.get("/jobs")
    assert jobs.status_code == 200 and "No jobs yet." in jobs.get_data(as_text=True)
    empty = client.get("/submit").get_data(as_text=True)
    assert textarea(empty, "model_text") == ""
    page = client.get("/submit?demo=bakery").get_data(as_text=True)
    body = demo_submission()
    # The page reuses service/demo.py's scenario: the same spec and data, read back as JSON.
    assert json.loads(textarea(page, "model_text")) == body["model"]
    assert json.loads(textarea(page, "data_text")) == body["data"]
    assert "scenario=bakery-demo" in textarea(page, "labels_text")


def test_submitting_the_form_queues_a_job_shown_in_the_list(client: FlaskClient) -> None:
    answer = post_form(client, "/submit", data=demo_form())
    assert answer.status_code == 303
    job_id = answer.headers["Location"].rsplit("/", 1)[1]
    job = client.get(f"/v1/jobs/{job_id}").get_json()
    assert job["state"] == "queued"
    assert job["labels"] == {"scenario": "bakery-demo", "owner": "analytics"}
    assert len(job["chains"]) == SMALL["chains"]

    page = client.get(f"/jobs/{job_id}").get_data(as_text=True)
    assert page.count("<tr data-chain=") == SMALL["chains"]
    assert 'data-status-url="/v1/jobs/' + job_id + '"' in page
    assert "job.js" in page  # the live progress script, only while the job runs

    listing = client.get("/jobs?label=owner:analytics").get_data(as_text=True)
    assert f'href="/jobs/{job_id}"' in listing and "queued" in listing
    assert f'href="/jobs/{job_id}"' not in client.get("/jobs?state=succeeded").get_data(
        as_text=True)
    assert f'href="/jobs/{job_id}"' not in client.get("/jobs?label=owner:nobody").get_data(
        as_text=True)

    # The same form sent twice (a double click) is one job: its token is the idempotency key.
    again = post_form(client, "/submit", data=demo_form())
    assert again.headers["Location"] == answer.headers["Location"]


def test_uploaded_files_take_the_place_of_the_text(client: FlaskClient) -> None:
    form = demo_form(token="upload-token")
    spec, data = form.pop("model_text").encode(), form.pop("data_text").encode()
    form["model_text"] = "this text is ignored when a file is chosen"
    form["model_file"] = (io.BytesIO(spec), "spec.json")
    form["data_file"] = (io.BytesIO(data), "data.json")
    answer = post_form(client, "/submit", data=form, content_type="multipart/form-data")
    assert answer.status_code == 303
    job_id = answer.headers["Location"].rsplit("/", 1)[1]
    assert client.get(f"/v1/jobs/{job_id}").get_json()["state"] == "queued"


def test_a_bad_label_filter_is_shown_beside_the_filter(client: FlaskClient) -> None:
    page = client.get("/jobs?label=no-colon").get_data(as_text=True)
    assert 'id="label-problem"' in page and "key:value" in page
    assert 'aria-invalid="true"' in page


def test_invalid_json_is_shown_at_its_line(client: FlaskClient) -> None:
    broken = '{\n  "title": "x",\n  "inputs": {,\n}'
    page = post_form(client, "/submit", data=demo_form(model_text=broken))
    assert page.status_code == 422
    text = page.get_data(as_text=True)
    # The standard library's parser puts the stray comma on line 3.
    with pytest.raises(json.JSONDecodeError) as parsed:
        json.loads(broken)
    found = problems_of(text, "model")
    assert [p["line"] for p in found] == [str(parsed.value.lineno)] == ["3"]
    assert textarea(text, "model_text") == broken  # the analyst's text comes back as typed


def test_service_problems_are_placed_beside_their_fields_and_lines(client: FlaskClient) -> None:
    body = demo_submission(2, 100, 100)
    body["model"]["priors"][1]["distribution"] = "half_norml"
    body["data"]["orders"][3] = -5
    page = post_form(client, "/submit", data=demo_form(
        model_text=json.dumps(body["model"]), data_text=json.dumps(body["data"]), chains="two",
        labels_text="scenario bakery"))
    assert page.status_code == 422
    text = page.get_data(as_text=True)

    model = problems_of(text, "model")
    assert [p["pointer"] for p in model] == ["/model/priors/1/distribution"]
    spec_lines = textarea(text, "model_text").splitlines()
    assert '"distribution": "half_norml"' in spec_lines[int(model[0]["line"]) - 1]

    data = problems_of(text, "data")
    assert [p["pointer"] for p in data] == ["/data/orders/3"]
    assert spec_line_starts(textarea(text, "data_text"), int(data[0]["line"]), '"orders":')
    chains = problems_of(text, "sampler-chains")
    assert [p["pointer"] for p in chains] == ["/sampler/chains"]
    assert problems_of(text, "labels")[0]["line"] == "1"
    # The labels are checked before anything is sent, so no job exists.
    assert client.get("/v1/jobs").get_json()["jobs"] == []


def spec_line_starts(text: str, line: int, start: str) -> bool:
    return text.splitlines()[line - 1].strip().startswith(start)


def test_refused_submission_stores_nothing(client: FlaskClient) -> None:
    body = demo_submission(2, 100, 100)
    body["model"]["priors"][1]["distribution"] = "half_norml"
    page = post_form(client, "/submit", data=demo_form(model_text=json.dumps(body["model"])))
    assert page.status_code == 422
    assert client.get("/v1/jobs").get_json()["jobs"] == []


def test_cancel_button_cancels_a_queued_job(client: FlaskClient) -> None:
    job_id = post_form(client, "/submit", data=demo_form()).headers["Location"].rsplit("/", 1)[1]
    answer = post_form(client, f"/jobs/{job_id}/cancel")
    assert answer.status_code == 303
    assert client.get(f"/v1/jobs/{job_id}").get_json()["state"] == "cancelled"
    assert "has no results" in client.get(f"/jobs/{job_id}").get_data(as_text=True)


def test_unknown_job_and_unfinished_plots(client: FlaskClient) -> None:
    missing = client.get("/jobs/" + "f" * 32)
    assert missing.status_code == 404 and missing.mimetype == "text/html"
    job_id = post_form(client, "/submit", data=demo_form()).headers["Location"].rsplit("/", 1)[1]
    plot = client.get(f"/jobs/{job_id}/plots/trace.svg?quantity=branch_spread")
    assert plot.status_code == 409 and plot.mimetype == "application/problem+json"


def test_the_access_check_guards_every_page(tmp_path: Path, redis_url: str) -> None:
    app = make_app(tmp_path, redis_url)

    def refuse(request) -> None:
        raise ApiProblem(401, "unauthenticated", "Not signed in", "Give an API key.")

    app.extensions[ACCESS_CHECK] = refuse
    client = app.test_client()
    for path in ("/jobs", "/submit", "/jobs/" + "0" * 32):
        answer = client.get(path)
        # A browser that may not read a page is sent to sign in, and comes back there after.
        assert answer.status_code == 303
        location = urlsplit(answer.headers["Location"])
        assert location.path == "/sign-in" and parse_qs(location.query)["next"] == [path]
    assert post_form(client, "/submit", data=demo_form()).status_code == 401


@pytest.fixture(scope="module")
def finished(tmp_path_factory: pytest.TempPathFactory, redis_server) -> Iterator[tuple]:
    """A demo job run to the end in this process, with a bulk ESS threshold it cannot meet."""
    folder = tmp_path_factory.mktemp("finished")
    app = make_app(folder, redis_server.url)
    client = app.test_client()
    body = demo_submission(SMALL["chains"], SMALL["warmup"], SMALL["draws"])
    body["checks"] = {"min_bulk_ess": 1_000_000}
    job_id = client.post("/v1/jobs", json=body).get_json()["id"]
    runtime = app.extensions["drawyard"]
    for chain in range(SMALL["chains"]):
        assert run_chain(runtime, job_id, chain).status == "succeeded"
    finish(runtime, job_id)
    assert client.get(f"/v1/jobs/{job_id}").get_json()["state"] == "succeeded"
    yield client, job_id, folder / "plots"


def test_finished_job_page_shows_verdict_advice_cautions_and_summary(finished) -> None:
    client, job_id, _ = finished
    page = client.get(f"/jobs/{job_id}").get_data(as_text=True)
    summary = client.get(f"/v1/jobs/{job_id}/summary").get_json()
    verdict = summary["verdict"]
    assert verdict["passed"] is False
    checks = {f["check"] for f in verdict["failed_checks"]}
    assert "min_bulk_ess" in checks
    assert set(re.findall(r'class="failed-check" data-check="([a-z_]+)"', page)) == checks
    for check in checks:
        assert ADVICE[check].remedy in page
    for failure in verdict["failed_checks"]:
        assert failure["message"].replace("'", "&#39;") in page
    assert "does not prove the model right" in page
    assert "qualified statistician" in page
    rows = re.findall(r'<th scope="row"><code>([^<]+)</code>', page)
    assert rows == [q["name"] for q in summary["quantities"]]
    assert "job.js" not in page  # nothing to follow once the job has ended
    headers = client.get(f"/jobs/{job_id}").headers
    assert "frame-ancestors 'none'" in headers["Content-Security-Policy"]


def read(client: FlaskClient, path: str) -> bytes:
    answer = client.get(path)
    try:
        return answer.get_data()
    finally:
        answer.close()


def test_every_download_link_answers_in_its_format(finished) -> None:
    client, job_id, _ = finished
    page = client.get(f"/jobs/{job_id}").get_data(as_text=True)
    links = re.findall(r'<li><a href="(/v1/jobs/[^"]+)"', page)
    assert len(links) == 8
    media = {"format=csv": "text/csv", "format=parquet": "application/vnd.apache.parquet"}
    for link in links:
        answer = client.get(link)
        assert answer.status_code == 200, link
        expected = next((m for key, m in media.items() if key in link), "application/json")
        assert answer.mimetype == expected
        answer.close()  # streamed answers hold their request context until closed
    draws = read(client, f"/v1/jobs/{job_id}/draws?format=csv").decode()
    header = next(csv.reader(io.StringIO(draws)))
    names = json.loads(read(client, f"/v1/jobs/{job_id}/draws?format=json"))["quantities"]
    assert header == ["chain", "draw", *names]


def test_plots_are_svg_cached_and_revalidated(finished) -> None:
    client, job_id, cache = finished
    page = client.get(f"/jobs/{job_id}?quantity=branch_spread&x=mean_log_orders"
                      "&y=branch_spread").get_data(as_text=True)
    sources = re.findall(r'<img src="([^"]+)"', page)
    assert [re.search(r"plots/(\w+)\.svg", s).group(1) for s in sources] == [
        "trace", "ranks", "density", "scatter"]
    for source in sources:
        source = source.replace("&amp;", "&")
        first = client.get(source)
        assert first.status_code == 200 and first.mimetype == "image/svg+xml"
        assert first.data.lstrip().startswith(b"<?xml") and b"<svg" in first.data
        again = client.get(source, headers={"If-None-Match": first.headers["ETag"]})
        assert again.status_code == 304
    assert len(list((cache / job_id).glob("*.svg"))) == 4
    # An SVG opened on its own runs nothing (W3C Content Security Policy Level 3, default-src).
    assert client.get(sources[0].replace("&amp;", "&")).headers[
        "Content-Security-Policy"].startswith("default-src 'none'")
    assert "branch_spread" in client.get(sources[0].replace("&amp;", "&")).get_data(as_text=True)
    bad = client.get(f"/jobs/{job_id}/plots/trace.svg?quantity=nothing")
    assert bad.status_code == 400 and bad.mimetype == "application/problem+json"
    assert client.get(f"/jobs/{job_id}/plots/violin.svg?quantity=branch_spread").status_code == 404
    bins = client.get(f"/jobs/{job_id}/plots/ranks.svg?quantity=branch_spread&bins=2")
    assert bins.status_code == 400


def test_a_passed_verdict_lists_its_thresholds(tmp_path: Path, redis_url: str) -> None:
    """Lenient thresholds (None switches a check off, DEVELOPERS.md) give a passing verdict."""
    app = make_app(tmp_path, redis_url)
    client = app.test_client()
    body = demo_submission(SMALL["chains"], SMALL["warmup"], SMALL["draws"])
    body["checks"] = {"max_rhat": 1.5, "min_bulk_ess": 10, "min_tail_ess": 10,
                      "max_divergences": None, "min_ebfmi": None}
    job_id = client.post("/v1/jobs", json=body).get_json()["id"]
    runtime = app.extensions["drawyard"]
    for chain in range(SMALL["chains"]):
        run_chain(runtime, job_id, chain)
    finish(runtime, job_id)
    verdict = client.get(f"/v1/jobs/{job_id}/summary").get_json()["verdict"]
    assert verdict["passed"] is True
    page = client.get(f"/jobs/{job_id}").get_data(as_text=True)
    assert 'data-passed="yes"' in page and 'class="failed-check"' not in page
    assert "max rhat 1.5" in page and "min bulk ess 10" in page
    assert "does not prove the model right" in page  # the cautions show on a pass too


def test_the_list_pages_through_older_jobs(client: FlaskClient) -> None:
    from service.web.pages import PAGE_SIZE

    for number in range(PAGE_SIZE + 1):
        assert post_form(client, "/submit", data=demo_form(token=f"t{number}")).status_code == 303
    first = client.get("/jobs").get_data(as_text=True)
    assert first.count('<a href="/jobs/') == PAGE_SIZE
    older = re.search(r'<a href="(/jobs\?cursor=[^"]+)">Older jobs</a>', first)
    assert older is not None
    second = client.get(older.group(1).replace("&amp;", "&")).get_data(as_text=True)
    assert second.count('<a href="/jobs/') == 1
    assert "Older jobs" not in second


def test_a_past_jobs_spec_data_and_settings_are_on_its_page_and_prefill_the_form(
    finished,
) -> None:
    client, job_id, _ = finished
    page = client.get(f"/jobs/{job_id}").get_data(as_text=True)
    request = client.get(f"/v1/jobs/{job_id}/request").get_json()
    for part in ("spec", "data", "settings"):
        shown = re.search(rf'<details data-part="{part}">.*?<code>(.*?)</code>', page, re.S)
        assert shown is not None, part
        assert json.loads(html.unescape(shown.group(1))) == request[part]
    link = re.search(r'<a href="([^"]+)" id="run-again">', page).group(1)
    form = client.get(html.unescape(link)).get_data(as_text=True)
    typed = re.search(r'<textarea id="model_text"[^>]*>(.*?)</textarea>', form, re.S).group(1)
    assert json.loads(html.unescape(typed)) == request["spec"]
    assert f'value="{SMALL["draws"]}"' in form


def test_each_plot_downloads_as_svg_and_png(finished) -> None:
    """PNG files start with the eight-byte signature of the PNG specification (W3C, 2003,
    section 5.2); SVG is XML whose root is <svg>."""
    client, job_id, _ = finished
    page = client.get(f"/jobs/{job_id}").get_data(as_text=True)
    svg = re.findall(r'<a href="([^"]+)" download data-image="svg">', page)
    png = re.findall(r'<a href="([^"]+)" download data-image="png">', page)
    assert len(svg) == len(png) == 4
    for link in png:
        answer = client.get(html.unescape(link))
        assert answer.status_code == 200 and answer.mimetype == "image/png"
        assert answer.get_data()[:8] == b"\x89PNG\r\n\x1a\n"
        assert "attachment" in answer.headers["Content-Disposition"]
    for link in svg:
        answer = client.get(html.unescape(link))
        assert answer.mimetype == "image/svg+xml" and b"<svg" in answer.get_data()[:400]


def test_csv_data_upload_is_read_as_the_cli_reads_it(client: FlaskClient) -> None:
    """A CSV whose header names the inputs, merged with a JSON object typed in the box, is the
    same data as the CLI makes of the same files (service.client.data_files)."""
    from service.client.data_files import read_data_files

    body = demo_submission(SMALL["chains"], SMALL["warmup"], SMALL["draws"])
    vectors = {k: v for k, v in body["data"].items() if isinstance(v, list)}
    scalars = {k: v for k, v in body["data"].items() if not isinstance(v, list)}
    rows = len(next(iter(vectors.values())))
    lines = [",".join(vectors)] + [
        ",".join(repr(vectors[k][i]) for k in vectors) for i in range(rows)
    ]
    text = "\n".join(lines) + "\n"
    form = demo_form(token="csv-token", data_text=json.dumps(scalars))
    form["data_file"] = (io.BytesIO(text.encode()), "rows.csv")
    answer = post_form(client, "/submit", data=form, content_type="multipart/form-data")
    assert answer.status_code == 303, answer.get_data(as_text=True)
    job_id = answer.headers["Location"].rsplit("/", 1)[1]
    stored = client.get(f"/v1/jobs/{job_id}/request").get_json()["data"]
    folder = Path(tempfile.mkdtemp())
    (folder / "rows.csv").write_text(text)
    (folder / "sizes.json").write_text(json.dumps(scalars))
    assert stored == read_data_files([folder / "rows.csv", folder / "sizes.json"])
    assert stored == body["data"]


def test_the_error_summary_links_name_their_field(client: FlaskClient) -> None:
    answer = post_form(client, "/submit", data=demo_form(model_text="{", token="bad-token"))
    page = answer.get_data(as_text=True)
    links = re.findall(r'<li><a href="#[^"]+">([^<]+)</a></li>', page)
    assert links and all(re.fullmatch(r"[A-Z][a-z ]+\w*: \d+ problems?", t) for t in links)
    assert "Model spec: 1 problem" in links


def test_a_cancelled_job_is_shown_as_cancelled_in_the_list(client: FlaskClient) -> None:
    made = post_form(client, "/submit", data=demo_form(token="cancel-list"))
    job_id = made.headers["Location"].rsplit("/", 1)[1]
    post_form(client, f"/jobs/{job_id}/cancel")
    listing = client.get("/jobs").get_data(as_text=True)
    found = re.search(rf'<tr>(?:(?!</tr>).)*?<a href="/jobs/{job_id}">.*?</tr>', listing, re.S)
    row = found.group(0)
    assert "none yet" not in row and "not judged (cancelled)" in row
    assert f"0 of {SMALL['chains']}; {SMALL['chains']} cancelled" in row
