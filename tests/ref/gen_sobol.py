#!/usr/bin/python3
"""Unscrambled 32-bit Sobol points and direction numbers from
scipy.stats.qmc.Sobol(scramble=False, bits=32) (Debian's python3-scipy,
Joe & Kuo new-joe-kuo-6.21201 direction numbers).

Two kinds of line:
  "point pos first count x_1 .. x_count": the point scipy returns at
    position pos (0-based; position 0 is the origin) in dimensions first ..
    first + count - 1 (0-based), each coordinate as the integer x * 2^32.
    scipy draws points in Gray-code order, so its position pos is point
    pos ^ (pos >> 1) in the plain binary order, where point i is the xor of
    the direction numbers over the set bits of i.
  "direction dim v_0 .. v_31": the 32 direction numbers of dimension dim
    (0-based) as scipy computes them from the table (v_j is point 2^j);
    all 32 are exercised, most from the recurrence, not the initial values.

Cases: the first 1024 points in dimensions 0..7, the first 64 in dimensions
995..1004 (of d = 1005) and in the top dimensions 21190..21200 (of
d = 21201); the direction numbers of dimensions 0..15, 995..1004, every
997th dimension, and 21190..21200."""
import warnings

import numpy as np
from scipy.stats import qmc


def points(d, m, first, count):
    sampler = qmc.Sobol(d=d, scramble=False, bits=32)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        x = sampler.random_base2(m)
    ints = np.rint(x * 2.0**32).astype(np.uint64)
    assert np.all(ints < 2**32)
    assert np.all(ints.astype(np.float64) == x * 2.0**32)
    for pos in range(ints.shape[0]):
        row = ints[pos, first:first + count]
        print("point", pos, first, count, " ".join(str(int(v)) for v in row))


def directions(dims):
    sv = qmc.Sobol(d=21201, scramble=False, bits=32)._sv
    assert sv.shape == (21201, 32)
    for dim in dims:
        print("direction", dim, " ".join(str(int(v)) for v in sv[dim]))


points(8, 10, 0, 8)
points(1005, 6, 995, 10)
points(21201, 6, 21190, 11)
directions(sorted(set(list(range(16)) + list(range(995, 1005)) +
                      list(range(0, 21201, 997)) +
                      list(range(21190, 21201)))))
