#!/usr/bin/python3
"""Reference intervals for tests/test_estimate.c, from scipy 1.10
(scipy.stats.binomtest(...).proportion_ci with method 'wilson' and 'exact',
the latter being Clopper-Pearson), and Student t quantiles (scipy.stats.t,
polished).
Columns: n k level wilson_lo wilson_hi cp_lo cp_hi."""
from scipy import stats

cases = [(10, 0), (10, 1), (10, 5), (10, 10), (100, 3), (1000, 1),
         (1000, 25), (100000, 7), (1000000, 2500), (1048576, 13), (50, 49)]
for level in (0.90, 0.95, 0.99):
    for n, k in cases:
        r = stats.binomtest(k, n)
        w = r.proportion_ci(confidence_level=level, method="wilson")
        e = r.proportion_ci(confidence_level=level, method="exact")
        print("binom %d %d %r %r %r %r %r" % (n, k, level, w.low, w.high, e.low, e.high))
# scipy's t.ppf is good to about 1e-9 only; its t.cdf is accurate, so
# the quantile is polished by Newton steps on the cdf.
for nu in (1, 2, 3, 7, 15, 99):
    for p in (0.95, 0.975, 0.995):
        q = stats.t.ppf(p, nu)
        for _ in range(3):
            q -= (stats.t.cdf(q, nu) - p) / stats.t.pdf(q, nu)
        print("t %d %r %r" % (nu, p, q))
