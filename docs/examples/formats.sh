# docs/examples/formats.sh: the download formats by curl (run from docs/examples/)
BASE=${DRAWYARD_URL:-http://127.0.0.1:8000}
JOB=$(drawyard submit spec.json delays.csv sizes.json --settings settings.json --wait)
curl -s -o draws.parquet "$BASE/v1/jobs/$JOB/draws?format=parquet&layout=long"
curl -s -D headers.txt -o draws.npz "$BASE/v1/jobs/$JOB/draws?format=npz"
grep -i '^content-type:' headers.txt | tr -d '\r'
curl -H "If-None-Match: $(grep -i '^etag:' headers.txt | cut -d' ' -f2 | tr -d '\r')" \
     -s -o /dev/null -w '%{http_code}\n' "$BASE/v1/jobs/$JOB/draws?format=npz"   # 304
# by Accept instead of ?format=, and plain names for SQL engines
curl -s -H 'Accept: text/csv' "$BASE/v1/jobs/$JOB/sampler-stats?names=plain&chains=1" -o stats.csv
head -2 stats.csv
