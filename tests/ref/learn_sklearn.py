#!/usr/bin/python3
"""Reference batch selections for tests/test_learn.c, run by the test with
Debian's /usr/bin/python3 (scikit-learn 1.2, numpy).

Output, numbers with repr:
  kmeans NAME M D Q
  x U1 .. UD W                       M candidates and weights
  centroid C1 .. CD                  Q centroids at convergence
  label L1 .. LM                     cluster of each candidate
  pick I1 .. IQ                      per cluster, its weighted candidate
                                     nearest to the centroid
  end
  believer NAME N D M Q SIGMA2 NUGGET L1 .. LD
  x U1 .. UD Y                       N training points
  c U1 .. UD                         M candidates
  pick I1 .. IQ
  end

Sources:
 - kmeans: sklearn.cluster.KMeans(algorithm='lloyd', n_init=1, tol=0)
   with sample_weight, from the start the code documents (the heaviest
   candidate, then each next the largest weight times squared distance to
   the chosen ones), written again here in numpy.
 - believer: sklearn GaussianProcessRegressor with a fixed kernel
   ConstantKernel(SIGMA2) * Matern(L, nu=2.5), alpha = SIGMA2 * NUGGET
   (simple Kriging); the candidate of least U = |mean| / std is taken, added
   with its predicted mean as value, and the model refitted, Q times.
"""
import numpy as np
from scipy import stats
from sklearn.cluster import KMeans
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern


def fmt(xs):
    return " ".join(repr(float(x)) for x in xs)


def start(X, w, q):
    c = [int(np.argmax(w))]
    mind = ((X - X[c[0]]) ** 2).sum(1)
    for _ in range(1, q):
        i = int(np.argmax(w * mind))
        c.append(i)
        mind = np.minimum(mind, ((X - X[i]) ** 2).sum(1))
    return X[c].copy()


def kmeans(name, X, w, q):
    km = KMeans(n_clusters=q, init=start(X, w, q), n_init=1,
                algorithm="lloyd", tol=0, max_iter=1000)
    km.fit(X, sample_weight=w)
    C, lab = km.cluster_centers_, km.labels_
    pick = []
    for k in range(q):
        idx = np.where((lab == k) & (w > 0))[0]
        d2 = ((X[idx] - C[k]) ** 2).sum(1)
        pick.append(idx[int(np.argmin(d2))])
    print("kmeans", name, X.shape[0], X.shape[1], q)
    for xi, wi in zip(X, w):
        print("x", fmt(list(xi) + [wi]))
    for c in C:
        print("centroid", fmt(c))
    print("label", " ".join(str(int(l)) for l in lab))
    print("pick", " ".join(str(int(i)) for i in pick))
    print("end")


def believer(name, X, y, Cand, q, sigma2, nugget, lengths):
    def fit(Xa, ya):
        k = ConstantKernel(sigma2, "fixed") * Matern(lengths, "fixed", nu=2.5)
        return GaussianProcessRegressor(kernel=k, alpha=sigma2 * nugget,
                                        optimizer=None).fit(Xa, ya)

    Xa, ya, picks = X.copy(), y.copy(), []
    for _ in range(q):
        m, s = fit(Xa, ya).predict(Cand, return_std=True)
        u = np.abs(m) / s
        u[picks] = np.inf
        i = int(np.argmin(u))
        picks.append(i)
        Xa = np.vstack([Xa, Cand[i]])
        ya = np.append(ya, m[i])
    n, d = X.shape
    print("believer", name, n, d, Cand.shape[0], q, repr(sigma2),
          repr(nugget), fmt(lengths))
    for xi, yi in zip(X, y):
        print("x", fmt(list(xi) + [yi]))
    for c in Cand:
        print("c", fmt(c))
    print("pick", " ".join(str(i) for i in picks))
    print("end")


def main():
    rs = np.random.RandomState(314)
    # Candidates around the limit state 3 - u1 - 0.2 u2^2 = 0, weighted by
    # the margin probability of a surrogate with sd 0.5.
    X = rs.standard_normal((1500, 2)) * 1.3
    mu = 3 - X[:, 0] - 0.2 * X[:, 1] ** 2
    k = stats.norm.ppf(0.975)
    w = stats.norm.cdf(k - mu / 0.5) - stats.norm.cdf(-k - mu / 0.5)
    w[::97] = 0.0
    kmeans("margin-2d", X, w, 5)
    X = rs.standard_normal((800, 3))
    w = rs.uniform(0, 1, 800) ** 3
    kmeans("uniform-3d", X, w, 8)
    # Believer on a 2-d limit state.
    X = rs.standard_normal((15, 2)) * 1.5
    y = 2.5 - X[:, 0] - 0.3 * X[:, 1] ** 2
    Cand = rs.standard_normal((400, 2)) * 1.5
    believer("believer-2d", X, y, Cand, 4, 2.0, 1e-8, [1.5, 2.5])


if __name__ == "__main__":
    main()
