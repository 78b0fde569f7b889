# docs/examples/machine-faults.py: the change-week job from Python (run from docs/examples/)
import json
import os
from collections import Counter

from service.client import DrawyardClient, wait_for_job

body = {}
for name in ("machine-faults-settings.json", "machine-faults-data.json"):
    with open(name) as file:
        body.update(json.load(file) if "settings" in name else {"data": json.load(file)})
with open("machine-faults-spec.json") as file:
    body["model"] = json.load(file)
with DrawyardClient(os.environ.get("DRAWYARD_URL", "http://127.0.0.1:8000")) as client:
    job = wait_for_job(client, client.submit(body).id, progress=False)
    print(job.state, "passed" if job.verdict.passed else "failed")
    for quantity in client.summary(job.id)["quantities"]:
        print(quantity["name"], f"{quantity['mean']:.1f}")
    chains = client.draws(job.id, ["change"])["chains"]
    weeks = Counter(int(row[0]) for chain in chains for row in chain["draws"])
    total = sum(weeks.values())
    for week, count in weeks.most_common(3):
        print(f"week {week}: {count / total:.2f}")
