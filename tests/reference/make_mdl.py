"""Reference fixtures for MDL probing with the online code (Voita & Titov 2020) on iris and
digits, computed with scikit-learn's LogisticRegression (lbfgs, multinomial) and
StandardScaler, independent of voxstrata's trainer.

The definition (the one voxstrata documents in src/analysis/probe/mdl.rs): items are sent in
the order stored in `<name>_order.npy` (a numpy permutation, seed below), cut into blocks that
end at ceil(p * n / 100) for p in 0.1, 0.2, 0.4, 0.8, 1.6, 3.2, 6.25, 12.5, 25, 50, 100 (repeats
merged). The first block costs log2(K) bits per item. Each later block is sent with a probe
trained on every earlier item: StandardScaler fitted on those items, LogisticRegression with
C = 1 / (alpha * n_train) on the classes present (one class present: probability 1 for it);
each item costs -log2((1 - eps) * p(y|x) + eps / K), eps = 1e-3.

Run with the pinned environment (tests/reference/requirements.txt):
    python tests/reference/make_mdl.py
Writes tests/reference/mdl/ (the rows and labels are those of tests/reference/probe/).
"""
import json
import math
import os

import numpy as np
import sklearn
from sklearn import datasets
from sklearn.linear_model import LogisticRegression
from sklearn.preprocessing import StandardScaler

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "mdl")
os.makedirs(OUT, exist_ok=True)
PERCENTS = [0.1, 0.2, 0.4, 0.8, 1.6, 3.2, 6.25, 12.5, 25.0, 50.0, 100.0]
EPS = 1e-3
rng = np.random.default_rng(20200401)


def block_ends(n):
    ends = []
    for p in PERCENTS:
        e = min(max(math.ceil(p * n / 100.0 - 1e-9), 1), n)
        if not ends or ends[-1] != e:
            ends.append(e)
    return ends


def online_code(X, y, k, order, alpha):
    ends = block_ends(len(order))
    bits = [ends[0] * math.log2(k)]
    for lo, hi in zip(ends[:-1], ends[1:]):
        train, send = order[:lo], order[lo:hi]
        present = np.unique(y[train])
        probs = np.zeros((len(send), k))
        if len(present) < 2:
            probs[:, present[0]] = 1.0
        else:
            sc = StandardScaler().fit(X[train].astype(np.float64))
            clf = LogisticRegression(C=1.0 / (alpha * len(train)), tol=1e-10, max_iter=100000)
            clf.fit(sc.transform(X[train].astype(np.float64)), y[train])
            probs[:, clf.classes_] = clf.predict_proba(sc.transform(X[send].astype(np.float64)))
        q = (1 - EPS) * probs[np.arange(len(send)), y[send]] + EPS / k
        bits.append(float(-np.log2(q).sum()))
    return ends, bits


summary = {"sklearn": sklearn.__version__, "eps": EPS, "datasets": {}}
for name, loader, alpha in [("iris", datasets.load_iris, 1e-2), ("digits", datasets.load_digits, 1e-2)]:
    d = loader()
    X = d.data.astype(np.float32)
    y = d.target.astype(np.int64)
    fixture = os.path.join(HERE, "probe", f"{name}_x.npy")
    if os.path.exists(fixture):
        assert np.array_equal(np.load(fixture), X), f"{fixture} differs from {name}"
    k = int(y.max() + 1)
    order = rng.permutation(len(y))
    ends, bits = online_code(X, y, k, order, alpha)
    np.save(os.path.join(OUT, f"{name}_order.npy"), order.astype(np.int64))
    online = float(sum(bits))
    uniform = len(y) * math.log2(k)
    summary["datasets"][name] = {
        "alpha": alpha,
        "n_classes": k,
        "items": len(y),
        "block_ends": ends,
        "block_bits": bits,
        "uniform_bits": uniform,
        "online_bits": online,
        "compression": uniform / online,
    }
with open(os.path.join(OUT, "expected.json"), "w") as f:
    json.dump(summary, f, indent=2)
print(json.dumps({n: (v["online_bits"], v["compression"]) for n, v in summary["datasets"].items()}, indent=2))
