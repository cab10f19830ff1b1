"""Tests of trainers/optim.py against scikit-learn's optimizers and closed forms."""

import numpy as np
import pytest
from sklearn.neural_network._stochastic_optimizers import AdamOptimizer, SGDOptimizer

from trainers.fit import TrainConfig
from trainers.optim import SGD, Adam, make_optimizer


def _grad_sequence(n_steps, shape, seed=0):
    rng = np.random.default_rng(seed)
    return [rng.standard_normal(shape) for _ in range(n_steps)]


def test_adam_matches_sklearn_adam_optimizer():
    p0 = np.random.default_rng(1).standard_normal(12)
    grads = _grad_sequence(25, 12)
    ours = p0.copy()
    opt = Adam(ours.shape, ours.dtype, learning_rate=0.01, beta1=0.8, beta2=0.99, eps=1e-30)
    ref = [p0.copy()]
    sk = AdamOptimizer(ref, learning_rate_init=0.01, beta_1=0.8, beta_2=0.99, epsilon=1e-30)
    for g in grads:
        opt.step(ours, g.copy())
        sk.update_params(ref, [g])
    # scikit-learn's AdamOptimizer (Kingma and Ba 2015, efficient form) is the reference; with a negligible
    # eps the two placements of eps (on sqrt(v) vs sqrt(v_hat)) coincide
    np.testing.assert_allclose(ours, ref[0], rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("momentum", [0.0, 0.9])
def test_sgd_matches_sklearn_sgd_optimizer_without_nesterov(momentum):
    p0 = np.random.default_rng(2).standard_normal(10)
    grads = _grad_sequence(20, 10, seed=3)
    ours = p0.copy()
    opt = SGD(ours.shape, ours.dtype, learning_rate=0.05, momentum=momentum)
    ref = [p0.copy()]
    sk = SGDOptimizer(ref, learning_rate_init=0.05, lr_schedule="constant", momentum=momentum, nesterov=False)
    for g in grads:
        opt.step(ours, g.copy())
        sk.update_params(ref, [g])
    # scikit-learn's SGDOptimizer: v <- mu v - lr g; p <- p + v (equal to ours for a constant rate)
    np.testing.assert_allclose(ours, ref[0], rtol=1e-12, atol=1e-14)


def test_weight_decay_shrinks_weights_not_biases():
    mask = np.array([1.0, 1.0, 0.0])
    p = np.array([2.0, -4.0, 3.0])
    opt = SGD(p.shape, p.dtype, learning_rate=0.1, momentum=0.0, weight_decay=0.5, decay_mask=mask)
    opt.step(p, np.zeros(3))
    # L2 penalty wd/2 ||W||^2 gives w <- w (1 - lr wd) on weights (common practice); the bias is untouched
    np.testing.assert_allclose(p, [2.0 * 0.95, -4.0 * 0.95, 3.0], rtol=1e-15)


def test_adam_on_stack_equals_adam_per_row():
    grads = _grad_sequence(10, (3, 5), seed=4)
    stack = np.ones((3, 5))
    opt = Adam(stack.shape, stack.dtype, learning_rate=0.1, weight_decay=0.01)
    for g in grads:
        opt.step(stack, g.copy())
    for k in range(3):
        row = np.ones(5)
        o = Adam(row.shape, row.dtype, learning_rate=0.1, weight_decay=0.01)
        for g in grads:
            o.step(row, g[k].copy())
        np.testing.assert_array_equal(stack[k], row)


def test_select_keeps_state_of_remaining_rows():
    grads = _grad_sequence(6, (3, 4), seed=5)
    stack = np.zeros((3, 4))
    opt = Adam(stack.shape, stack.dtype, learning_rate=0.1)
    for g in grads[:3]:
        opt.step(stack, g.copy())
    keep = np.array([0, 2])
    stack = stack[keep].copy()
    opt.select(keep)
    for g in grads[3:]:
        opt.step(stack, g[keep].copy())
    full = np.zeros((3, 4))
    o2 = Adam(full.shape, full.dtype, learning_rate=0.1)
    for g in grads:
        o2.step(full, g.copy())
    np.testing.assert_array_equal(stack, full[keep])


def test_adam_float32_stays_float32():
    p = np.ones(4, dtype=np.float32)
    opt = Adam(p.shape, p.dtype, learning_rate=0.1)
    opt.step(p, np.ones(4, dtype=np.float32))
    assert p.dtype == np.float32 and opt.m_sum.dtype == np.float32
    # first Adam step moves each coordinate by about learning_rate (Kingma and Ba 2015, section 2.1)
    np.testing.assert_allclose(p, 0.9, rtol=1e-6)


def test_make_optimizer_follows_train_config():
    assert isinstance(make_optimizer(TrainConfig(optimizer="sgd"), (3,), np.float64), SGD)
    opt = make_optimizer(TrainConfig(optimizer="adam", learning_rate=0.02, beta2=0.9), (3,), np.float64)
    assert isinstance(opt, Adam) and opt.learning_rate == 0.02 and opt.beta2 == 0.9
