# docs/examples/keys.sh: API keys on a local service (run from docs/examples/ on the machine of
# the store: DRAWYARD_DATABASE_URL names it, as for drawyard serve --var DIR it is
# sqlite:///DIR/drawyard.sqlite)
BASE=${DRAWYARD_URL:-http://127.0.0.1:8000}
# the secret alone on stdout (id, tenant and scopes on stderr), so it can be captured
K=$(drawyard keys create --tenant analytics --scopes submit,read --label docs-example)
echo "$K" | grep -Eq '^dyk_[^.]+\.[^.]+$' && echo "captured one key"
M=$(drawyard keys create --tenant monitoring --scopes metrics)
# once a key exists every request needs one: 401 without, 403 without the scope
curl -s -o /dev/null -w 'no key: %{http_code}\n' "$BASE/v1/jobs"
curl -s -o /dev/null -w 'metrics key on jobs: %{http_code}\n' -H "Authorization: Bearer $M" "$BASE/v1/jobs"
curl -s -o /dev/null -w 'metrics key on metrics: %{http_code}\n' -H "Authorization: Bearer $M" "$BASE/metrics"
curl -s -o /dev/null -w 'health: %{http_code}\n' "$BASE/v1/health/ready"
# the CLI takes the key from DRAWYARD_API_KEY
export DRAWYARD_API_KEY="$K"
JOB=$(drawyard submit spec.json delays.csv sizes.json --settings settings.json --wait)
curl -s -H "Authorization: Bearer $K" "$BASE/v1/jobs/$JOB/audit" |
  python3 -c 'import json, sys; a = json.load(sys.stdin); print("submitted by a key:", a["submitted_by"] is not None)'
# another tenant's job is not found
O=$(drawyard keys create --tenant other --scopes read)
curl -s -o /dev/null -w 'other tenant: %{http_code}\n' -H "Authorization: Bearer $O" "$BASE/v1/jobs/$JOB"
# list (ids, tenants, scopes; never secrets), then revoke: the key stops working at once
drawyard keys list | tail -n +2 | cut -f2 | sort | tr '\n' ' '; echo
drawyard keys revoke "$(drawyard keys list | awk -F'\t' '$2 == "other" {print $1}')"
curl -s -o /dev/null -w 'revoked: %{http_code}\n' -H "Authorization: Bearer $O" "$BASE/v1/jobs/$JOB"
