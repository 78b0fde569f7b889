# docs/examples/client-pipeline.py: a pipeline step in Python (run from docs/examples/): a refused
# body's problems, then a job, its verdict, a download, and a download only when changed
import json
import os
from pathlib import Path

from service.client import DrawyardClient, ProblemError, wait_for_job

url = os.environ.get("DRAWYARD_URL", "http://127.0.0.1:8000")
with open("job.json") as file:
    body = json.load(file)
broken = {**body, "data": {"n": 6, "delay": [1.2, 0.4, "late", 1.7, 0.9, 1.5]}}

with DrawyardClient(url, connect_timeout=5, read_timeout=30) as api:
    try:
        api.submit(broken)
    except ProblemError as refused:     # the RFC 9457 problem document
        print("refused with", refused.status)
        for problem in refused.errors:  # [{"pointer": ..., "message": ...}]
            print(problem["pointer"])
    job = api.submit(body)              # a fresh uuid4 Idempotency-Key, reused by its retries
    job = wait_for_job(api, job.id, interval=1.0, timeout=3600, progress=False)
    print(job.state, "passed:", job.verdict.passed)
    if job.state == "succeeded" and job.verdict.passed:
        summary = api.summary(job.id)
        print("quantities:", [q["name"] for q in summary["quantities"]])
        written = api.download(job.id, "draws", Path("draws.csv"), format="csv",
                               columns=["mean_delay"])
        print("draws.csv starts:", Path("draws.csv").read_text().splitlines()[0], written > 0)
        first = api.download_if_changed(job.id, "draws", Path("draws.parquet"), None,
                                        format="parquet")
        again = api.download_if_changed(job.id, "draws", Path("draws.parquet"), first.etag,
                                        format="parquet")
        print("parquet changed:", first.changed, "then:", again.changed)
