"""Reference fixtures for the regression probe: scikit-learn's Ridge on the diabetes dataset
that scikit-learn ships, scikit-learn's r2_score, scipy's pearsonr, and a penalty chosen on a
grouped validation split by a scikit-learn loop (StandardScaler fitted on the inner training
side, Ridge per penalty, the best validation R², the first of equals).

Run with the pinned environment (tests/reference/requirements.txt):
    python tests/reference/make_ridge.py
Writes tests/reference/ridge/.
"""
import json
import os

import numpy as np
import scipy
import sklearn
from scipy.stats import pearsonr
from sklearn import datasets
from sklearn.linear_model import Ridge
from sklearn.metrics import r2_score
from sklearn.preprocessing import StandardScaler

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "ridge")
os.makedirs(OUT, exist_ok=True)
rng = np.random.default_rng(20261203)

d = datasets.load_diabetes()
# Stored as float32 (what voxstrata reads); the reference fits on exactly those values.
X = d.data.astype(np.float32)
y = d.target.astype(np.float64)
n = len(y)
X64 = X.astype(np.float64)

# Fixed penalties on all rows: coefficients and intercept.
fixed = {}
for alpha in [0.01, 0.1, 1.0, 10.0]:
    m = Ridge(alpha=alpha, fit_intercept=True, solver="cholesky").fit(X64, y)
    fixed[str(alpha)] = {"coef": m.coef_.tolist(), "intercept": float(m.intercept_)}

# A train/test split: R² on the test rows for penalty 0.1.
perm = rng.permutation(n)
test = np.sort(perm[: n // 4])
train = np.sort(perm[n // 4 :])
m = Ridge(alpha=0.1, solver="cholesky").fit(X64[train], y[train])
pred = m.predict(X64[test])
split = {"alpha": 0.1, "test_r2": float(r2_score(y[test], pred)), "pred": pred.tolist()}

# Grouped selection: 40 groups of consecutive rows (stand-ins for speakers); the inner
# validation side is 10 whole groups drawn with the seed.
groups = np.arange(n) * 40 // n
val_groups = rng.choice(40, size=10, replace=False)
is_val = np.isin(groups, val_groups)
tr, va = np.where(~is_val)[0], np.where(is_val)[0]
grid = [1e-2, 1e-1, 1.0, 10.0, 100.0, 1000.0, 10000.0]
sc = StandardScaler().fit(X64[tr])
ym, ysd = y[tr].mean(), y[tr].std()
scores = []
for alpha in grid:
    m = Ridge(alpha=alpha, solver="cholesky").fit(sc.transform(X64[tr]), (y[tr] - ym) / ysd)
    p = m.predict(sc.transform(X64[va])) * ysd + ym
    scores.append(float(r2_score(y[va], p)))
best = grid[int(np.argmax(scores))]
selection = {"train": tr.tolist(), "val": va.tolist(), "grid": grid, "validation_r2": scores, "best": best}

# scipy's pearsonr on the split's predictions.
r = pearsonr(y[test], pred)
np.save(os.path.join(OUT, "diabetes_x.npy"), X)
np.save(os.path.join(OUT, "diabetes_y.npy"), y)
np.save(os.path.join(OUT, "diabetes_train.npy"), train.astype(np.int64))
np.save(os.path.join(OUT, "diabetes_test.npy"), test.astype(np.int64))
summary = {
    "sklearn": sklearn.__version__,
    "scipy": scipy.__version__,
    "numpy": np.__version__,
    "fixed": fixed,
    "split": split,
    "selection": selection,
    "pearson_r": float(r.statistic),
}
with open(os.path.join(OUT, "expected.json"), "w") as f:
    json.dump(summary, f, indent=1)
print("wrote", OUT)
