#!/usr/bin/python3
"""Reference values for tests/test_learn.c, from scipy (Debian
python3-scipy). One case per line:

  eff MU S EFF       the expected feasibility function with eps = 2 s, as
                     the integral of its definition, E[max(eps - |G|, 0)]
                     for G ~ N(MU, S^2) (scipy.integrate.quad), not the
                     closed form the code uses
  pi MU S PI         P[G <= 0] = scipy.stats.norm.cdf(-MU/S)
  margin MU S K P    P[-K S <= G <= K S] (scipy.stats.norm.cdf differences)
  alpha_loo N (Y MEAN SD)*N VALUE
                     mean of 1{Y <= 0} / norm.cdf(-MEAN/SD)
"""
import numpy as np
from scipy import integrate, stats


def eff(mu, s):
    eps = 2 * s

    def f(g):
        return (eps - abs(g)) * stats.norm.pdf(g, mu, s)

    a = integrate.quad(f, -eps, 0, epsabs=0, epsrel=1e-13, limit=200)[0]
    b = integrate.quad(f, 0, eps, epsabs=0, epsrel=1e-13, limit=200)[0]
    return a + b


for mu, s in [(0.0, 1.0), (0.3, 1.0), (-0.3, 1.0), (1.0, 0.5), (-2.0, 1.5),
              (2.5, 1.0), (4.0, 1.0), (0.01, 0.02), (-7.0, 3.0), (3.0, 0.7)]:
    print("eff %r %r %r" % (mu, s, eff(mu, s)))
for mu, s in [(0.0, 1.0), (1.0, 1.0), (-2.5, 0.5), (6.0, 1.0), (-0.1, 3.0)]:
    print("pi %r %r %r" % (mu, s, stats.norm.cdf(-mu / s)))
k = stats.norm.ppf(0.975)
for mu, s in [(0.0, 1.0), (1.0, 1.0), (-2.5, 0.5), (6.0, 1.0), (-0.1, 3.0),
              (9.0, 1.0)]:
    t = mu / s
    p = stats.norm.sf(-k - t) - stats.norm.sf(k - t) if t > 0 else \
        stats.norm.cdf(k - t) - stats.norm.cdf(-k - t)
    print("margin %r %r %r %r" % (mu, s, k, p))
rs = np.random.RandomState(7)
y = rs.standard_normal(12) + 0.5
m = y + 0.3 * rs.standard_normal(12)
sd = 0.2 + rs.uniform(0, 1, 12)
v = np.mean(np.where(y <= 0, 1 / stats.norm.cdf(-m / sd), 0))
print("alpha_loo 12 " + " ".join("%r %r %r" % t for t in zip(y, m, sd)) + " %r" % v)
