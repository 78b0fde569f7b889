# docs/examples/api-tour.sh: the endpoints of one job by curl (run from docs/examples/)
BASE=${DRAWYARD_URL:-http://127.0.0.1:8000}
# submit: 202 with Location; the same Idempotency-Key and body give back the same job (200)
KEY="api-tour-$(date +%s)"
curl -s -o job.out -D submit.headers -X POST "$BASE/v1/jobs" -H "Idempotency-Key: $KEY" \
     -H 'Content-Type: application/json' -d @job.json
head -1 submit.headers
JOB=$(python3 -c 'import json; print(json.load(open("job.out"))["id"])')
grep -i '^location:' submit.headers | tr -d '\r'
curl -s -o /dev/null -w 'again: %{http_code}\n' -X POST "$BASE/v1/jobs" -H "Idempotency-Key: $KEY" \
     -H 'Content-Type: application/json' -d @job.json
# status until final: state, each chain's phase, iteration of iterations_total, divergences
state() { curl -s "$BASE/v1/jobs/$JOB" | python3 -c 'import json, sys; print(json.load(sys.stdin)["state"])'; }
while [ "$(state)" = queued ] || [ "$(state)" = running ]; do sleep 1; done
curl -s "$BASE/v1/jobs/$JOB" | python3 -c 'import json, sys; j = json.load(sys.stdin)
print(j["state"], "passed:", j["verdict"]["passed"])
for c in j["chains"]: print("chain", c["chain"], c["phase"], c["iteration"], "of", c["iterations_total"],
                      "divergences:", c["divergences"], "in warm-up:", c["warmup_divergences"])'
# a selection of the draws: one chain, every fifth draw
curl -s "$BASE/v1/jobs/$JOB/draws?quantities=mean_delay&chains=1&thin=5" |
  python3 -c 'import json, sys; d = json.load(sys.stdin); print("chains:", [c["chain"] for c in d["chains"]])'
curl -s -H 'Accept: text/csv' -o draws.csv "$BASE/v1/jobs/$JOB/draws"
head -2 draws.csv
# a finished job's summary is immutable: its ETag answers 304
TAG=$(curl -s -D - -o /dev/null "$BASE/v1/jobs/$JOB/summary" | grep -i '^etag:' | cut -d' ' -f2 | tr -d '\r')
curl -s -D - -o /dev/null "$BASE/v1/jobs/$JOB/summary" | grep -i '^cache-control:' | tr -d '\r'
curl -s -o /dev/null -w 'summary again: %{http_code}\n' -H "If-None-Match: $TAG" "$BASE/v1/jobs/$JOB/summary"
# what was submitted, and the digests: the SHA-256 of each part's canonical bytes
curl -s "$BASE/v1/jobs/$JOB/request" | python3 -c 'import json, sys; r = json.load(sys.stdin)
print("scheme:", r["hashes"]["scheme"], "spec title:", r["spec"]["title"])
open("model.sha256", "w").write(r["hashes"]["model"])'
curl -s "$BASE/v1/jobs/$JOB/request?part=spec" | sha256sum | cut -d' ' -f1 | cmp -s - <(tr -d '\n' < model.sha256; echo) \
  && echo "spec digest matches"
# the columns of the downloads with their plain names and types
curl -s "$BASE/v1/jobs/$JOB/columns" | python3 -c 'import json, sys
print("draw columns:", ", ".join(c["plain"] + " " + c["type"] for c in json.load(sys.stdin)["draws"]))'
# the same body under another key: the same seed, model, data and settings reuse the result at once
curl -s -X POST "$BASE/v1/jobs" -H "Idempotency-Key: $KEY-again" -H 'Content-Type: application/json' \
     -d @job.json | python3 -c 'import json, sys; j = json.load(sys.stdin)
print("second job:", j["state"], "reused:", j["reused_from"] is not None)'
# the list, filtered by verdict and label; a Link header points at the next page
curl -s -D list.headers "$BASE/v1/jobs?verdict=passed&label=pipeline:delivery-delays&limit=1" |
  python3 -c 'import json, sys; print("listed:", [j["id"] for j in json.load(sys.stdin)["jobs"]])'
grep -i '^link:' list.headers | sed 's/cursor=[^>]*/cursor=.../' | tr -d '\r'
