"""Tests of trainers/mlp.py: init, forward against scikit-learn, gradients against finite differences.

The checks of `MLPConfig` (trainers/config.py) are in tests/trainers/test_config.py.
"""

import numpy as np
import pytest
from sklearn.neural_network import MLPClassifier, MLPRegressor

from trainers.mlp import (
    ACTIVATIONS,
    MLPConfig,
    Network,
    decay_mask,
    forward,
    init_params,
    layer_shapes,
    loss_and_grad,
    n_params,
    unpack_params,
)

pytestmark = [pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning"),
              pytest.mark.usefixtures("one_blas_thread")]


def _numeric_grad(f, x, h=1e-6):
    """Central finite differences (common practice: error O(h^2))."""
    g = np.zeros_like(x)
    for i in range(x.size):
        xp, xm = x.copy(), x.copy()
        xp[i] += h
        xm[i] -= h
        g[i] = (f(xp) - f(xm)) / (2 * h)
    return g


def _rel_err(a, b):
    return np.linalg.norm(a - b) / max(np.linalg.norm(a), np.linalg.norm(b), 1e-300)


def _problem(task, n_out, seed=0, n=7, n_in=4):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, n_in))
    y = rng.integers(0, n_out, n) if task == "classification" else rng.standard_normal((n, n_out))
    return X, y


# ---------------------------------------------------------------- gradients


@pytest.mark.parametrize("activation", ACTIVATIONS)
@pytest.mark.parametrize("task,n_out", [("regression", 1), ("regression", 3), ("classification", 3)])
@pytest.mark.parametrize("hidden", [(), (5,), (5, 4)])
def test_loss_and_grad_matches_central_differences(activation, task, n_out, hidden):
    cfg = MLPConfig(4, n_out, hidden, activation=activation, task=task)
    X, y = _problem(task, n_out)
    p = init_params(cfg, rng=np.random.default_rng(1))
    p += 0.1 * np.random.default_rng(2).standard_normal(p.shape)  # nonzero biases too
    _, g = loss_and_grad(cfg, p, X, y)
    g_fd = _numeric_grad(lambda q: loss_and_grad(cfg, q, X, y)[0], p)
    # finite differences (central, h=1e-6, float64) as the outside reference, as in scikit-learn's test_gradient
    assert _rel_err(g, g_fd) <= 1e-6


@pytest.mark.parametrize("activation", ACTIVATIONS)
@pytest.mark.parametrize("task,n_out", [("regression", 2), ("classification", 3)])
def test_loss_and_grad_with_dropout_mask_and_weight_decay(activation, task, n_out):
    cfg = MLPConfig(4, n_out, (6, 5), activation=activation, task=task, dropout=0.3)
    X, y = _problem(task, n_out, seed=3)
    rng = np.random.default_rng(4)
    masks = [(rng.random((X.shape[0], h)) >= 0.3) / 0.7 for h in cfg.hidden]  # a fixed inverted-dropout mask
    assert any((m == 0).any() for m in masks)
    p = init_params(cfg, rng=np.random.default_rng(5)) + 0.05
    f = lambda q: loss_and_grad(cfg, q, X, y, weight_decay=0.3, masks=masks)[0]  # noqa: E731
    _, g = loss_and_grad(cfg, p, X, y, weight_decay=0.3, masks=masks)
    # central finite differences as the reference (common practice)
    assert _rel_err(g, _numeric_grad(f, p)) <= 1e-6


def test_weight_decay_gradient_skips_biases():
    cfg = MLPConfig(3, 2, (4,))
    X, y = _problem("regression", 2, n_in=3)
    p = init_params(cfg, rng=np.random.default_rng(0)) + 0.5
    _, g0 = loss_and_grad(cfg, p, X, y)
    _, g1 = loss_and_grad(cfg, p, X, y, weight_decay=0.2)
    # d/dp of 0.2/2 * ||W||^2 is 0.2 * W on weights and 0 on biases (the documented convention)
    expected = np.zeros_like(p)
    for e, q in zip(unpack_params(expected, cfg), unpack_params(p, cfg)):
        e[:-1] = 0.2 * q[:-1]
    np.testing.assert_allclose(g1 - g0, expected, atol=1e-14)


# ---------------------------------------------------------------- forward against scikit-learn


def _to_sklearn(model, cfg, p):
    views = unpack_params(p, cfg)
    model.coefs_ = [v[:-1].copy() for v in views]
    model.intercepts_ = [v[-1].copy() for v in views]


