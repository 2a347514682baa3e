#!/usr/bin/env bash
# Evaluations FORM + importance sampling need to reach cov 0.1 at Pf about
# 1e-6, on smooth limit states evaluated in process, over 10 seeds each,
# beside crude Monte Carlo's (1 - Pf) / (Pf cov^2), computed, not run.
# Usage: [BATCH=100] bench/bench_methods.sh [BRINK_EXE]   (default build/brink)
set -euo pipefail
brink=${1:-build/brink}
batch=${BATCH:-100} # importance samples between stopping checks
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
# name | variables (YAML flow lines joined by ';') | limit state
cases=(
  "linear-3|a: {type: normal, mean: 0, sd: 1};b: {type: normal, mean: 0, sd: 1};c: {type: normal, mean: 0, sd: 1}|4.753424308822899 - (a + b + c)/sqrt(3)"
  "lognormal-R/S|r: {type: lognormal, mean: 3.84, cov: 0.15};s: {type: lognormal, mean: 1.2, cov: 0.2}|r - s"
  "lognormal-gumbel|r: {type: lognormal, mean: 6.2, cov: 0.12};s: {type: gumbel, mean: 1.5, cov: 0.25}|r - s"
  "paraboloid|a: {type: normal, mean: 0, sd: 1};b: {type: normal, mean: 0, sd: 1}|4.7 - b + 0.05*a^2"
)
printf '%-18s %10s %10s %10s %10s %12s\n' case "Pf(s10)" "FORM" "IS mean" "max total" "crude MC"
for c in "${cases[@]}"; do
  IFS='|' read -r name vars g <<<"$c"
  tot=0 max=0 form=0 pf=0
  for seed in 1 2 3 4 5 6 7 8 9 10; do
    {
      echo "name: b$seed"
      echo "seed: $seed"
      echo "variables:"
      IFS=';' read -ra vs <<<"$vars"
      for v in "${vs[@]}"; do echo "  $v"; done
      echo "limit_state: $g"
      echo "analysis: {method: importance, target_cov: 0.1, samples: $batch}"
      echo "run: {folder: $tmp/r$seed}"
    } >"$tmp/s.yaml"
    "$brink" run "$tmp/s.yaml" --quiet
    j="$tmp/r$seed/report.json"
    n=$(/usr/bin/python3 -c "import json,sys; d=json.load(open(sys.argv[1])); print(d['evaluations'], int(d['details']['FORM evaluations']), d['pf'])" "$j")
    read -r ev fe p <<<"$n"
    tot=$((tot + ev)); form=$fe; pf=$p
    [ "$ev" -gt "$max" ] && max=$ev
  done
  mc=$(/usr/bin/python3 -c "import sys; p=float(sys.argv[1]); print('%.3g' % ((1-p)/(p*0.01)))" "$pf")
  printf '%-18s %10.3g %10d %10d %10d %12s\n' "$name" "$pf" "$form" $(((tot / 10) - form)) "$max" "$mc"
done
