#!/usr/bin/python3
"""Reference Gaussian-process fits for tests/test_gp.c, run by the test with
Debian's /usr/bin/python3 (scikit-learn 1.2, numpy, scipy). Not a committed
table: maximum-likelihood optima come from an optimiser whose last digits
may move with the BLAS kernel of the machine, so the test computes them
afresh and compares with tolerances.

Output, one record per line (numbers with repr):
  case NAME KERNEL TREND N D M      a fit with fixed hyperparameters
  param SIGMA2 NUGGET               process variance, nugget / sigma2
  lengths L1 .. LD
  x U1 .. UD Y                      N training points
  t U1 .. UD MEAN VAR               M test points: predictive mean, variance
  loglik VALUE
  beta B1 .. BP                     (not for trend 'zero')
  loo RESID VAR                     N lines: leave-one-out by refitting
  end
  mle NAME KERNEL N D NOISE         a maximum-likelihood fit, trend 'zero'
  truth L1 .. LD                    lengths of the process that made y
  x U1 .. UD Y                      N points
  fit L1 .. LD SIGMA2 NOISE LOGLIK  the optimum (NOISE: noise variance)
  end

Sources:
 - 'sk-*' cases: sklearn.gaussian_process.GaussianProcessRegressor with
   kernel ConstantKernel(sigma2) * Matern(lengths, nu=2.5) (or RBF),
   alpha = sigma2 * nugget, optimizer=None, normalize_y=False: simple
   Kriging with a known zero mean. predict(return_std=True) gives the
   latent mean and std; log_marginal_likelihood_value_ the likelihood;
   leave-one-out by refitting sklearn without each point (the variance of
   the residual is the predictive variance plus the noise alpha).
 - 'np-*' cases: ordinary and universal Kriging written out in numpy from
   the textbook formulas (generalised least squares for beta, sigma2 =
   r^T C^-1 r / n, predictor mean and variance with the beta term, profile
   log-likelihood), the correlation matrix from sklearn's Matern/RBF kernel
   objects; leave-one-out by refitting without each point with the same
   lengths, nugget and sigma2 (beta re-estimated).
 - 'mle' records: sklearn's log_marginal_likelihood maximised by
   scipy.optimize.minimize (L-BFGS-B, tight tolerances) from the true
   lengths, over log(sigma2), log(lengths) and, with NOISE, the log noise
   variance of a WhiteKernel.
"""
import numpy as np
import scipy.linalg as sla
import scipy.optimize as sop
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import (RBF, ConstantKernel, Matern,
                                              WhiteKernel)


def corr(kernel, lengths):
    if kernel == "matern":
        return Matern(length_scale=lengths, length_scale_bounds="fixed", nu=2.5)
    return RBF(length_scale=lengths, length_scale_bounds="fixed")


def fmt(*xs):
    return " ".join(repr(float(x)) for x in xs)


def trend_matrix(trend, X):
    if trend == "constant":
        return np.ones((X.shape[0], 1))
    return np.hstack([np.ones((X.shape[0], 1)), X])


def sk_case(name, kernel, X, y, T, sigma2, nugget, lengths):
    def model(Xa, ya):
        k = ConstantKernel(sigma2, constant_value_bounds="fixed") * corr(kernel, lengths)
        return GaussianProcessRegressor(kernel=k, alpha=sigma2 * nugget,
                                        optimizer=None,
                                        normalize_y=False).fit(Xa, ya)

    n, d = X.shape
    print("case", name, kernel, "zero", n, d, T.shape[0])
    print("param", fmt(sigma2, nugget))
    print("lengths", fmt(*lengths))
    for xi, yi in zip(X, y):
        print("x", fmt(*xi, yi))
    gp = model(X, y)
    mean, std = gp.predict(T, return_std=True)
    for ti, mi, si in zip(T, mean, std):
        print("t", fmt(*ti, mi, si * si))
    print("loglik", fmt(gp.log_marginal_likelihood_value_))
    for i in range(n):
        keep = np.arange(n) != i
        mi, si = model(X[keep], y[keep]).predict(X[i:i + 1], return_std=True)
        print("loo", fmt(y[i] - mi[0], si[0] ** 2 + sigma2 * nugget))
    print("end")


def kriging(kernel, trend, X, y, lengths, nugget, sigma2=None):
    """Universal Kriging in the textbook form; returns a dict."""
    n = X.shape[0]
    R = corr(kernel, lengths)
    C = R(X) + nugget * np.eye(n)
    F = trend_matrix(trend, X)
    Ci = sla.cho_solve(sla.cho_factor(C, lower=True), np.eye(n))
    G = F.T @ Ci @ F
    beta = np.linalg.solve(G, F.T @ Ci @ y)
    r = y - F @ beta
    if sigma2 is None:
        sigma2 = r @ Ci @ r / n
    logdet = np.linalg.slogdet(C)[1]
    ll = -0.5 * (r @ Ci @ r / sigma2 + n * np.log(sigma2) + logdet
                 + n * np.log(2 * np.pi))
    return dict(R=R, Ci=Ci, G=G, beta=beta, r=r, sigma2=sigma2, ll=ll, F=F)


def kriging_predict(k, trend, X, T):
    kx = k["R"](X, T)                       # n x m
    fT = trend_matrix(trend, T)
    mean = fT @ k["beta"] + kx.T @ k["Ci"] @ k["r"]
    uu = k["F"].T @ k["Ci"] @ kx - fT.T     # p x m
    var = k["sigma2"] * (1 - np.einsum("im,ij,jm->m", kx, k["Ci"], kx)
                         + np.einsum("im,ij,jm->m", uu, np.linalg.inv(k["G"]), uu))
    return mean, var


