# docs/examples/registry.sh: register a spec, submit by name, reuse, warm-start (run from
# docs/examples/; with API keys, export DRAWYARD_API_KEY and add -H "Authorization: Bearer ..."
# to each curl)
BASE=${DRAWYARD_URL:-http://127.0.0.1:8000}
# register: prints the version number; the same spec again prints the same number
drawyard models register delivery-delays spec.json
drawyard models register delivery-delays spec.json
# by curl: 200 and that version, since the content is already registered
curl -s -o version.json -w 'curl: %{http_code}\n' -X POST "$BASE/v1/models/delivery-delays/versions" \
     -H 'Content-Type: application/json' -d "{\"model\": $(cat spec.json)}"
python3 -c 'import json; v = json.load(open("version.json")); print("version", v["version"], v["sha256"][:12])'
# names, then one name's versions (newest first), then the spec of one version
drawyard models list
drawyard models list delivery-delays
drawyard models show delivery-delays 1 > spec-v1.json && cmp -s <(python3 -m json.tool spec.json) \
  <(python3 -m json.tool spec-v1.json) && echo "version 1 is spec.json"
# submit by name and version (or --model delivery-delays for the latest): data files only
FIRST=$(drawyard submit --model delivery-delays:1 delays.csv sizes.json --settings settings.json --wait)
# the same submission again returns the earlier result at once: "reused_from" names it
AGAIN=$(drawyard submit --model delivery-delays:1 delays.csv sizes.json --settings settings.json --wait)
curl -s "$BASE/v1/jobs/$AGAIN" | python3 -c 'import json, sys; j = json.load(sys.stdin)
print("reused:", j["reused_from"] is not None, "attempts:", [c["attempts"] for c in j["chains"]])'
# by curl, data in the body; "reuse": false (CLI: --no-reuse) always runs
curl -s -X POST "$BASE/v1/jobs" -H 'Content-Type: application/json' \
     -d '{"model_ref": {"name": "delivery-delays", "version": 1},
          "data": {"n": 3, "delay": [1.1, 0.7, 1.9]}, "sampler": {"seed": 7}, "reuse": false}' |
  python3 -c 'import json, sys; j = json.load(sys.stdin); print("by name:", j["model_ref"]["name"], j["model_ref"]["version"])'
# nightly refit: start from the last job, with the shorter warm-up (250 iterations unless set)
WARM=$(drawyard submit --model delivery-delays delays.csv sizes.json --seed 2027 --chains 2 \
    --warm-start "$FIRST" --wait)
curl -s "$BASE/v1/jobs/$WARM" | python3 -c 'import json, sys; j = json.load(sys.stdin)
print("warm start from the first:", j["warm_start_from"] == sys.argv[1], j["state"])' "$FIRST"
curl -s "$BASE/v1/jobs/$WARM/request" |
  python3 -c 'import json, sys; print("warm-up:", json.load(sys.stdin)["settings"]["warmup_iterations"])'
