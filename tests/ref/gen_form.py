# Reference design points for tests/test_method_form.c: the point of the
# surface g = 0 nearest the origin of standard normal space, found by direct
# minimisation with scipy (independent of FORM's iteration). Each surface is
# written as u2 = h(u1), so the distance is a function of u1 alone: a grid
# locates the global minimum, scipy.optimize.minimize_scalar polishes it.
# Output: case beta u1 u2, numbers with repr.
import math

import numpy as np
from scipy import optimize, stats


def nearest(h, lo, hi):
    def d2(u1):
        u2 = h(u1)
        return u1 * u1 + u2 * u2

    grid = np.linspace(lo, hi, 20001)
    vals = [d2(x) for x in grid]
    i = int(np.argmin(vals))
    step = grid[1] - grid[0]
    r = optimize.minimize_scalar(d2, bounds=(grid[i] - step, grid[i] + step),
                                 method='bounded',
                                 options={'xatol': 1e-13, 'maxiter': 1000})
    u1 = r.x
    return math.sqrt(d2(u1)), u1, h(u1)


# Case "lognormal-gumbel": r lognormal (mean 3, cov 0.15), s gumbel (largest
# values, mean 1.2, cov 0.25), g = r - s: on g = 0, s = r(u1), so
# u2 = Phi^-1(F_s(r(u1))).
sig = math.sqrt(math.log(1 + 0.15 ** 2))
mu = math.log(3.0) - sig * sig / 2
scale = 1.2 * 0.25 * math.sqrt(6) / math.pi
loc = 1.2 - 0.5772156649015329 * scale


def h_lg(u1):
    r = math.exp(mu + sig * u1)
    return stats.norm.isf(stats.gumbel_r.sf(r, loc=loc, scale=scale))


# Case "parabola-offset": standard normals, g = 3 - a - 0.2 (b - 0.5)^2,
# written with u1 = b: a = 3 - 0.2 (b - 0.5)^2, so the roles swap (the
# printed u1 is a, u2 is b).
def h_po(b):
    return 3 - 0.2 * (b - 0.5) ** 2


for name, h, lo, hi, swap in [("lognormal-gumbel", h_lg, -8, 2, False),
                              ("parabola-offset", h_po, -6, 6, True)]:
    beta, u1, u2 = nearest(h, lo, hi)
    if swap:
        u1, u2 = u2, u1
    print(name, repr(float(beta)), repr(float(u1)), repr(float(u2)))
