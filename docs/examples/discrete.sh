# docs/examples/discrete.sh: a job with a 0/1 vector, its joint patterns asked for by name
# (run from docs/examples/; invented counts of passers-by who stopped at three window displays)
JOB=$(drawyard submit displays-spec.json displays.json --pattern next_stops \
      --chains 4 --draws 1000 --seed 12 --wait)
echo "exit code $?"
drawyard probabilities "$JOB"
