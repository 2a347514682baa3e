#!/usr/bin/python3
"""Reference table for tests/test_dist.c: pdf, cdf, sf, ppf, moments and
native parameters of every distribution kind, computed with scipy.stats
(Debian python3-scipy). One case per line:

    KIND NPARAMS NAME VALUE ... OP X EXPECTED

KIND and NAME are written as in study files; OP is pdf, cdf, sf or ppf (X is
the argument), from_u (X is a standard normal u, EXPECTED the variable),
mean, sd, median (X unused) or p0, p1, ... for the native parameters of
dist.c (X unused). Moment-form parameters are converted with the formulas of
REFERENCES.md, or, for the Weibull and Frechet shapes, solved numerically
with scipy.optimize.brentq on scipy's own moments, so the conversion in
dist.c is checked against an independent solver."""
import math
import warnings

import numpy as np
from scipy import integrate, optimize, stats

EULER = 0.57721566490153286061

PROBS = [1e-10, 1e-4, 0.01, 0.1, 0.3, 0.5, 0.7, 0.9, 0.99, 0.9999]
UPPER_TAIL = [1e-4, 1e-10]  # sf evaluated at isf(q)
US = [-8.0, -3.0, -0.5, 0.0, 1.0, 4.0, 8.0]


def weibull_shape(cov):
    f = lambda c: stats.weibull_min(c).std() / stats.weibull_min(c).mean() - cov
    return optimize.brentq(f, 0.05, 500.0, xtol=1e-15, rtol=1e-15)


def frechet_shape(cov):
    f = lambda c: stats.invweibull(c).std() / stats.invweibull(c).mean() - cov
    return optimize.brentq(f, 2.0 + 1e-9, 500.0, xtol=1e-15, rtol=1e-15)


