#!/usr/bin/python3
"""Failure probabilities of the benchmark problems of the coverage suite
(tests/helpers/problems.h, tests/test_coverage.c), computed here with scipy
and numpy (Debian's python3-scipy, python3-numpy), independently of brink:

  series4 K P     four-branch series system in two standard normals
                  (Waarts 2000, PhD thesis, TU Delft; also Echard, Gayton &
                  Lemaire 2011, Structural Safety 33:145-154, example 1):
                  g = min(3 + 0.1 (a-b)^2 - (a+b)/sqrt2,
                          3 + 0.1 (a-b)^2 + (a+b)/sqrt2,
                          (a-b) + K/sqrt2, (b-a) + K/sqrt2).
                  Published values (from memory): 4.4e-3 (K=6), 2.2e-3 (K=7).
  serieslin B P   four linear branches, two nearest at distance B, the other
                  two at B + 0.5: g = min(B - (a+b)/sqrt2, B + (a+b)/sqrt2,
                  B + 0.5 - (a-b)/sqrt2, B + 0.5 + (a-b)/sqrt2).
  parabola B P    g = B - b - 0.5 a^2: two symmetric design points at
                  distance sqrt(2B - 1) for B > 1 (a strongly curved limit
                  state; after Der Kiureghian & Dakessian 1998, Structural
                  Safety 20:37-49, with the offset e = 0).
  rastrigin C P   g = C - sum_{i=1,2} (u_i^2 - 5 cos(2 pi u_i)): g(0) = C + 10
                  > 0 and many small scattered failure regions (a modified
                  Rastrigin function; Echard et al. 2011, example 3, C = 10,
                  Pf 7.3e-2 from memory).
  linear N BETA P g = BETA sqrt(N) - sum u_i over N standard normals: Pf =
                  Phi(-BETA) exactly (Cornell 1969).
  lognsum N C P   g = C - sum_{i=1..N} X_i, X_i iid lognormal exp(0.2 Z):
                  the density of the sum by FFT convolution of the cell
                  masses of X (grid step H; the step halved changes Pf by
                  about 1e-4 relative, and a tilted Monte Carlo of 2e6
                  samples agreed within 0.3%).
  corr MU P       g = R - S, R lognormal (mean MU, cov 0.15), S Gumbel
                  (largest; mean 1, cov 0.3), physical correlation 0.3
                  (Nataf): the normal-space correlation solved from the
                  Liu & Der Kiureghian (1986) integral on a 600x600
                  Gauss-Legendre grid, then Pf as a one-dimensional
                  integral over the normal of S.
  oscillator MUF SDF P  the nonlinear single-degree-of-freedom oscillator
                  under a rectangular pulse (Schueremans & Van Gemert 2005;
                  Echard, Gayton & Lemaire 2011, example 2; from memory):
                  g = 3 r - |2 F1 / (m w0^2) sin(w0 t1 / 2)|,
                  w0 = sqrt((c1 + c2) / m), independent normals m (1, 0.05),
                  c1 (1, 0.1), c2 (0.1, 0.01), r (0.5, 0.05), F1 (MUF, SDF),
                  t1 (1, 0.2). g is linear in F1 and r for the others fixed,
                  so Pf is a 4-dimensional Gauss-Hermite integral (20 nodes
                  a dimension; 30 change it by 2e-9 relative) of two normal
                  cdfs. Published (from memory): 2.86e-2 for F1 (1, 0.2) and
                  9.09e-6 for F1 (0.6, 0.1); a numpy Monte Carlo of 4e6
                  samples (seed 12345) gave 2.8621e-2 +- 8.3e-5 against
                  2.8596e-2 here.
  lnratio MR P    g = R - S, R lognormal (mean MR, cov 0.15), S lognormal
                  (mean 1, cov 0.25): Pf = Phi(-beta) in closed form
                  (Rosenblueth & Esteva 1972), beta = ln((MR/1)
                  sqrt((1 + 0.25^2)/(1 + 0.15^2))) / sqrt(ln((1 + 0.15^2)
                  (1 + 0.25^2))).
Two-dimensional problems are integrated in polar coordinates: along each
ray the failing intervals of the radius are found (grid and Brent), and
the chi(2) tail mass exp(-r^2/2) of each is integrated over the angle.
"""
import math
import warnings

import numpy as np
from scipy import integrate, optimize, stats

R2 = math.sqrt(2.0)


