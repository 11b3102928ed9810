"""voxstrata.probe against scikit-learn's LogisticRegression on iris and digits, with the
train/test split and the C of the Rust fixtures (tests/reference/make_probe.py), and the
same tolerance as tests/probe_cli.rs (test accuracy within 0.005)."""

import os

import numpy as np
import pytest
from sklearn.linear_model import LogisticRegression
from sklearn.preprocessing import StandardScaler

import voxstrata
from conftest import REFERENCE, read_json

FIX = os.path.join(REFERENCE, "probe")


def sklearn_accuracy(x, y, train, test, c):
    """Reference: scikit-learn LogisticRegression (lbfgs, multinomial) on StandardScaler
    features of the training side, as make_probe.py fits it."""
    sc = StandardScaler().fit(x[train].astype(np.float64))
    clf = LogisticRegression(C=c, solver="lbfgs", tol=1e-10, max_iter=100000)
    clf.fit(sc.transform(x[train].astype(np.float64)), y[train])
    return float((clf.predict(sc.transform(x[test].astype(np.float64))) == y[test]).mean())


@pytest.mark.parametrize("name", ["iris", "digits"])
def test_probe_matches_scikit_learn(name):
    exp = read_json(os.path.join(FIX, "expected.json"))["datasets"][name]
    x = np.load(os.path.join(FIX, f"{name}_x.npy"))
    y = np.load(os.path.join(FIX, f"{name}_y.npy"))
    train = np.load(os.path.join(FIX, f"{name}_train.npy"))
    test = np.load(os.path.join(FIX, f"{name}_test.npy"))
    c = exp["C"]
    # Two groups, the fixture's training and test items; a speaker-disjoint split with
    # test_fraction 0.5 holds out one of them (one split: --folds 1). A single penalty α = 1/(C·n) is C itself.
    groups = np.where(np.isin(np.arange(len(y)), test), "test", "train")
    alpha = 1.0 / (c * len(train))
    for seed in range(20):
        recs = voxstrata.probe(x, {"class": y}, groups, split="speaker", folds=1, test_fraction=0.5, seed=seed,
                               alphas=[alpha], no_control=True, max_train_frames=0, max_test_frames=0,
                               bootstrap=10)
        if recs[0]["n_test"] == len(test):
            break
    else:
        pytest.fail("no seed held out the fixture's test side")
    (r,) = recs
    assert r["n_train"] == len(train) and r["n_classes"] == exp["n_classes"]
    assert abs(r["c"] - c) < 1e-9 * c
    want = sklearn_accuracy(x, y, train, test, c)
    # The fixture's stored accuracy and the live fit agree (same scikit-learn procedure).
    assert abs(want - exp["test_accuracy"]) <= 0.005
    assert abs(r["accuracy"] - want) <= 0.005, (r["accuracy"], want)
