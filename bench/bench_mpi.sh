#!/usr/bin/env bash
# Parallel efficiency of `brink run --mpi` against the local executor, and
# the coordinator's CPU time per evaluation.
#
# The model is bk-test-model in `slow S` mode: it sleeps S seconds (50 ms,
# 1 s), so the numbers show what brink adds, not what the CPU can do.
# Every rank runs one model at a time (run.slots: 1). Rank 0 coordinates
# and runs no models, so r ranks have r - 1 workers (1 rank: rank 0 runs
# the models itself). Efficiency = T_local / (T_mpi * workers), with T_local
# the local executor with one slot.
# Coordinator overhead: CPU time (user + system) of rank 0 for 2000
# evaluations of a model that returns at once, less that of 10 evaluations
# (start-up), per evaluation.
# Usage: bench/bench_mpi.sh [BUILD_DIR]   (default build-release)
set -euo pipefail
cd "$(dirname "$0")/.."
b=${1:-build-release}
[ -d "$b" ] || meson setup "$b" --buildtype=release >/dev/null
ninja -C "$b" brink tests/bk-test-model >/dev/null
brink=$(realpath "$b/brink")
model=$(realpath "$b/tests/bk-test-model")
export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
export OMPI_MCA_rmaps_base_oversubscribe=1
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
printf 'x1 = {{ a : %%.17g }}\nbeta = 3\n' >"$tmp/deck.txt"
study() { # folder mode samples
  cat >"$tmp/$1.yaml" <<YAML
name: $1
seed: 5
variables:
  a: {type: normal, mean: 0, sd: 1}
model:
  files: [{template: deck.txt, to: in.txt}]
  command: ['$model', in.txt]
  env: {BK_MODEL_MODE: '$2'}
  outputs:
    g: {file: out.txt, pattern: 'result: g = (\S+)'}
  keep: none
limit_state: g
analysis: {method: random, samples: $3}
run: {folder: $tmp/$1, slots: 1}
YAML
}
now() { date +%s.%N; }
echo "machine: $(nproc) cores, $(uname -r), OpenMPI $(mpirun --version | head -1 | awk '{print $NF}')"
printf '%-8s %6s %10s %8s %8s %8s\n' model ranks evals seconds speedup efficiency
for spec in "0.05 120" "1 24"; do
  read -r s n <<<"$spec"
  study "loc$s" "slow $s" "$n"
  t0=$(now); "$brink" run "$tmp/loc$s.yaml" --quiet; t1=$(now)
  tl=$(echo "$t1 - $t0" | bc -l)
  printf '%-8s %6s %10s %8.2f %8s %8s\n' "${s}s" local "$n" "$tl" 1.00 1.00
  for r in 1 2 3; do
    study "m$r-$s" "slow $s" "$n"
    t0=$(now); mpirun -n "$r" "$brink" run --mpi --quiet "$tmp/m$r-$s.yaml" 2>/dev/null; t1=$(now)
    tm=$(echo "$t1 - $t0" | bc -l)
    w=$((r > 1 ? r - 1 : 1))
    printf '%-8s %6s %10s %8.2f %8.2f %8.2f\n' "${s}s" "$r" "$n" "$tm" \
      "$(echo "$tl / $tm" | bc -l)" "$(echo "$tl / ($tm * $w)" | bc -l)"
  done
done
cpu0() { # folder samples -> rank 0 CPU seconds
  study "$1" ok "$2"
  mpirun -n 3 sh -c 'if [ "$OMPI_COMM_WORLD_RANK" = 0 ]; then
      exec /usr/bin/time -f "%U %S" -o "$0.time" "$1" run --mpi --quiet "$0.yaml"
    else exec "$1" run --mpi --quiet "$0.yaml"; fi' "$tmp/$1" "$brink" 2>/dev/null
  awk '{print $1 + $2}' "$tmp/$1.time"
}
small=$(cpu0 c10 10)
big=$(cpu0 c2000 2000)
echo "coordinator CPU per evaluation: $(echo "($big - $small) * 1000000 / 1990" | bc -l | xargs printf '%.0f') us" \
  "(rank 0: $big s for 2000, $small s for 10)"
