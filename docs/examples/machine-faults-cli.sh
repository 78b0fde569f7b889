# docs/examples/machine-faults-cli.sh: the change-week job by the command line (run from
# docs/examples/): the spec, then the data file, then the settings
JOB=$(drawyard submit machine-faults-spec.json machine-faults-data.json \
      --settings machine-faults-settings.json --wait)
echo "exit code $?"
drawyard fetch "$JOB" draws --format csv --quantities change -o change.csv
python3 -c 'import csv; rows = list(csv.DictReader(open("change.csv")))
print("draws:", len(rows), "whole weeks:", all(float(r["change"]).is_integer() for r in rows))'
