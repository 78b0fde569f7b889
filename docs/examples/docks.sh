# docs/examples/docks.sh: two models of broken bike docks compared (run from docs/examples/)
# a fast preview first: branch on the Laplace check
if drawyard submit poisson.json docks.csv stations.json --method laplace --seed 3 --wait > preview.txt; then
  echo "the Gaussian preview passed its check"
else
  echo "the Gaussian is not good enough here; running chains"
fi
A=$(drawyard submit poisson.json docks.csv stations.json --settings docks-settings.json --seed 1 --wait)
B=$(drawyard submit overdispersed.json docks.csv stations.json --settings docks-settings.json --seed 2 --wait)
if drawyard loo "$A" > loo-a.txt; then    # exit 3 when an observation's k-hat is too high
  echo "Poisson: every k-hat is fine"
else
  echo "Poisson: some observations have a high k-hat"
fi
if drawyard compare "$A" "$B" > comparison.txt; then   # exit 0: the best leads by > 2 SE, nothing flagged
  echo "clear preference"
else
  echo "the data do not separate them, or a fit is unreliable somewhere: see the cautions"
fi
head -3 comparison.txt
drawyard evidence "$B" > evidence.txt && echo "evidence without warnings"   # needs proper priors
drawyard bayes-factor "$B" "$A" --json > bayes-factor.json
python3 -c 'import json; b = json.load(open("bayes-factor.json")); print("log Bayes factor above 0:", b["log_bayes_factor"] > 0)'
