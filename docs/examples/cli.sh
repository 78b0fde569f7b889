# docs/examples/cli.sh: the same job by the command line (run from docs/examples/); the CLI
# takes the spec alone, then data files (CSV columns, JSON objects), then options
JOB=$(drawyard submit spec.json delays.csv sizes.json --settings settings.json --wait)
echo "exit code $?"
drawyard fetch "$JOB" summary -o summary.json
python3 -c 'import json; s = json.load(open("summary.json"))
print("quantities:", [q["name"] for q in s["quantities"]])'
drawyard list --label pipeline:delivery-delays --limit 1
