"""voxstrata.cka against the linear CKA formula of Kornblith et al. (2019), eq. for linear
kernels: ||Yc^T Xc||_F^2 / (||Xc^T Xc||_F ||Yc^T Yc||_F) with column-centred X and Y,
written here in numpy (float64)."""

import numpy as np
import pytest
from sklearn import datasets

import voxstrata


def numpy_linear_cka(x, y):
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    x = x - x.mean(axis=0)
    y = y - y.mean(axis=0)
    return np.linalg.norm(y.T @ x) ** 2 / (np.linalg.norm(x.T @ x) * np.linalg.norm(y.T @ y))


def cases():
    rng = np.random.default_rng(11)
    x = rng.normal(size=(300, 20)).astype(np.float32)
    w = rng.normal(size=(20, 7)).astype(np.float32)
    iris = datasets.load_iris().data.astype(np.float32)
    digits = datasets.load_digits().data.astype(np.float32)
    return {
        "random": (x, rng.normal(size=(300, 12)).astype(np.float32)),
        "linear map plus noise": (x, x @ w + 0.5 * rng.normal(size=(300, 7)).astype(np.float32)),
        "iris vs noisy iris": (iris, iris + rng.normal(scale=0.3, size=iris.shape).astype(np.float32)),
        "digits vs its first 20 pixels, float64 Fortran": (digits, np.asfortranarray(digits[:, :20].astype(np.float64))),
    }


@pytest.mark.parametrize("name", list(cases()))
def test_linear_cka_matches_numpy_formula(name):
    x, y = cases()[name]
    assert abs(voxstrata.cka(x, y) - numpy_linear_cka(x, y)) < 1e-6


def test_cka_of_a_rotation_is_one_and_symmetric():
    # Known answers: CKA is invariant to orthogonal transforms and isotropic scaling
    # (Kornblith et al. 2019, section 3), and symmetric.
    rng = np.random.default_rng(5)
    x = rng.normal(size=(200, 10))
    q, _ = np.linalg.qr(rng.normal(size=(10, 10)))
    assert abs(voxstrata.cka(x, 3.0 * x @ q) - 1.0) < 1e-6
    y = rng.normal(size=(200, 4))
    assert abs(voxstrata.cka(x, y) - voxstrata.cka(y, x)) < 1e-9