def cases():
    out = []

    def add(kind, params, frozen, native=(), support=None):
        out.append((kind, params, frozen, native, support))

    add("normal", [("mean", 10.0), ("sd", 2.0)], stats.norm(10.0, 2.0),
        [10.0, 2.0])
    add("normal", [("mean", -5.0), ("cov", 0.2)], stats.norm(-5.0, 1.0),
        [-5.0, 1.0])
    # Lognormal by moments: sigma^2 = ln(1 + cov^2), mu = ln(mean) - sigma^2/2.
    s2 = math.log1p(0.07 ** 2)
    mu = math.log(380.0) - s2 / 2
    add("lognormal", [("mean", 380.0), ("cov", 0.07)],
        stats.lognorm(math.sqrt(s2), scale=math.exp(mu)), [mu, math.sqrt(s2)])
    add("lognormal", [("mu", 1.0), ("sigma", 0.5)],
        stats.lognorm(0.5, scale=math.exp(1.0)), [1.0, 0.5])
    # Gumbel: scale = sd sqrt(6)/pi, location = mean - 0.5772156649 scale.
    sd = 1.1 * 0.3
    sc = sd * math.sqrt(6) / math.pi
    add("gumbel", [("mean", 1.1), ("cov", 0.3)],
        stats.gumbel_r(1.1 - EULER * sc, sc), [1.1 - EULER * sc, sc])
    add("gumbel", [("location", 2.0), ("scale", 0.5)],
        stats.gumbel_r(2.0, 0.5), [2.0, 0.5])
    sc = 3.0 * math.sqrt(6) / math.pi
    add("gumbel-min", [("mean", 30.0), ("sd", 3.0)],
        stats.gumbel_l(30.0 + EULER * sc, sc), [30.0 + EULER * sc, sc])
    add("gumbel-min", [("location", 5.0), ("scale", 2.0)],
        stats.gumbel_l(5.0, 2.0), [5.0, 2.0])
    add("weibull", [("shape", 2.5), ("scale", 3.0)],
        stats.weibull_min(2.5, scale=3.0), [2.5, 3.0, 0.0])
    add("weibull", [("shape", 0.8), ("scale", 1.0), ("location", 2.0)],
        stats.weibull_min(0.8, loc=2.0, scale=1.0), [0.8, 1.0, 2.0])
    k = weibull_shape(0.2)
    lam = 10.0 / math.gamma(1 + 1 / k)
    add("weibull", [("mean", 10.0), ("cov", 0.2)],
        stats.weibull_min(k, scale=lam), [k, lam, 0.0])
    k = weibull_shape(1.5 / (8.0 - 3.0))
    lam = (8.0 - 3.0) / math.gamma(1 + 1 / k)
    add("weibull", [("mean", 8.0), ("sd", 1.5), ("location", 3.0)],
        stats.weibull_min(k, loc=3.0, scale=lam), [k, lam, 3.0])
    add("frechet", [("shape", 4.0), ("scale", 2.0)],
        stats.invweibull(4.0, scale=2.0), [4.0, 2.0, 0.0])
    add("frechet", [("shape", 5.0), ("scale", 1.0), ("location", 1.0)],
        stats.invweibull(5.0, loc=1.0, scale=1.0), [5.0, 1.0, 1.0])
    k = frechet_shape(0.25)
    s = 50.0 / math.gamma(1 - 1 / k)
    add("frechet", [("mean", 50.0), ("cov", 0.25)],
        stats.invweibull(k, scale=s), [k, s, 0.0])
    add("gamma", [("shape", 3.0), ("scale", 2.0)],
        stats.gamma(3.0, scale=2.0), [3.0, 2.0])
    add("gamma", [("shape", 0.5), ("rate", 4.0)],
        stats.gamma(0.5, scale=0.25), [0.5, 0.25])
    add("gamma", [("mean", 5.0), ("cov", 0.5)],
        stats.gamma(4.0, scale=1.25), [4.0, 1.25])
    add("gamma", [("shape", 50.0), ("scale", 0.1)],
        stats.gamma(50.0, scale=0.1), [50.0, 0.1])
    add("exponential", [("rate", 2.0)], stats.expon(scale=0.5), [2.0, 0.0])
    add("exponential", [("rate", 0.5), ("location", 1.0)],
        stats.expon(1.0, 2.0), [0.5, 1.0])
    add("exponential", [("mean", 4.0)], stats.expon(scale=4.0), [0.25, 0.0])
    add("exponential", [("mean", 10.0), ("sd", 3.0)],
        stats.expon(7.0, 3.0), [1 / 3.0, 7.0])
    add("uniform", [("lower", -1.0), ("upper", 3.0)],
        stats.uniform(-1.0, 4.0), [-1.0, 3.0])
    h = math.sqrt(3.0)
    add("uniform", [("mean", 5.0), ("sd", 1.0)],
        stats.uniform(5.0 - h, 2 * h), [5.0 - h, 5.0 + h])
    add("triangular", [("lower", 1.0), ("mode", 2.0), ("upper", 5.0)],
        stats.triang(0.25, loc=1.0, scale=4.0), [1.0, 2.0, 5.0])
    add("triangular", [("lower", 0.0), ("mode", 0.0), ("upper", 1.0)],
        stats.triang(0.0, loc=0.0, scale=1.0), [0.0, 0.0, 1.0])
    add("beta", [("alpha", 2.0), ("beta", 5.0)], stats.beta(2.0, 5.0),
        [2.0, 5.0, 0.0, 1.0])
    add("beta", [("alpha", 0.5), ("beta", 0.5)], stats.beta(0.5, 0.5),
        [0.5, 0.5, 0.0, 1.0])
    add("beta", [("alpha", 3.0), ("beta", 2.0), ("lower", 10.0),
                 ("upper", 20.0)],
        stats.beta(3.0, 2.0, loc=10.0, scale=10.0), [3.0, 2.0, 10.0, 20.0])
    # Beta by moments on [l, u]: m = (mean-l)/w, v = (sd/w)^2,
    # alpha + beta = m(1-m)/v - 1.
    for mean, sd, lo, hi in [(0.3, 0.1, 0.0, 1.0), (15.0, 2.0, 10.0, 20.0)]:
        w = hi - lo
        m, v = (mean - lo) / w, (sd / w) ** 2
        nu = m * (1 - m) / v - 1
        params = [("mean", mean), ("sd", sd)]
        if lo != 0.0 or hi != 1.0:
            params += [("lower", lo), ("upper", hi)]
        add("beta", params, stats.beta(m * nu, (1 - m) * nu, loc=lo, scale=w),
            [m * nu, (1 - m) * nu, lo, hi])
    for mu, sig, lo, hi in [(0.0, 1.0, -1.0, 2.0), (10.0, 2.0, 12.0, None),
                            (5.0, 1.0, None, 4.5), (0.0, 1.0, 5.0, None),
                            (0.0, 1.0, -10.0, -8.0), (3.0, 0.5, 2.0, 3.5),
                            (0.0, 1.0, 3.0, 4.0)]:
        params = [("mu", mu), ("sigma", sig)]
        a = -np.inf if lo is None else (lo - mu) / sig
        b = np.inf if hi is None else (hi - mu) / sig
        if lo is not None:
            params.append(("lower", lo))
        if hi is not None:
            params.append(("upper", hi))
        add("truncated-normal", params, stats.truncnorm(a, b, mu, sig))
    return out


