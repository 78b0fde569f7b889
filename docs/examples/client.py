# docs/examples/client.py: the same job from Python (run from docs/examples/)
import json
import os

from service.client import DrawyardClient, wait_for_job

with open("job.json") as file:
    body = json.load(file)
with DrawyardClient(os.environ.get("DRAWYARD_URL", "http://127.0.0.1:8000")) as client:
    job = wait_for_job(client, client.submit(body).id, progress=False)
    summary = client.summary(job.id)
    print(job.state, "passed" if job.verdict.passed else "failed")
    for quantity in summary["quantities"]:
        print(quantity["name"], f"{quantity['mean']:.2f}")
