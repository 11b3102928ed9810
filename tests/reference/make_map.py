"""Reference values for the map and purity code (src/map/, src/purity.rs).

Writes tests/reference/map/: the iris and digits datasets scikit-learn ships, and the values
scikit-learn / numpy compute on them (silhouette_score, trustworthiness, NearestNeighbors
label purity, normalized_mutual_info_score and its building blocks, PCA explained-variance
ratios, between-class variance share). Run with the pinned environment:

    /work/pyenv/bin/python tests/reference/make_map.py
"""
import json
import os

import numpy as np
from sklearn.cluster import KMeans
from sklearn.datasets import load_digits, load_iris
from sklearn.decomposition import PCA
from sklearn.manifold import trustworthiness
from sklearn.metrics import mutual_info_score, normalized_mutual_info_score, silhouette_score
from sklearn.neighbors import NearestNeighbors

OUT = os.path.join(os.path.dirname(__file__), "map")
os.makedirs(OUT, exist_ok=True)


def knn_purity(x, y, k=10):
    nn = NearestNeighbors(n_neighbors=k + 1).fit(x)
    idx = nn.kneighbors(x, return_distance=False)[:, 1:]
    return float(np.mean(y[idx] == y[:, None]))


def entropy(p):
    p = p[p > 0]
    return float(-np.sum(p * np.log(p)))


def pnmi(y, z):
    """Phone-normalised MI (Hsu et al. 2021): I(y; z) / H(y), from the joint counts."""
    ys, yi = np.unique(y, return_inverse=True)
    zs, zi = np.unique(z, return_inverse=True)
    joint = np.zeros((len(ys), len(zs)))
    np.add.at(joint, (yi, zi), 1)
    pyz = joint / joint.sum()
    py = pyz.sum(1)
    pz = pyz.sum(0)
    nz = pyz > 0
    mi = float(np.sum(pyz[nz] * np.log(pyz[nz] / np.outer(py, pz)[nz])))
    # Hsu et al. (2021): phone purity = E_z[max_y p(y|z)], cluster purity = E_y[max_z p(z|y)].
    label_purity = float(np.sum(pyz.max(0)))
    cluster_purity = float(np.sum(pyz.max(1)))
    return mi, entropy(py), entropy(pz), mi / entropy(py), label_purity, cluster_purity


def variance_ratio(x, y):
    mu = x.mean(0)
    total = float(((x - mu) ** 2).sum())
    between = 0.0
    for c in np.unique(y):
        xc = x[y == c]
        between += len(xc) * float(((xc.mean(0) - mu) ** 2).sum())
    return between / total


values = {}
for name, loader in [("iris", load_iris), ("digits", load_digits)]:
    d = loader()
    # a small fixed jitter removes exact ties between distances (iris and digits are coarsely
    # quantised), whose order differs between neighbour searches; stored as float32 and read
    # back so both sides see the same numbers
    jitter = np.random.default_rng(0).normal(scale=1e-3, size=d.data.shape)
    x = (d.data + jitter).astype(np.float32).astype(np.float64)
    y = d.target.astype(np.int64)
    np.save(os.path.join(OUT, f"{name}_x.npy"), x.astype(np.float32))
    np.save(os.path.join(OUT, f"{name}_y.npy"), y)
    pca_full = PCA(svd_solver="full").fit(x)
    emb = PCA(n_components=2, svd_solver="full").fit_transform(x).astype(np.float32)
    np.save(os.path.join(OUT, f"{name}_pca2.npy"), emb)
    ncomp = 10 if name == "digits" else 2
    pca_rand = PCA(n_components=ncomp, svd_solver="randomized", random_state=0).fit(x)
    k = 3 if name == "iris" else 10
    clusters = KMeans(n_clusters=k, n_init=1, random_state=0).fit_predict(x).astype(np.int64)
    np.save(os.path.join(OUT, f"{name}_kmeans.npy"), clusters)
    mi, hy, hz, pn, lp, cp = pnmi(y, clusters)
    values[name] = {
        "silhouette": float(silhouette_score(x, y)),
        # trustworthiness of the 2-D PCA embedding saved beside it (float32, as our maps are)
        "trustworthiness_pca2_k10": float(trustworthiness(x, emb.astype(np.float64), n_neighbors=10)),
        "knn_purity_k10": knn_purity(x, y),
        "knn_purity_2d_k10": knn_purity(emb.astype(np.float64), y),
        "explained_variance_ratio_full": pca_full.explained_variance_ratio_.tolist(),
        "explained_variance_ratio_randomized": pca_rand.explained_variance_ratio_.tolist(),
        "nmi_kmeans": float(normalized_mutual_info_score(y, clusters)),
        "mi_kmeans": float(mutual_info_score(y, clusters)),
        "mi_numpy": mi,
        "entropy_labels": hy,
        "entropy_clusters": hz,
        "pnmi_kmeans": pn,
        "label_purity_kmeans": lp,
        "cluster_purity_kmeans": cp,
        "variance_ratio": variance_ratio(x, y),
    }

with open(os.path.join(OUT, "values.json"), "w") as f:
    json.dump(values, f, indent=1)
print(json.dumps({k: {kk: vv for kk, vv in v.items() if not isinstance(vv, list)} for k, v in values.items()}, indent=1))