def fmt(v):
    return repr(float(v))


def refine(fz, x, prob, upper):
    """Newton steps on log cdf (or log sf when `upper`) from scipy's own
    quantile x. scipy computes many isf as ppf(1 - q), which loses the upper
    tail, and truncnorm.ppf is only good to about 1e-7 in the tails; its cdf
    and sf are accurate, so the steps on them give the reference."""
    lp = math.log(prob)
    for _ in range(60):
        f = fz.pdf(x)
        if not (f > 0) or not np.isfinite(x):
            break
        if upper:
            ls = fz.logsf(x)
            dx = (ls - lp) / (f / math.exp(ls))
        else:
            lc = fz.logcdf(x)
            dx = (lp - lc) / (f / math.exp(lc))
        x = x + dx
        if abs(dx) <= 1e-16 * abs(x):
            break
    return x


def moments(kind, fz):
    """Mean and sd; for truncnorm by quadrature, since scipy's closed form
    loses digits for intervals deep in a tail."""
    if kind != "truncated-normal":
        return fz.mean(), fz.std()
    lo, hi = fz.support()
    q = lambda g: integrate.quad(g, lo, hi, epsabs=0, epsrel=1e-13,
                                 limit=200)[0]
    n = q(fz.pdf)
    m = q(lambda x: x * fz.pdf(x)) / n
    v = q(lambda x: (x - m) ** 2 * fz.pdf(x)) / n
    return m, math.sqrt(v)


# Kinds whose finite bounds are computed differently by scipy (loc + scale)
# and by dist.c, or where F near a finite bound is a difference of two normal
# probabilities: near such a bound tail values are ill-conditioned, so the
# table keeps away from it there (tests/test_dist.c covers those tails with
# exact formulas and round trips).
BOUNDED = {"uniform", "triangular", "beta", "truncated-normal"}


def main():
    warnings.simplefilter("ignore")
    np.seterr(all="ignore")
    for kind, params, fz, native, _ in cases():
        head = f"{kind} {len(params)} " + " ".join(
            f"{n} {fmt(v)}" for n, v in params)
        lo, hi = fz.support()
        lo_ok = kind not in BOUNDED or not np.isfinite(lo)
        hi_ok = kind not in BOUNDED or not np.isfinite(hi)
        lines = []
        for p in PROBS:
            if (p < 0.01 and not lo_ok) or (p > 0.99 and not hi_ok):
                continue
            x = fz.ppf(p)
            if kind == "truncated-normal":
                x = refine(fz, x, 1 - p, True) if p > 0.5 else refine(
                    fz, x, p, False)
            lines.append(("ppf", p, x))
            lines.append(("cdf", x, fz.cdf(x)))
            lines.append(("sf", x, fz.sf(x)))
            lines.append(("pdf", x, fz.pdf(x)))
        if hi_ok:
            for q in UPPER_TAIL:
                x = refine(fz, fz.isf(q), q, True)
                lines.append(("sf", x, fz.sf(x)))
        for u in US:
            if (u < -3 and not lo_ok) or (u > 3 and not hi_ok):
                continue
            if u <= 0:
                p = stats.norm.cdf(u)
                x = refine(fz, fz.ppf(p), p, False)
            else:
                q = stats.norm.sf(u)
                x = refine(fz, fz.isf(q), q, True)
            lines.append(("from_u", u, x))
        mean, sd = moments(kind, fz)
        lines.append(("mean", 0.0, mean))
        lines.append(("sd", 0.0, sd))
        lines.append(("median", 0.0, fz.median()))
        for i, v in enumerate(native):
            lines.append((f"p{i}", 0.0, v))
        for op, x, v in lines:
            if not np.isfinite(x) or not np.isfinite(v):
                continue
            print(f"{head} {op} {fmt(x)} {fmt(v)}")


if __name__ == "__main__":
    main()
