#!/bin/sh
# Stand-in for your program: reads deck.in, writes result.txt.
# Replace it with the real solver in study.yaml (model.command).
set -eu
awk -F' *= *' '{ v[$1] = $2 } END {
  printf "capacity = %.10e\n", v["area"] * v["strength"]
}' deck.in > result.txt
