# docs/examples/curl-round-trip.sh: one job by curl (run from docs/examples/)
BASE=${DRAWYARD_URL:-http://127.0.0.1:8000}
JOB=$(curl -s -X POST "$BASE/v1/jobs" -H 'Content-Type: application/json' \
           -H "Idempotency-Key: delivery-delays-$(date +%s)" -d @job.json |
      python3 -c 'import json, sys; print(json.load(sys.stdin)["id"])')
echo "job $JOB"
state() { curl -s "$BASE/v1/jobs/$JOB" | python3 -c 'import json, sys; print(json.load(sys.stdin)["state"])'; }
while [ "$(state)" = queued ] || [ "$(state)" = running ]; do sleep 1; done
curl -s "$BASE/v1/jobs/$JOB/summary" |
  python3 -c 'import json, sys; s = json.load(sys.stdin)
print("verdict passed:", s["verdict"]["passed"])
for q in s["quantities"]: print(q["name"], round(q["mean"], 2), round(q["sd"], 2))'
curl -s -o draws.csv "$BASE/v1/jobs/$JOB/draws?format=csv"
head -1 draws.csv
