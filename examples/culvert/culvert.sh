#!/bin/sh
# Full-bore capacity of a partly silted circular pipe by Manning's formula,
# Q = A R^(2/3) sqrt(S) / n. Reads pipe.in, writes pipe.out.
set -eu
awk -F' *= *' '/=/ { v[$1] = $2 } END {
  pi = 3.141592653589793
  d = v["diameter"]; n = v["roughness"]; s = v["gradient"]; k = v["silted"]
  if (s <= 0) { print "negative gradient" > "/dev/stderr"; exit 3 }
  a = pi * d * d / 4 * (1 - k)          # flow area left
  p = pi * d * (1 - k / 2)              # wetted perimeter (rough)
  r = a / p
  q = a * exp(log(r) * 2 / 3) * sqrt(s) / n
  printf "full-bore capacity = %.8e m3/s\n", q
  printf "velocity = %.6e m/s\n", q / a
}' pipe.in > pipe.out
