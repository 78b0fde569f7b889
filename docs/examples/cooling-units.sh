# docs/examples/cooling-units.sh: the worked example of docs/model-spec.md submitted as it is
# (run from docs/examples/), and its report columns in order
BASE=${DRAWYARD_URL:-http://127.0.0.1:8000}
JOB=$(curl -s -X POST "$BASE/v1/jobs" -H 'Content-Type: application/json' -d @cooling-units.json |
      python3 -c 'import json, sys; print(json.load(sys.stdin)["id"])')
state() { curl -s "$BASE/v1/jobs/$JOB" | python3 -c 'import json, sys; print(json.load(sys.stdin)["state"])'; }
while [ "$(state)" = queued ] || [ "$(state)" = running ]; do sleep 1; done
state
curl -s "$BASE/v1/jobs/$JOB/columns" | python3 -c 'import json, sys
names = [c["name"] for c in json.load(sys.stdin)["draws"]][2:]   # after chain and draw
print(len(names), "columns:", " ".join(names))'