def np_case(name, kernel, trend, X, y, T, nugget, lengths):
    n, d = X.shape
    k = kriging(kernel, trend, X, y, lengths, nugget)
    print("case", name, kernel, trend, n, d, T.shape[0])
    print("param", fmt(k["sigma2"], nugget))
    print("lengths", fmt(*lengths))
    for xi, yi in zip(X, y):
        print("x", fmt(*xi, yi))
    mean, var = kriging_predict(k, trend, X, T)
    for ti, mi, vi in zip(T, mean, var):
        print("t", fmt(*ti, mi, vi))
    print("loglik", fmt(k["ll"]))
    print("beta", fmt(*k["beta"]))
    for i in range(n):
        keep = np.arange(n) != i
        ki = kriging(kernel, trend, X[keep], y[keep], lengths, nugget,
                     sigma2=k["sigma2"])
        mi, vi = kriging_predict(ki, trend, X[keep], X[i:i + 1])
        print("loo", fmt(y[i] - mi[0], vi[0] + k["sigma2"] * nugget))
    print("end")


def gp_sample(rs, kernel, X, lengths, sigma2, noise):
    n = X.shape[0]
    K = sigma2 * corr(kernel, lengths)(X) + 1e-10 * sigma2 * np.eye(n)
    f = np.linalg.cholesky(K) @ rs.standard_normal(n)
    return f + np.sqrt(noise) * rs.standard_normal(n)


def mle(name, kernel, X, y, truth, noise):
    n, d = X.shape
    base = ConstantKernel(1.0, (1e-6, 1e6)) * (
        Matern(length_scale=np.ones(d), length_scale_bounds=(1e-3, 1e3), nu=2.5)
        if kernel == "matern" else
        RBF(length_scale=np.ones(d), length_scale_bounds=(1e-3, 1e3)))
    if noise:
        base = base + WhiteKernel(0.1, (1e-8, 1e2))

    def optimizer(obj_func, initial_theta, bounds):
        x0 = np.array(initial_theta)
        x0[1:1 + d] = np.log(truth)
        r = sop.minimize(obj_func, x0, jac=True, method="L-BFGS-B",
                         bounds=bounds,
                         options={"ftol": 1e-15, "gtol": 1e-10,
                                  "maxiter": 10000})
        return r.x, r.fun

    gp = GaussianProcessRegressor(kernel=base, alpha=1e-10,
                                  optimizer=optimizer,
                                  normalize_y=False).fit(X, y)
    th = np.exp(gp.kernel_.theta)
    print("mle", name, kernel, n, d, int(noise))
    print("truth", fmt(*truth))
    for xi, yi in zip(X, y):
        print("x", fmt(*xi, yi))
    nv = th[1 + d] if noise else 0.0
    print("fit", fmt(*th[1:1 + d], th[0], nv, gp.log_marginal_likelihood_value_))
    print("end")


def main():
    rs = np.random.RandomState(20240611)
    # Simple Kriging against scikit-learn.
    X = rs.standard_normal((40, 3))
    y = np.sin(X[:, 0]) + 0.5 * X[:, 1] ** 2 - 0.3 * X[:, 2]
    T = rs.standard_normal((12, 3)) * 1.2
    sk_case("sk-matern", "matern", X, y, T, 2.5, 1e-6, [0.8, 1.5, 3.0])
    X = rs.uniform(-3, 3, (30, 2))
    y = 3 - X[:, 0] ** 2 / 4 - X[:, 1]
    T = rs.uniform(-3.5, 3.5, (10, 2))
    sk_case("sk-sqexp", "sqexp", X, y, T, 4.0, 1e-5, [1.2, 2.0])
    # Ordinary and universal Kriging against the numpy formulas.
    X = rs.standard_normal((25, 2)) * 1.5
    y = np.exp(0.3 * X[:, 0]) - X[:, 1] + 2
    T = rs.standard_normal((10, 2)) * 2
    np_case("np-ok-matern", "matern", "constant", X, y, T, 1e-8, [1.1, 2.3])
    X = rs.standard_normal((40, 3))
    y = 4 + X[:, 0] - 2 * X[:, 1] + 0.5 * np.sin(2 * X[:, 2]) + 0.01 * rs.standard_normal(40)
    T = rs.standard_normal((10, 3)) * 1.5
    np_case("np-uk-matern", "matern", "linear", X, y, T, 1e-4, [0.9, 1.7, 0.6])
    np_case("np-uk-sqexp", "sqexp", "linear", X, y, T, 1e-4, [1.3, 2.1, 0.8])
    # Maximum likelihood on samples of known processes.
    X = rs.standard_normal((80, 2)) * 1.5
    y = gp_sample(rs, "matern", X, [0.7, 2.0], 2.0, 0.0)
    mle("mle-matern", "matern", X, y, [0.7, 2.0], False)
    X = rs.standard_normal((60, 3))
    y = gp_sample(rs, "sqexp", X, [1.0, 1.5, 2.5], 1.0, 0.0)
    mle("mle-sqexp", "sqexp", X, y, [1.0, 1.5, 2.5], False)
    X = rs.standard_normal((120, 2)) * 1.5
    y = gp_sample(rs, "matern", X, [1.0, 1.8], 1.5, 0.04)
    mle("mle-noise", "matern", X, y, [1.0, 1.8], True)


if __name__ == "__main__":
    main()
