"""Tests of trainers/losses.py against scikit-learn, scipy and finite differences."""

import numpy as np
import pytest
from scipy.special import softmax as scipy_softmax
from sklearn.metrics import log_loss, mean_squared_error

from trainers import losses


def _numeric_grad(f, x, h=1e-6):
    """Central finite differences (common practice)."""
    g = np.zeros_like(x)
    flat, gf = x.reshape(-1), g.reshape(-1)
    for i in range(flat.size):
        old = flat[i]
        flat[i] = old + h
        fp = f(x)
        flat[i] = old - h
        fm = f(x)
        flat[i] = old
        gf[i] = (fp - fm) / (2 * h)
    return g


def test_mse_equals_sklearn_mean_squared_error_over_all_outputs():
    rng = np.random.default_rng(0)
    y, f = rng.standard_normal((50, 3)), rng.standard_normal((50, 3))
    # scikit-learn's mean_squared_error with uniform averaging over outputs = mean over all cells
    assert losses.mse(f, y) == pytest.approx(mean_squared_error(y, f), rel=1e-13)


def test_cross_entropy_equals_sklearn_log_loss():
    rng = np.random.default_rng(1)
    logits = 3 * rng.standard_normal((60, 4))
    labels = rng.integers(0, 4, 60)
    proba = losses.softmax(logits)
    # sklearn.metrics.log_loss on the same probabilities is the reference
    ref = log_loss(labels, proba, labels=[0, 1, 2, 3])
    assert losses.cross_entropy(proba, labels) == pytest.approx(ref, rel=1e-12)
    assert losses.softmax_cross_entropy(logits, labels) == pytest.approx(ref, rel=1e-12)


def test_softmax_matches_scipy_and_is_stable_for_large_logits():
    z = np.array([[1000.0, 1001.0, 999.0], [-5.0, 0.0, 5.0]])
    # scipy.special.softmax as the reference
    np.testing.assert_allclose(losses.softmax(z), scipy_softmax(z, axis=1), rtol=1e-14)
    buf = z.copy()
    losses.inplace_softmax(buf, np.empty((2, 1)))
    np.testing.assert_allclose(buf, scipy_softmax(z, axis=1), rtol=1e-14)
    assert np.isfinite(losses.softmax_cross_entropy(z, np.array([2, 0])))


def test_inplace_mse_grad_matches_central_differences():
    rng = np.random.default_rng(2)
    f, y = rng.standard_normal((6, 3)), rng.standard_normal((6, 3))
    g = losses.inplace_mse_grad(f, y, np.empty_like(f))
    fd = _numeric_grad(lambda q: losses.mse(q, y), f.copy())
    # central finite differences (common practice) as the reference
    assert np.linalg.norm(g - fd) / np.linalg.norm(fd) <= 1e-6


def test_inplace_softmax_grad_matches_central_differences():
    rng = np.random.default_rng(3)
    z, labels = rng.standard_normal((5, 4)), rng.integers(0, 4, 5)
    p = z.copy()
    losses.inplace_softmax(p, np.empty((5, 1)))
    g = losses.inplace_softmax_grad(p, losses.one_hot(labels, 4), np.empty_like(p))
    fd = _numeric_grad(lambda q: losses.softmax_cross_entropy(q, labels), z.copy())
    # central finite differences (common practice) as the reference
    assert np.linalg.norm(g - fd) / np.linalg.norm(fd) <= 1e-6


def test_stacked_kernels_use_each_models_own_mean():
    rng = np.random.default_rng(4)
    f, y = rng.standard_normal((2, 5, 3)), rng.standard_normal((2, 5, 3))
    g = losses.inplace_mse_grad(f, y, np.empty_like(f))
    for k in range(2):
        np.testing.assert_allclose(g[k], losses.inplace_mse_grad(f[k], y[k], np.empty((5, 3))), rtol=0, atol=0)


def test_cross_entropy_clips_zero_probability():
    # log_loss clips at machine epsilon too (scikit-learn >= 1.5 behaviour), so the loss stays finite
    p = np.array([[1.0, 0.0], [0.5, 0.5]])
    assert losses.cross_entropy(p, np.array([1, 0])) == pytest.approx(log_loss([1, 0], p, labels=[0, 1]), rel=1e-12)