def ray_fail_prob(g, th, rmax=14.0, ngrid=1401):
    c, s = math.cos(th), math.sin(th)
    rs = np.linspace(0.0, rmax, ngrid)
    fails = g(rs * c, rs * s) <= 0

    def f(r):
        return float(g(np.array([r * c]), np.array([r * s]))[0])

    edges = [optimize.brentq(f, rs[j], rs[j + 1], xtol=1e-15, rtol=1e-15)
             for j in np.nonzero(fails[1:] != fails[:-1])[0]]
    pts = [0.0] + edges + [math.inf]
    p = 0.0
    for k, (a, b) in enumerate(zip(pts[:-1], pts[1:])):
        if fails[0] if k % 2 == 0 else not fails[0]:
            p += math.exp(-a * a / 2) - (0.0 if b == math.inf else math.exp(-b * b / 2))
    return p


def polar_pf(g):
    val, _ = integrate.quad(lambda th: ray_fail_prob(g, th), 0, 2 * math.pi,
                            limit=400, epsabs=0, epsrel=1e-9)
    return val / (2 * math.pi)


def series4(k):
    return lambda a, b: np.minimum.reduce([
        3 + 0.1 * (a - b) ** 2 - (a + b) / R2, 3 + 0.1 * (a - b) ** 2 + (a + b) / R2,
        (a - b) + k / R2, (b - a) + k / R2])


def serieslin(d):
    return lambda a, b: np.minimum.reduce([
        d - (a + b) / R2, d + (a + b) / R2, d + 0.5 - (a - b) / R2, d + 0.5 + (a - b) / R2])


def parabola_pf(b):
    v, _ = integrate.quad(lambda a: stats.norm.pdf(a) * stats.norm.sf(b - 0.5 * a * a),
                          -np.inf, np.inf, epsabs=0, epsrel=1e-12, limit=200)
    return v


def rastrigin_pf(c):
    # Separable: Pf = integral of phi(a) P(h(b) >= c - h(a)) da with
    # h(u) = u^2 - 5 cos(2 pi u), even in u.
    def h(u):
        return u * u - 5 * np.cos(2 * np.pi * u)
    grid = np.linspace(0.0, 12.0, 12001)
    hv = h(grid)

    def tail(t):  # P(h(U) >= t)
        above = hv >= t
        p = 0.0
        edges = [optimize.brentq(lambda u: h(u) - t, grid[j], grid[j + 1],
                                 xtol=1e-15, rtol=1e-15)
                 for j in np.nonzero(above[1:] != above[:-1])[0]]
        pts = [0.0] + edges + [math.inf]
        for k, (a, b) in enumerate(zip(pts[:-1], pts[1:])):
            if above[0] if k % 2 == 0 else not above[0]:
                p += 2 * (stats.norm.sf(a) - stats.norm.sf(b))
        return p
    pts = [i * 0.5 for i in range(1, 24)]
    v = 0.0
    # The integrand has kinks where c - h(u) passes an extremum of h; quad
    # reports roundoff there, yet the value agrees with the polar method
    # (integrate_polar on the same g) to 1e-8 relative.
    warnings.simplefilter("ignore", integrate.IntegrationWarning)
    for a, b in zip([0.0] + pts, pts + [12.0]):
        v += integrate.quad(lambda u: stats.norm.pdf(u) * tail(c - h(u)), a, b,
                            epsabs=0, epsrel=1e-8, limit=200)[0]
    return 2 * v


def lognsum_pf(n, c, h, sigma=0.2):
    xmax = math.exp(sigma * 9)
    m = int(math.ceil(xmax / h))
    p = np.diff(stats.lognorm.cdf(np.arange(m + 1) * h, s=sigma))
    size = 1
    while size < n * m + 1:
        size *= 2
    dens = np.fft.irfft(np.fft.rfft(p, size) ** n, size)[:n * m + 1]
    centres = (np.arange(len(dens)) + 0.5 * n) * h
    return float(dens[centres > c].sum())


def gumbel_from_moments(mean, cov):
    scale = mean * cov * math.sqrt(6) / math.pi
    return stats.gumbel_r(loc=mean - 0.5772156649015329 * scale, scale=scale)


def lognorm_from_moments(mean, cov):
    s2 = math.log(1 + cov * cov)
    return stats.lognorm(s=math.sqrt(s2), scale=mean * math.exp(-s2 / 2))


