#!/usr/bin/python3
"""Reference table for bk_norm2_cdf in tests/test_special.c: the bivariate
standard normal cdf P(X <= h, Y <= k) with correlation rho, computed with
scipy.stats.multivariate_normal.cdf (Debian python3-scipy; for two
dimensions it uses Genz's deterministic bivariate algorithm). One case per
line:

    h k rho P
"""
import numpy as np
from scipy import stats

cases = []
for h, k in [(0.0, 0.0), (1.0, -0.5), (-1.5, -2.0), (-3.0, -3.2),
             (-4.0, -2.5), (2.0, 2.5), (-0.3, 1.7), (-5.0, -5.0)]:
    for rho in [-0.95, -0.6, -0.2, 0.1, 0.5, 0.8, 0.99]:
        cases.append((h, k, rho))
for h, k, rho in cases:
    p = stats.multivariate_normal.cdf(
        [h, k], mean=[0, 0], cov=[[1, rho], [rho, 1]], abseps=1e-15,
        releps=1e-15)
    print("%.17g %.17g %.17g %.17g" % (h, k, rho, float(p)))
