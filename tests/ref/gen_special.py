#!/usr/bin/python3
"""Reference table for tests/test_special.c, computed with scipy.special
(Debian python3-scipy). One case per line:

    FUNCTION ARG... EXPECTED

FUNCTION is a scipy.special name (ndtr, ndtri, gammainc, gammaincc,
gammaincinv, gammainccinv, betainc, betaincinv, stdtr, stdtrit); arguments
are in scipy's order (stdtr(nu, t), stdtrit(nu, p)). Names ending in _exact
(gammainc, gammaincc, betainc, betaincc = 1 - betainc) are exact Poisson and
binomial sums in 50-digit decimal arithmetic, for the large integer
parameters where scipy loses digits. The parameters stay
where scipy's own routines are accurate: ndtr for |x| <= 8 (scipy rounds
x/sqrt2 first, which costs relative accuracy further out; the deep tails are
checked against GSL in the test), betainc with a + b < 171 (beyond, scipy
forms lgamma differences and loses digits; GSL covers that range).

scipy's inverse functions (gammaincinv, betaincinv, stdtrit) are only good to
about 1e-9..1e-12 relative in parts of their range, so each quantile is
polished by Newton steps on scipy's own accurate forward function and
density; the table therefore states the root of scipy's forward function."""
import math
import warnings
from decimal import Decimal, getcontext
from fractions import Fraction

import numpy as np
from scipy import special as sp
from scipy import stats


def fmt(v):
    return repr(float(v))

# Exact references by summation in 50-digit decimal arithmetic (Python's
# decimal module), at the double arguments as given.
getcontext().prec = 50
PI = Decimal("3.14159265358979323846264338327950288419716939937510")


def dec(x):
    f = Fraction(x)
    return Decimal(f.numerator) / Decimal(f.denominator)


def ln_factorial(n):
    """Stirling's series; at n >= 1e4 the terms shown leave < 1e-40."""
    n = Decimal(n)
    return (n * n.ln() - n + (2 * PI * n).ln() / 2 + 1 / (12 * n)
            - 1 / (360 * n ** 3) + 1 / (1260 * n ** 5))


def poisson_upper(a, x):
    """P(a, x) = P(Poisson(x) >= a) for integer a."""
    x = dec(x)
    t = (a * x.ln() - x - ln_factorial(a)).exp()
    s, j = Decimal(0), a
    while t > s * Decimal(10) ** -40:
        s += t
        t = t * x / (j + 1)
        j += 1
    return s


def poisson_lower(a, x):
    """Q(a, x) = P(Poisson(x) <= a - 1) for integer a."""
    x = dec(x)
    t = ((a - 1) * x.ln() - x - ln_factorial(a - 1)).exp()
    s, j = Decimal(0), a - 1
    while j >= 0 and t > s * Decimal(10) ** -40:
        s += t
        t = t * j / x
        j -= 1
    return s


def binom_tails(k, b, x):
    """(I_x(k, b), 1 - I_x(k, b)) = (P(X >= k), P(X < k)) for X ~ Bin(k + b
    - 1, x), integer k and b, each summed from its own terms."""
    n = k + b - 1
    p = dec(x)
    q = 1 - p
    r = p / q
    t = q ** n
    lower = Decimal(0)
    for j in range(k):
        lower += t
        t = t * (n - j) / (j + 1) * r
    upper, j = Decimal(0), k
    while j <= n and t > upper * Decimal(10) ** -40:
        upper += t
        t = t * (n - j) / (j + 1) * r
        j += 1
    return upper, lower


def polish(forward, density, x, target, lo=-math.inf, hi=math.inf,
           decreasing=False):
    """Newton's method on forward(x) = target from scipy's inverse x."""
    for _ in range(50):
        f = density(x)
        if not (f > 0):
            break
        r = target - forward(x)
        dx = r / f * (-1 if decreasing else 1)
        xn = min(max(x + dx, lo), hi)
        if xn == x or abs(xn - x) <= 1e-17 * abs(x):
            x = xn
            break
        x = xn
    return x