def standardised(d, z):
    if d.dist.name == 'lognorm':
        x = d.kwds['scale'] * np.exp(d.kwds['s'] * z)
    else:
        x = np.where(z > 0, d.isf(stats.norm.sf(z)), d.ppf(stats.norm.cdf(z)))
    return (x - d.mean()) / d.std()


def nataf_rho0(d1, d2, rho, npts=600):
    x, w = np.polynomial.legendre.leggauss(npts)
    x, w = 10 * x, 10 * w
    a, b = standardised(d1, x) * w, standardised(d2, x) * w
    z1, z2 = np.meshgrid(x, x, indexing='ij')

    def corr(r0):
        c = math.sqrt(1 - r0 * r0)
        dens = np.exp(-(z1 * z1 - 2 * r0 * z1 * z2 + z2 * z2) / (2 * c * c)) / (2 * math.pi * c)
        return float(np.einsum('i,j,ij->', a, b, dens))
    return optimize.brentq(lambda r0: corr(r0) - rho, 0.0, 0.99, xtol=1e-14)


def corr_pf(mu, rho=0.3):
    r, s = lognorm_from_moments(mu, 0.15), gumbel_from_moments(1.0, 0.3)
    r0 = nataf_rho0(r, s, rho)
    c = math.sqrt(1 - r0 * r0)

    def f(z2):
        x = s.isf(stats.norm.sf(z2)) if z2 > 0 else s.ppf(stats.norm.cdf(z2))
        z1 = stats.norm.isf(r.sf(x)) if r.sf(x) < 0.5 else stats.norm.ppf(r.cdf(x))
        return stats.norm.pdf(z2) * stats.norm.cdf((z1 - r0 * z2) / c)
    return integrate.quad(f, -10, 12, epsabs=0, epsrel=1e-11, limit=400,
                          points=[0, 2, 4, 6])[0]


def oscillator_pf(muf, sdf, n=20):
    x, w = np.polynomial.hermite_e.hermegauss(n)
    w = w / w.sum()
    m, c1, c2, t1 = np.meshgrid(1 + 0.05 * x, 1 + 0.1 * x, 0.1 + 0.01 * x,
                                1 + 0.2 * x, indexing='ij')
    wt = np.einsum('i,j,k,l->ijkl', w, w, w, w)
    w0 = np.sqrt((c1 + c2) / m)
    a = np.abs(2 / (m * w0 ** 2) * np.sin(w0 * t1 / 2))
    # P(3 r <= |a F1|) = P(a F1 - 3 r >= 0) + P(a F1 + 3 r <= 0), disjoint
    # for r > 0 (P(r <= 0) = Phi(-10)).
    sd = np.sqrt(a * a * sdf * sdf + 9 * 0.05 ** 2)
    p = stats.norm.cdf((a * muf - 1.5) / sd) + stats.norm.cdf((-a * muf - 1.5) / sd)
    return float((wt * p).sum())


def lnratio_pf(mr, cr=0.15, cs=0.25):
    beta = math.log(mr * math.sqrt((1 + cs * cs) / (1 + cr * cr))) / \
        math.sqrt(math.log((1 + cr * cr) * (1 + cs * cs)))
    return stats.norm.sf(beta)


for k in (6, 7):
    print("series4 %r %r" % (k, polar_pf(series4(k))))
for d in (3.0, 4.5):
    print("serieslin %r %r" % (d, polar_pf(serieslin(d))))
for b in (5.0, 7.0, 9.0):
    print("parabola %r %r" % (b, parabola_pf(b)))
for c in (10.0, 14.0, 18.0):
    print("rastrigin %r %r" % (c, rastrigin_pf(c)))
for n in (2, 100, 1000):
    for beta in (2.33, 3.09, 4.27, 4.75, 5.2, 6.0):
        print("linear %d %r %r" % (n, beta, stats.norm.sf(beta)))
for n, c, h in ((100, 110.0, 5e-4), (100, 112.0, 5e-4), (1000, 1050.0, 1e-3)):
    print("lognsum %d %r %r" % (n, c, lognsum_pf(n, c, h)))
for mu in (2.0, 3.0, 4.0):
    print("corr %r %r" % (mu, corr_pf(mu)))
for muf, sdf in ((1.0, 0.2), (0.6, 0.1)):
    print("oscillator %r %r %r" % (muf, sdf, oscillator_pf(muf, sdf)))
for mr in (2.0, 3.0, 4.0):
    print("lnratio %r %r" % (mr, lnratio_pf(mr)))
