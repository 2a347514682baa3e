#!/usr/bin/python3
"""Reference table for tests/test_transform.c: the Nataf (Gaussian copula)
correlation rho0 that gives a physical correlation rho between two marginals,
computed independently of brink with numpy and scipy.

For rho0 the physical correlation is
    rho = E[z_a(U_a) z_b(U_b)],  z = (F^-1(Phi(U)) - mean) / sd,
with (U_a, U_b) standard bivariate normal, correlation rho0 (Liu and Der
Kiureghian 1986). The expectation is a 160 x 160 product Gauss-Hermite rule
(numpy hermegauss) over scipy.stats quantiles, with the means and standard
deviations from scipy.stats; rho0 is solved with scipy.optimize.brentq. The
triangular quantile has a corner at the mode, where Gauss-Hermite converges
slowly (errors near 1e-5), so a marginal with a corner gets composite
Gauss-Legendre panels with an edge at the corner instead.

Lines:
  pair  KA a1 a2 a3 a4  KB b1 b2 b3 b4  rho  rho0
  range KA a1 a2 a3 a4  KB b1 b2 b3 b4  lo   hi
Parameters per kind (unused ones 0), as in study files:
  normal mean sd | lognormal mean sd | gumbel location scale |
  gumbel-min location scale | weibull scale shape | frechet scale shape |
  gamma shape scale | exponential rate | uniform lower upper |
  triangular lower mode upper | beta alpha beta |
  truncated-normal mu sigma lower upper
"""
import numpy as np
from numpy.polynomial.hermite_e import hermegauss
from scipy import optimize, stats

NODES = 160


def scipy_dist(kind, p):
    if kind == "normal":
        return stats.norm(p[0], p[1])
    if kind == "lognormal":
        s = np.sqrt(np.log1p((p[1] / p[0]) ** 2))
        return stats.lognorm(s, scale=p[0] / np.sqrt(1 + (p[1] / p[0]) ** 2))
    if kind == "gumbel":
        return stats.gumbel_r(p[0], p[1])
    if kind == "gumbel-min":
        return stats.gumbel_l(p[0], p[1])
    if kind == "weibull":
        return stats.weibull_min(p[1], scale=p[0])
    if kind == "frechet":
        return stats.invweibull(p[1], scale=p[0])
    if kind == "gamma":
        return stats.gamma(p[0], scale=p[1])
    if kind == "exponential":
        return stats.expon(scale=1 / p[0])
    if kind == "uniform":
        return stats.uniform(p[0], p[1] - p[0])
    if kind == "triangular":
        return stats.triang((p[1] - p[0]) / (p[2] - p[0]), p[0], p[2] - p[0])
    if kind == "beta":
        return stats.beta(p[0], p[1])
    if kind == "truncated-normal":
        a, b = (p[2] - p[0]) / p[1], (p[3] - p[0]) / p[1]
        return stats.truncnorm(a, b, p[0], p[1])
    raise ValueError(kind)


def quantile_of_u(kind, p):
    """x = F^-1(Phi(u)) without losing the upper tail: ppf(cdf(u)) below 0,
    isf(sf(u)) above. scipy's lognorm and weibull_min isf round to inf in the
    far tail, so those two go through norm.isf and expon.isf."""
    f = scipy_dist(kind, p)

    def fu(u):
        u = np.asarray(u, float)
        out = np.empty_like(u)
        lo = u < 0
        out[lo] = f.ppf(stats.norm.cdf(u[lo]))
        hi = ~lo
        if kind == "lognormal":
            out[hi] = f.ppf(0.5) * np.exp(f.args[0] * stats.norm.isf(stats.norm.sf(u[hi])))
        elif kind == "weibull":
            out[hi] = p[0] * stats.expon.isf(stats.norm.sf(u[hi])) ** (1 / p[1])
        else:
            out[hi] = f.isf(stats.norm.sf(u[hi]))
        return out

    return fu, f.mean(), f.std(), kink(kind, p)


Y, W = hermegauss(NODES)
W = W / W.sum()
GLX, GLW = np.polynomial.legendre.leggauss(20)


def kink(kind, p):
    """The u at which F^-1(Phi(u)) has a corner (the triangular mode)."""
    if kind == "triangular":
        return float(stats.norm.ppf((p[1] - p[0]) / (p[2] - p[0])))
    return None


