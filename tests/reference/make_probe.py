"""Reference fixtures for the probe: scikit-learn's LogisticRegression (lbfgs, multinomial)
on standardised iris, wine and digits with a fixed train/test split, and scikit-learn's
macro-F1 and balanced accuracy on fixed predictions.

Run with the pinned environment (tests/reference/requirements.txt):
    python tests/reference/make_probe.py
Writes tests/reference/probe/.
"""
import json
import os

import numpy as np
import sklearn
from sklearn import datasets
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import balanced_accuracy_score, f1_score
from sklearn.preprocessing import StandardScaler

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "probe")
os.makedirs(OUT, exist_ok=True)
rng = np.random.default_rng(20240601)

cases = {"iris": (datasets.load_iris, 1.0), "wine": (datasets.load_wine, 0.1), "digits": (datasets.load_digits, 0.05)}
summary = {"sklearn": sklearn.__version__, "datasets": {}}
for name, (loader, C) in cases.items():
    d = loader()
    # Stored as float32 (what voxstrata reads); the reference fits on exactly those values.
    X = d.data.astype(np.float32)
    y = d.target.astype(np.int64)
    n = len(y)
    perm = rng.permutation(n)
    n_test = n // 4
    test = np.sort(perm[:n_test])
    train = np.sort(perm[n_test:])
    sc = StandardScaler().fit(X[train].astype(np.float64))
    Xtr = sc.transform(X[train].astype(np.float64))
    Xte = sc.transform(X[test].astype(np.float64))
    clf = LogisticRegression(C=C, solver="lbfgs", tol=1e-10, max_iter=100000).fit(Xtr, y[train])
    proba = clf.predict_proba(Xte)
    acc = float((clf.predict(Xte) == y[test]).mean())
    np.save(os.path.join(OUT, f"{name}_x.npy"), X)
    np.save(os.path.join(OUT, f"{name}_y.npy"), y)
    np.save(os.path.join(OUT, f"{name}_train.npy"), train.astype(np.int64))
    np.save(os.path.join(OUT, f"{name}_test.npy"), test.astype(np.int64))
    np.save(os.path.join(OUT, f"{name}_proba.npy"), proba)
    # Objective in scikit-learn's unscaled form: sum of cross-entropy + ||W||^2 / (2C).
    p_tr = clf.predict_proba(Xtr)
    ce = -np.log(p_tr[np.arange(len(train)), y[train]]).sum()
    obj = float(ce + (clf.coef_ ** 2).sum() / (2 * C))
    summary["datasets"][name] = {"C": C, "n_classes": int(y.max() + 1), "test_accuracy": acc, "objective": obj}

# Metrics on fixed predictions (some classes never predicted, one never true).
k = 7
t = rng.integers(0, k - 1, size=500)
p = np.where(rng.random(500) < 0.6, t, rng.integers(0, k, size=500))
p[p == 3] = 4
np.save(os.path.join(OUT, "metrics_true.npy"), t.astype(np.int64))
np.save(os.path.join(OUT, "metrics_pred.npy"), p.astype(np.int64))
summary["metrics"] = {
    "macro_f1": float(f1_score(t, p, average="macro", zero_division=0)),
    "balanced_accuracy": float(balanced_accuracy_score(t, p)),
}
with open(os.path.join(OUT, "expected.json"), "w") as f:
    json.dump(summary, f, indent=2)
print(json.dumps(summary, indent=2))
