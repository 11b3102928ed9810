"""Reference values for `voxstrata compare` and `voxstrata::analysis::stats`, computed with numpy,
scipy and scikit-learn (versions pinned in requirements.txt).

Linear and RBF CKA follow the published formula of Kornblith et al. (2019), computed the
Gram-matrix way: HSIC(K, L) = tr(K H L H) / (n - 1)^2 with the centring matrix
H = I - 11^T / n, and CKA = HSIC(K, L) / sqrt(HSIC(K, K) HSIC(L, L)). The RBF kernel is
exp(-d^2 / (2 sigma^2)) with sigma the median pairwise (i < j) Euclidean distance.
The unbiased HSIC estimator is that of Song et al. (2012), as used for minibatch CKA by
Nguyen et al. (2021). Exact binomial p-values come from scipy.stats.binomtest and
chi-square survival values from scipy.stats.chi2.sf.

Run from the repository root:  /work/pyenv/bin/python tests/reference/make_compare.py
"""
import json
import os

import numpy as np
from scipy import stats
from scipy.spatial.distance import pdist, squareform
from sklearn.datasets import load_iris

OUT = os.path.join(os.path.dirname(__file__), "compare")
os.makedirs(OUT, exist_ok=True)


def centre_gram(k):
    n = k.shape[0]
    h = np.eye(n) - np.ones((n, n)) / n
    return h @ k @ h


def hsic(k, l):
    n = k.shape[0]
    return np.trace(centre_gram(k) @ centre_gram(l)) / (n - 1) ** 2


def cka_from_grams(k, l):
    return hsic(k, l) / np.sqrt(hsic(k, k) * hsic(l, l))


def linear_cka(x, y):
    x = x.astype(np.float64)
    y = y.astype(np.float64)
    return cka_from_grams(x @ x.T, y @ y.T)


def rbf_gram(x):
    x = x.astype(np.float64)
    d = pdist(x)
    sigma = np.median(d)
    return np.exp(-squareform(d) ** 2 / (2 * sigma**2)), sigma


def rbf_cka(x, y):
    k, sx = rbf_gram(x)
    l, sy = rbf_gram(y)
    return cka_from_grams(k, l), sx, sy


def hsic_unbiased(k, l):
    n = k.shape[0]
    k = k.copy()
    l = l.copy()
    np.fill_diagonal(k, 0)
    np.fill_diagonal(l, 0)
    one = np.ones(n)
    t1 = np.trace(k @ l)
    t2 = (one @ k @ one) * (one @ l @ one) / ((n - 1) * (n - 2))
    t3 = 2.0 / (n - 2) * (one @ k @ l @ one)
    return (t1 + t2 - t3) / (n * (n - 3))


def save(name, a):
    np.save(os.path.join(OUT, name), a.astype(np.float32))


rng = np.random.default_rng(20190101)
out = {}

# Random data: Y is a noisy linear image of X with a different width.
x = rng.standard_normal((200, 12)).astype(np.float32)
w = rng.standard_normal((12, 8))
y = (x @ w + 2.0 * rng.standard_normal((200, 8))).astype(np.float32)
save("random_x.npy", x)
save("random_y.npy", y)
out["linear_random"] = linear_cka(x, y)

# Iris (Fisher 1936, as shipped by scikit-learn) against a seeded noisy copy of itself.
iris = load_iris().data.astype(np.float32)
noisy = (iris + 0.5 * rng.standard_normal(iris.shape)).astype(np.float32)
save("iris.npy", iris)
save("iris_noisy.npy", noisy)
out["linear_iris"] = linear_cka(iris, noisy)

# RBF CKA on a small random set.
rx = rng.standard_normal((60, 5)).astype(np.float32)
ry = (np.tanh(rx[:, :3]) + 0.3 * rng.standard_normal((60, 3))).astype(np.float32)
save("rbf_x.npy", rx)
save("rbf_y.npy", ry)
v, sx, sy = rbf_cka(rx, ry)
out["rbf"] = v
out["rbf_sigma_x"] = sx
out["rbf_sigma_y"] = sy

# Unbiased HSIC with linear kernels on the first 30 rows of the random set, and minibatch
# CKA over the four contiguous batches of 50 rows of the random set.
xs = x[:30].astype(np.float64)
ys = y[:30].astype(np.float64)
out["hsic_unbiased_30"] = hsic_unbiased(xs @ xs.T, ys @ ys.T)
num = kk = ll = 0.0
for i in range(4):
    xb = x[50 * i : 50 * (i + 1)].astype(np.float64)
    yb = y[50 * i : 50 * (i + 1)].astype(np.float64)
    k, l = xb @ xb.T, yb @ yb.T
    num += hsic_unbiased(k, l)
    kk += hsic_unbiased(k, k)
    ll += hsic_unbiased(l, l)
out["minibatch_cka_50"] = num / np.sqrt(kk * ll)

# Exact two-sided binomial p-values at p = 1/2 for McNemar's discordant counts (b, c).
pairs = [(0, 1), (1, 5), (2, 10), (3, 3), (5, 12), (7, 17), (0, 24), (11, 13), (40, 60), (150, 86), (400, 520)]
out["binomtest"] = [
    {"b": b, "c": c, "p": float(stats.binomtest(b, b + c, 0.5).pvalue)} for b, c in pairs
]
out["chi2_sf"] = [
    {"x": xv, "df": df, "sf": float(stats.chi2.sf(xv, df))}
    for xv, df in [(0.5, 1), (3.0, 1), (17.3559322, 1), (40.0, 1), (2.0, 3), (10.0, 5), (0.2, 7)]
]

with open(os.path.join(OUT, "expected.json"), "w") as f:
    json.dump(out, f, indent=1, sort_keys=True)
    f.write("\n")
print(json.dumps({k: v for k, v in out.items() if not isinstance(v, list)}, indent=1))