@pytest.mark.parametrize("activation,sk_name", [("relu", "relu"), ("tanh", "tanh"), ("sigmoid", "logistic")])
def test_forward_matches_sklearn_regressor_with_same_weights(activation, sk_name):
    rng = np.random.default_rng(0)
    X, y = rng.standard_normal((30, 5)), rng.standard_normal((30, 2))
    cfg = MLPConfig(5, 2, (7, 3), activation=activation)
    p = init_params(cfg, rng=rng) + 0.1
    sk = MLPRegressor(hidden_layer_sizes=(7, 3), activation=sk_name, max_iter=1).fit(X, y)
    _to_sklearn(sk, cfg, p)
    # scikit-learn's MLPRegressor forward pass with our weights copied in is the reference
    np.testing.assert_allclose(Network(cfg, p).predict(X), sk.predict(X), rtol=1e-12, atol=1e-12)


def test_predict_proba_matches_sklearn_classifier_with_same_weights():
    rng = np.random.default_rng(1)
    X, y = rng.standard_normal((40, 4)), rng.integers(0, 3, 40)
    cfg = MLPConfig(4, 3, (6,), activation="tanh", task="classification")
    p = init_params(cfg, rng=rng)
    sk = MLPClassifier(hidden_layer_sizes=(6,), activation="tanh", max_iter=1).fit(X, y)
    _to_sklearn(sk, cfg, p)
    net = Network(cfg, p)
    # scikit-learn's MLPClassifier (softmax output for > 2 classes) as the reference
    np.testing.assert_allclose(net.predict_proba(X), sk.predict_proba(X), rtol=1e-12, atol=1e-14)
    np.testing.assert_array_equal(net.predict(X), sk.predict(X))


def test_stacked_forward_equals_each_network():
    cfg = MLPConfig(4, 2, (5,))
    X = np.random.default_rng(0).standard_normal((9, 4))
    stack = init_params(cfg, rng=[np.random.default_rng(s) for s in range(3)], n_models=3)
    out = forward(cfg, stack, X)
    assert out.shape == (3, 9, 2)
    for k in range(3):
        np.testing.assert_array_equal(out[k], forward(cfg, stack[k], X))
        np.testing.assert_array_equal(stack[k], init_params(cfg, rng=np.random.default_rng(k)))


# ---------------------------------------------------------------- init and layout


def test_layout_biases_are_last_row_of_each_block():
    cfg = MLPConfig(3, 2, (4,))
    assert layer_shapes(cfg) == [(4, 4), (5, 2)]
    assert n_params(cfg) == 4 * 4 + 5 * 2
    mask = decay_mask(cfg)
    views = unpack_params(mask, cfg)
    assert views[0][-1].sum() == 0 and views[0][:-1].min() == 1 and views[1][-1].sum() == 0


def test_init_he_and_glorot_scales():
    cfg_he = MLPConfig(400, 300, (), activation="relu")
    w = unpack_params(init_params(cfg_he, rng=np.random.default_rng(0)), cfg_he)[0]
    # He et al. (2015): weights ~ N(0, 2 / fan_in); biases 0
    assert abs(w[:-1].std() - np.sqrt(2 / 400)) < 0.01 * np.sqrt(2 / 400)
    assert not w[-1].any()
    cfg_gl = MLPConfig(400, 300, (), activation="tanh")
    w = unpack_params(init_params(cfg_gl, rng=np.random.default_rng(0)), cfg_gl)[0]
    bound = np.sqrt(6 / 700)  # Glorot and Bengio (2010): U(-sqrt(6/(fan_in+fan_out)), +...)
    assert w[:-1].max() <= bound and w[:-1].min() >= -bound and w[:-1].max() > 0.99 * bound
    assert cfg_gl.init_scheme == "glorot" and cfg_he.init_scheme == "he"


def test_float32_network():
    cfg = MLPConfig(3, 1, (4,), dtype="float32")
    p = init_params(cfg, rng=np.random.default_rng(0))
    assert p.dtype == np.float32
    assert Network(cfg, p).predict(np.ones((2, 3))).dtype == np.float32


def test_network_round_trip_through_npz(tmp_path):
    cfg = MLPConfig(3, 4, (5, 2), activation="sigmoid", task="classification", dropout=0.25, dtype="float32")
    net = Network(cfg, init_params(cfg, rng=np.random.default_rng(0)))
    path = tmp_path / "net.npz"
    np.savez(path, **net.to_arrays())
    with np.load(path, allow_pickle=False) as arrays:
        back = Network.from_arrays(arrays)
    assert back.config == cfg
    np.testing.assert_array_equal(back.params, net.params)


# ---------------------------------------------------------------- validation


def test_network_rejects_wrong_shapes():
    cfg = MLPConfig(3, 1, (4,))
    with pytest.raises(ValueError, match=r"params must have shape \(21,\)"):
        Network(cfg, np.zeros(5))
    net = Network(cfg, np.zeros(21))
    with pytest.raises(ValueError, match=r"X must have shape \(n_samples, 3\), got shape \(2, 4\)"):
        net.predict(np.zeros((2, 4)))
    with pytest.raises(ValueError, match="predict_proba needs task='classification'"):
        net.predict_proba(np.zeros((2, 3)))
