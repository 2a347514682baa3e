#!/bin/sh
# Sliding check of a cantilever retaining wall (invented demo model): reads
# wall.in (name = value lines), writes wall.out. Rankine active thrust on a
# wall of height h, friction on the base: margin = resistance - thrust, kN/m.
set -eu
awk -F' *= *' '
  { v[$1] = $2 }
  END {
    pi = atan2(0, -1)
    phi = v["phi"] * pi / 180
    ka = (1 - sin(phi)) / (1 + sin(phi))
    thrust = 0.5 * ka * v["gamma"] * v["h"] * v["h"] + ka * v["q"] * v["h"]
    resist = v["weight"] * v["mu"]
    printf "active thrust = %.10e kN/m\n", thrust
    printf "sliding resistance = %.10e kN/m\n", resist
    printf "sliding margin = %.10e kN/m\n", resist - thrust
  }' wall.in > wall.out
