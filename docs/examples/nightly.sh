# docs/examples/nightly.sh: a nightly pipeline step (run from docs/examples/): check, submit,
# wait, branch on the exit code, fetch
# CI: refuse a bad spec before it reaches the service (no service needed)
drawyard check weekly-demand.json sales.csv weeks.json --settings nightly.json && echo "spec and data pass"
# nightly run: submit, wait, branch on the outcome
status=0
drawyard submit weekly-demand.json sales.csv weeks.json --settings nightly.json \
    --label pipeline=weekly-demand --label run="$(date +%F)" --wait --timeout 3600 \
    > job_id.txt || status=$?
case $status in
  0) echo "fit passed its checks" ;;
  3) echo "fit finished but failed its quality checks"; exit 1 ;;
  4) echo "fit failed or was cancelled"; exit 1 ;;
  8) echo "fit stopped at the wall-time limit; draws are partial"; exit 1 ;;
  5) echo "bad input"; exit 1 ;;
  *) echo "service trouble"; exit 1 ;;
esac
JOB=$(head -n 1 job_id.txt)
drawyard fetch "$JOB" summary -o summary.json
drawyard fetch "$JOB" draws --format csv --quantities mean_log_rate,spread -o draws.csv --if-changed
head -1 draws.csv
# a second fetch finds the draws unchanged (304) and leaves the file alone; it says so on stderr
drawyard fetch "$JOB" draws --format csv --quantities mean_log_rate,spread -o draws.csv --if-changed 2>&1
drawyard list --label pipeline:weekly-demand --verdict passed --limit 1
