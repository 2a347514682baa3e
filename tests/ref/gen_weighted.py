#!/usr/bin/python3
"""Reference values of the weighted (importance-sampling) estimator for
tests/test_estimate.c, from numpy 1.24 and scipy 1.10.

Lines "w n base spread level log_mean ess cov z": n samples, sample i failing
when (7 i) mod 10 < 3, with log-weight base - spread * fmod(0.6180339887498949 i, 1)
(the same double operations in C); the log of the mean of w I from
scipy.special.logsumexp, the effective sample size (sum w)^2 / sum w^2 from
logsumexp as well, the cov of the mean by numpy's two-pass sample variance
(ddof 1) of the values scaled by the largest weight, and the normal
quantile z = scipy.stats.norm.ppf((1 + level) / 2). Weights of 1e-300 and
1e-400 have no double square (or no double at all) in linear space.

Lines "logsf t value": scipy.stats.norm.logsf(t), the log of the exact
tail probability estimated by the coverage test.

Lines "lognormal pf cov level lo hi": the central interval of the lognormal
variable with median pf and log-sd sqrt(ln(1 + cov^2)),
scipy.stats.lognorm.interval(level, s, scale=pf)."""
import math

import numpy as np
from scipy import special, stats

PHI = 0.6180339887498949

cases = [
    (1000, 0.0, 3.0, 0.95),
    (1000, math.log(1e-300), 3.0, 0.95),
    (1000, -400 * math.log(10), 3.0, 0.95),
    (50, -400 * math.log(10), 0.0, 0.90),
    (5000, -800.0, 10.0, 0.99),
    (1000, math.log(1e-300), 40.0, 0.95),
    (200, -400 * math.log(10), 700.0, 0.95),
]
for n, base, spread, level in cases:
    lw = []
    for i in range(n):
        if (7 * i) % 10 < 3:
            lw.append(base - spread * math.fmod(i * PHI, 1.0))
        else:
            lw.append(-math.inf)
    lw = np.array(lw)
    fail = lw[np.isfinite(lw)]
    lse = special.logsumexp(fail)
    log_mean = lse - math.log(n)
    ess = math.exp(2 * lse - special.logsumexp(2 * fail))
    v = np.exp(lw - fail.max())
    cov = math.sqrt(np.var(v, ddof=1) / n) / np.mean(v)
    z = stats.norm.ppf((1 + level) / 2)
    print("w %d %r %r %r %r %r %r %r" % (n, base, spread, level, log_mean, ess,
                                        cov, z))
for t in (4.0, 37.0, 43.0):
    print("logsf %r %r" % (t, stats.norm.logsf(t)))
for pf, cov, level in ((1e-5, 0.3, 0.95), (2.5e-7, 1.2, 0.9), (0.3, 0.05, 0.99)):
    s = math.sqrt(math.log(1 + cov * cov))
    lo, hi = stats.lognorm.interval(level, s, scale=pf)
    print("lognormal %r %r %r %r %r" % (pf, cov, level, lo, hi))