def rule(breaks):
    """Nodes and weights for E[g(Y)], Y standard normal: Gauss-Hermite when
    g is smooth, else 20-point Gauss-Legendre on panels of width <= 0.5
    over [-12, 12] with edges at the corners of g."""
    breaks = sorted(b for b in breaks if b is not None and abs(b) < 12)
    if not breaks:
        return Y, W
    edges = [-12.0] + breaks + [12.0]
    ys = []
    hs = []
    for lo, hi in zip(edges[:-1], edges[1:]):
        n = max(1, int(np.ceil((hi - lo) / 0.5)))
        h = (hi - lo) / n
        mids = lo + (np.arange(n) + 0.5) * h
        ys.append((mids[:, None] + 0.5 * h * GLX[None, :]).ravel())
        hs.append(np.full(n * len(GLX), 0.5 * h))
    y = np.concatenate(ys)
    w = np.concatenate(hs) * np.tile(GLW, len(y) // len(GLW))
    return y, w * np.exp(-0.5 * y * y) / np.sqrt(2 * np.pi)


def physical_rho(A, B, r0):
    fa, ma, sa, ka = A
    fb, mb, sb, kb = B
    s = np.sqrt(max(0.0, (1 - r0) * (1 + r0)))
    if s == 0:
        y, w = rule([ka, None if kb is None else r0 * kb])
        return float(np.sum(w * (fa(y) - ma) / sa * (fb(r0 * y) - mb) / sb))
    if ka is None and kb is None:
        za = (fa(Y) - ma) / sa
        v = (r0 * Y[:, None] + s * Y[None, :]).ravel()
        zb = ((fb(v) - mb) / sb).reshape(NODES, NODES)
        return float(np.sum(W[:, None] * W[None, :] * za[:, None] * zb))
    y1, w1 = rule([ka])
    za = (fa(y1) - ma) / sa
    # All inner rules at once: one quantile call, then a sum per outer node.
    inner = [rule([None if kb is None else (kb - r0 * yi) / s]) for yi in y1]
    start = np.cumsum([0] + [len(y2) for y2, _ in inner[:-1]])
    v = np.concatenate([r0 * yi + s * y2 for yi, (y2, _) in zip(y1, inner)])
    w2 = np.concatenate([w for _, w in inner])
    sums = np.add.reduceat(w2 * (fb(v) - mb) / sb, start)
    return float(np.sum(w1 * za * sums))


def fmt_dist(kind, p):
    q = list(p) + [0] * (4 - len(p))
    return kind + " " + " ".join(repr(float(x)) for x in q)


CASES = [
    ("gumbel", [0, 1], "uniform", [0, 1], [0.5, -0.5, 0.9]),
    ("weibull", [1, 2], "gamma", [2.5, 1], [0.3, 0.8, -0.6]),
    ("exponential", [1], "exponential", [1], [0.5, -0.5, 0.9]),
    ("gumbel-min", [0, 1], "frechet", [1, 5], [0.4, -0.3]),
    ("uniform", [0, 1], "uniform", [0, 1], [0.7]),
    ("beta", [2, 3], "truncated-normal", [0, 1, -1, 2], [0.6, -0.4]),
    ("lognormal", [1, 0.5], "gumbel", [0, 1], [0.7, -0.5]),
    ("normal", [0, 1], "gumbel", [0, 1], [0.6]),
    ("gamma", [0.5, 1], "weibull", [1, 0.8], [0.5]),
    ("exponential", [2], "uniform", [-1, 1], [0.8]),
    ("triangular", [0, 0.3, 1], "uniform", [0, 1], [0.7]),
    ("gumbel", [0, 1], "triangular", [-1, 0.5, 2], [0.6]),
    ("triangular", [0, 0.3, 1], "triangular", [-1, 0.5, 2], [0.6, -0.5]),
]


def main():
    for ka, pa, kb, pb, rhos in CASES:
        A = quantile_of_u(ka, pa)
        B = quantile_of_u(kb, pb)
        head = fmt_dist(ka, pa) + "  " + fmt_dist(kb, pb)
        lo = physical_rho(A, B, -1.0)
        hi = physical_rho(A, B, 1.0)
        print("range " + head + "  %r %r" % (lo, hi))
        for rho in rhos:
            r0 = optimize.brentq(lambda r: physical_rho(A, B, r) - rho,
                                 -1, 1, xtol=1e-15)
            print("pair " + head + "  %r %r" % (float(rho), r0))


if __name__ == "__main__":
    main()
