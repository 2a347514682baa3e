#!/usr/bin/python3
"""Exact failure probabilities of the rare-event problems in
tests/test_method_cross_entropy.c and tests/test_method_subset.c, from
scipy 1.10 (Debian's python3-scipy):
  normal_sf BETA P      P = scipy.stats.norm.sf(BETA) = Phi(-BETA)
  gamma_sf A T P        P = scipy.stats.gamma.sf(T, A): the sum of A
                        independent unit exponentials exceeds T (Erlang)
"""
from scipy import stats

for beta in (3.09, 4.0, 4.75, 4.9, 5.2):
    print("normal_sf %r %r" % (beta, stats.norm.sf(beta)))
for a, t in ((20, 36.7), (20, 45.0), (20, 48.8)):
    print("gamma_sf %d %r %r" % (a, t, stats.gamma.sf(t, a)))
