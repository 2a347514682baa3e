#!/usr/bin/env bash
# The longer coverage sweep behind docs/methods.md and bench/README.md:
# subset simulation and cross-entropy over hundreds of seeds, in process.
# Usage: bench/coverage_sweep.sh [BUILD_DIR] [SEEDS]
#   (default build-release, made if missing; 300 seeds)
set -euo pipefail
cd "$(dirname "$0")/.."
b=${1:-build-release}
n=${2:-300}
[ -d "$b" ] || meson setup "$b" --buildtype=release >/dev/null
ninja -C "$b" bench/coverage_sweep >/dev/null
export BRINK_FIXTURES=$PWD/tests/fixtures
s="$b/bench/coverage_sweep"
for p in "linear 2 3.09" "linear 2 4.75" "linear 2 5.2" "linear 2 6.0"; do
  "$s" "$n" 'method: subset, samples: 500' $p
  "$s" "$n" 'method: cross-entropy' $p
done
for p in "series4 6" "parabola 7.0" "rastrigin 18.0" "corr 3.0" \
  "linear 100 4.75" "lognsum 100 112.0"; do
  "$s" "$n" 'method: subset' $p
done
"$s" "$n" 'method: subset, samples: 2000' corr 4.0
for p in "series4 6" "parabola 5.0" "corr 3.0"; do
  "$s" "$n" 'method: cross-entropy, cross_entropy: {components: 2}' $p
done
# 1000 variables: about 15 to 30 s a run.
"$s" 10 'method: cross-entropy' linear 1000 4.75
"$s" 10 'method: cross-entropy' lognsum 1000 1050.0
"$s" 10 'method: subset' linear 1000 4.75
"$s" 10 'method: subset' lognsum 1000 1050.0
