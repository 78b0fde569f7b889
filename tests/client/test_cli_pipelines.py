"""`drawyard` as a pipeline step: real subprocesses whose stdout and stderr are pipes (never a
terminal), against the real service of tests/client/conftest.py.

The divergent model is the centred eight-schools model (Rubin 1981; data as in BDA3 Table 5.2,
Gelman et al. 2013, from memory, as in tests/validation/test_hierarchical.py), whose funnel makes
NUTS diverge (common practice; Betancourt 2017).
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import requests

from service.cli import EXIT_BROKEN_PIPE
from service.client import DrawyardClient, wait_for_job
from service.job_commands import EXIT_CHECKS_FAILED, EXIT_PASSED
from tests.harness.live_service import LiveService
from tests.service.bodies import normal_mean, variant

DRAWYARD = str(Path(sys.executable).with_name("drawyard"))
REPO_ROOT = Path(__file__).resolve().parents[2]
BEAT = re.compile(
    r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ job (?P<job>[0-9a-f]{32}) +(?P<share>\d+)% "
    r"(?P<state>\w+) .*elapsed (?P<elapsed>[\d:]+).*"
    r"divergences warm-up (?P<warmup>\d+) sampling (?P<sampling>\d+)$"
)

SCHOOLS = {
    "inputs": {"schools": {"type": "integer"},
               "effect": {"type": "real", "shape": ["schools"]},
               "standard_error": {"type": "real", "shape": ["schools"], "lower": 0}},
    "unknowns": {"mu": {"flat_prior": True}, "tau": {"lower": 0},
                 "theta": {"shape": ["schools"]}},
    "priors": [{"on": "tau", "distribution": "half_cauchy", "arguments": {"scale": 5.0}},
               {"on": "theta", "distribution": "normal",
                "arguments": {"location": "mu", "scale": "tau"}}],
    "likelihood": [{"name": "observed_effect", "observed": "effect", "distribution": "normal",
                    "arguments": {"location": "theta", "scale": "standard_error"}}],
}  # fmt: skip
SCHOOLS_DATA = {
    "schools": 8,
    "effect": [28.0, 8.0, -3.0, 7.0, -1.0, 1.0, 18.0, 12.0],
    "standard_error": [15.0, 10.0, 16.0, 11.0, 9.0, 11.0, 10.0, 18.0],
}


def environment(url: str | None = None) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("DRAWYARD_")}
    if url is not None:
        env["DRAWYARD_URL"] = url
    return env


def drawyard(*args: str, url: str | None = None, timeout: float = 300):
    return subprocess.run(
        [DRAWYARD, *args], capture_output=True, text=True, timeout=timeout,
        env=environment(url), cwd=REPO_ROOT,
    )  # fmt: skip


def test_watch_in_a_pipe_beats_steadily_and_divergence_counts_never_fall(
    shared_service: LiveService,
) -> None:
    """The heartbeat lines come at the interval asked for, each with the elapsed time, and the
    warm-up and sampling divergence counts, shown apart, never decrease from one line to the next;
    the last line's counts are the job's, and its sampling count is the number of divergent
    draws in the sampler statistics."""
    api = DrawyardClient(shared_service.base_url)
    body = {
        "model": SCHOOLS, "data": SCHOOLS_DATA, "labels": {"suite": "cli-pipelines"},
        "sampler": {"chains": 2, "warmup_iterations": 300, "draws": 700, "seed": 1981,
                    "maximum_tree_depth": 6},
        "checks": {"max_divergences": None},
    }  # fmt: skip
    job = api.submit(body)
    watched = drawyard(
        "watch", job.id, "--interval", "0.2", "--heartbeat", "0.4", url=shared_service.base_url
    )
    assert watched.returncode == EXIT_CHECKS_FAILED, watched.stderr
    assert watched.stdout == ""  # stdout stays free for --json and job ids
    beats = [m for m in map(BEAT.match, watched.stderr.splitlines()) if m]
    assert len(beats) >= 3, watched.stderr
    assert {m["job"] for m in beats} == {job.id}
    for earlier, later in zip(beats, beats[1:], strict=False):
        assert int(later["warmup"]) >= int(earlier["warmup"])
        assert int(later["sampling"]) >= int(earlier["sampling"])
    final = api.job(job.id)
    assert beats[-1]["state"] == "succeeded"
    assert int(beats[-1]["warmup"]) == sum(c.warmup_divergences for c in final.chains)
    assert int(beats[-1]["sampling"]) == sum(c.divergences for c in final.chains)
    stats = api.sampler_stats(job.id, statistics=["divergent"])
    divergent = sum(int(np.count_nonzero(np.asarray(c["draws"]))) for c in stats["chains"])
    assert sum(c.divergences for c in final.chains) == divergent
    assert sum(c.warmup_divergences for c in final.chains) > 0


def test_service_options_before_the_subcommand_and_a_header_row(
    shared_service: LiveService,
) -> None:
    api = DrawyardClient(shared_service.base_url)
    job = api.submit(variant(normal_mean(), labels={"suite": "cli-before"}))
    wait_for_job(api, job.id, interval=0.2, timeout=300, progress=False)
    listed = drawyard("--url", shared_service.base_url, "--retries", "1", "list",
                      "--label", "suite:cli-before")
    assert listed.returncode == EXIT_PASSED, listed.stderr
    header, *rows = listed.stdout.splitlines()
    assert header.split() == ["JOB", "STATE", "CREATED", "VERDICT", "LABELS"]
    assert [row.split()[0] for row in rows] == [job.id]
    # The same option after the subcommand still wins over the environment's URL.
    after = drawyard("list", "--label", "suite:cli-before", "--no-header",
                     "--url", shared_service.base_url, url="http://127.0.0.1:9")
    assert after.stdout.split()[0] == job.id


def test_list_filters_by_verdict_in_the_cli_and_the_api(shared_service: LiveService) -> None:
    """A job can succeed and still fail its checks: --state succeeded finds it, --verdict
    failed tells it apart."""
    api = DrawyardClient(shared_service.base_url)
    labels = {"suite": "cli-verdict"}
    lenient = {"min_bulk_ess": 100, "min_tail_ess": 100}
    good = api.submit(variant(normal_mean(seed=11), labels=labels, checks=lenient))
    strict = variant(normal_mean(seed=12), labels=labels, checks={"min_bulk_ess": 1e9})
    bad = api.submit(strict)
    for made in (good, bad):
        wait_for_job(api, made.id, interval=0.2, timeout=300, progress=False)
    base = ["list", "--label", "suite:cli-verdict", "--no-header"]
    url = shared_service.base_url
    failed = drawyard(*base, "--verdict", "failed", url=url)
    assert [line.split()[0] for line in failed.stdout.splitlines()] == [bad.id]
    passed = drawyard(*base, "--verdict", "passed", url=url)
    assert [line.split()[0] for line in passed.stdout.splitlines()] == [good.id]
    both = drawyard(*base, "--verdict", "passed,failed", url=url)
    assert len(both.stdout.splitlines()) == 2
    query = {"verdict": "failed", "label": "suite:cli-verdict"}
    answer = requests.get(f"{url}/v1/jobs", params=query, timeout=30)
    assert [j["id"] for j in answer.json()["jobs"]] == [bad.id]
    refused = requests.get(f"{url}/v1/jobs", params={"verdict": "maybe"}, timeout=30)
    assert refused.status_code == 400
    assert refused.json()["errors"][0]["parameter"] == "verdict"


def test_piping_into_head_exits_quietly(shared_service: LiveService) -> None:
    """A reader that closes the pipe early gets no traceback from drawyard (exit 128 + SIGPIPE)."""
    api = DrawyardClient(shared_service.base_url)
    job = api.submit(variant(normal_mean(seed=5), labels={"suite": "cli-head"}))
    wait_for_job(api, job.id, interval=0.2, timeout=300, progress=False)
    producer = subprocess.Popen(
        [DRAWYARD, "fetch", job.id, "draws", "--format", "csv"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=environment(shared_service.base_url),
    )  # fmt: skip
    assert producer.stdout is not None
    producer.stdout.readline()
    producer.stdout.close()  # what `head -1` does after its line
    _, errors = producer.communicate(timeout=120)
    assert b"Traceback" not in errors and b"BrokenPipeError" not in errors, errors
    assert producer.returncode in (EXIT_BROKEN_PIPE, EXIT_PASSED)


def test_version() -> None:
    shown = drawyard("--version")
    assert shown.returncode == 0
    assert re.fullmatch(r"drawyard \d+\.\d+\.\d+\S*\n", shown.stdout)


def test_watch_json_output_stays_parseable_beside_the_heartbeat(
    shared_service: LiveService,
) -> None:
    api = DrawyardClient(shared_service.base_url)
    job = api.submit(variant(normal_mean(seed=6), labels={"suite": "cli-json"}))
    shown = drawyard("watch", job.id, "--json", "--interval", "0.2", "--heartbeat", "0.3",
                     url=shared_service.base_url)
    assert json.loads(shown.stdout)["id"] == job.id
