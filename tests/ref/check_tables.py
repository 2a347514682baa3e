#!/usr/bin/python3
"""Regenerates every reference table from its generator and compares it with
the committed copy in tests/fixtures. Each generator tests/ref/gen_NAME.py
prints the table tests/fixtures/ref_NAME.txt on stdout, computed with scipy
(Debian's python3-scipy). Numbers are compared to 1e-13 relative, because the
last digit may differ across scipy builds."""
import glob
import os
import subprocess
import sys


def close(a, b):
    try:
        x, y = float(a), float(b)
    except ValueError:
        return a == b
    if x == y:
        return True
    return abs(x - y) <= 1e-13 * max(abs(x), abs(y))


def main():
    fixtures = sys.argv[1]
    here = os.path.dirname(os.path.abspath(__file__))
    bad = 0
    gens = sorted(glob.glob(os.path.join(here, "gen_*.py")))
    for gen in gens:
        name = os.path.basename(gen)[4:-3]
        want = open(os.path.join(fixtures, "ref_" + name + ".txt")).read().split("\n")
        got = subprocess.run([sys.executable, gen], check=True,
                             capture_output=True, text=True).stdout.split("\n")
        if len(want) != len(got):
            print(f"ref_{name}.txt: {len(want)} lines committed, generator gives {len(got)}")
            bad += 1
            continue
        for i, (w, g) in enumerate(zip(want, got)):
            if not all(close(a, b) for a, b in zip(w.split(), g.split())) or len(w.split()) != len(g.split()):
                print(f"ref_{name}.txt:{i+1}: committed '{w}' but scipy gives '{g}'")
                bad += 1
                break
    print(f"{len(gens) - bad} passed, {bad} failed")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