def main():
    warnings.simplefilter("ignore")
    rows = []
    # Abramowitz & Stegun Table 26.1 points and a sweep.
    for x in [-8.0, -7.5, -6.0, -5.0, -4.0, -3.0, -2.5, -2.0, -1.5, -1.0,
              -0.5, -1e-3, 0.0, 1e-3, 0.25, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0,
              5.0, 6.0, 8.0]:
        rows.append(("ndtr", [x], sp.ndtr(x)))
    for p in [1e-300, 1e-200, 1e-100, 1e-50, 1e-20, 1e-15, 1e-12, 1e-11,
              1e-10, 1e-7, 1e-5, 1e-3, 0.01, 0.025, 0.05, 0.0749, 0.0751,
              0.1, 0.2, 0.3, 0.4, 0.5, 0.5 + 1e-12, 0.6, 0.7, 0.8, 0.9,
              0.925, 0.95, 0.975, 0.99, 0.999, 1 - 1e-5, 1 - 1e-7, 1 - 1e-10,
              1 - 1e-12, 1 - 1e-15, 1 - 1e-16]:
        rows.append(("ndtri", [p], sp.ndtri(p)))
    # The Pf of EN 1990 Annex C, Table C1 (1e-1 .. 1e-7).
    for pf in [1e-1, 1e-2, 1e-4, 1e-6]:
        rows.append(("ndtri", [pf], sp.ndtri(pf)))

    gam = lambda a: (lambda x: sp.gammainc(a, x))
    gpdf = lambda a: (lambda x: stats.gamma.pdf(x, a))
    for a in [0.01, 0.1, 0.5, 1.0, 2.5, 10.0, 30.0, 100.0, 1000.0]:
        for r in [1e-3, 0.1, 0.5, 0.9, 1.0, 1.1, 2.0, 5.0]:
            x = a * r
            rows.append(("gammainc", [a, x], sp.gammainc(a, x)))
            rows.append(("gammaincc", [a, x], sp.gammaincc(a, x)))
        for p in [1e-10, 1e-3, 0.1, 0.5, 0.9, 0.999]:
            x = polish(gam(a), gpdf(a), sp.gammaincinv(a, p), p, lo=0.0)
            rows.append(("gammaincinv", [a, p], x))
            x = polish(lambda x: sp.gammaincc(a, x), gpdf(a),
                       sp.gammainccinv(a, p), p, lo=0.0, decreasing=True)
            rows.append(("gammainccinv", [a, p], x))

    # Large integer shapes, x = a + k sqrt(a): exact Poisson sums (scipy's
    # gammainc is off by 2e-10 at a = 1e6, k = -10, and by 3e-7 further
    # out).
    for a in [10**4, 10**5, 10**6]:
        for k in [-10.0, -3.0, -0.5, 0.5, 3.0, 10.0]:
            x = a + k * math.sqrt(a)
            rows.append(("gammainc_exact", [a, x], poisson_upper(a, x)))
            rows.append(("gammaincc_exact", [a, x], poisson_lower(a, x)))

    # Binomial-interval parameters (k, n-k+1): exact binomial sums (scipy's
    # betainc forms lgamma differences once a + b > 171).
    for k, b in [(1, 10**8), (3, 10**6), (25, 10**7), (1000, 10**6),
                 (2500, 10**6)]:
        m = k / (k + b)
        for r in [0.2, 0.6, 1.0, 1.4, 1.8, 2.2, 2.6]:
            x = m * r
            upper, lower = binom_tails(k, b, x)
            rows.append(("betainc_exact", [k, b, x], upper))
            rows.append(("betaincc_exact", [k, b, x], lower))

    for a, b in [(0.5, 0.5), (0.1, 3.0), (1.0, 1.0), (2.0, 5.0), (5.0, 2.0),
                 (10.0, 10.0), (50.0, 0.5), (0.5, 50.0), (3.0, 100.0),
                 (60.0, 100.0)]:
        for r in [1e-3, 0.1, 0.5, 0.9, 1.0, 1.5, 3.0]:
            x = min(a / (a + b) * r, 0.999)
            rows.append(("betainc", [a, b, x], sp.betainc(a, b, x)))
        # Up to 0.975 only: the polish works on I itself, whose rounding
        # would dominate the complement further up.
        for p in [1e-10, 0.025, 0.3, 0.5, 0.7, 0.975]:
            x = polish(lambda x: sp.betainc(a, b, x),
                       lambda x: stats.beta.pdf(x, a, b),
                       sp.betaincinv(a, b, p), p, lo=0.0, hi=1.0)
            rows.append(("betaincinv", [a, b, p], x))

    for nu in [1.0, 2.0, 3.0, 4.0, 5.0, 9.0, 10.0, 19.0, 30.0, 100.0,
               1000.0, 1e5]:
        for t in [-50.0, -5.0, -2.0, -1.0, -1e-3, 0.5, 2.0, 3.0, 10.0]:
            rows.append(("stdtr", [nu, t], sp.stdtr(nu, t)))
        for p in [1e-10, 1e-4, 0.001, 0.005, 0.025, 0.05, 0.1, 0.3, 0.6, 0.9,
                  0.95, 0.975, 0.995, 0.999]:
            t = polish(lambda t: sp.stdtr(nu, t),
                       lambda t: stats.t.pdf(t, nu), sp.stdtrit(nu, p), p)
            rows.append(("stdtrit", [nu, p], t))

    for name, args, v in rows:
        print(name, " ".join(fmt(a) for a in args), fmt(v))


if __name__ == "__main__":
    main()
