"""Tests of trainers/fit.py: the loop, early stopping, divergence, determinism, stacking, references."""

import hashlib
import math
import os
import subprocess
import sys
import textwrap
from dataclasses import replace

import numpy as np
import pytest
from sklearn.datasets import load_diabetes, load_digits
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.preprocessing import StandardScaler

from trainers import losses
from trainers.fit import STOP_REASONS, TrainConfig, _Stack, fit_mlp, fit_mlp_stacked, train_mlp
from trainers.mlp import MLPConfig, init_params

pytestmark = [pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning"),
              pytest.mark.usefixtures("one_blas_thread")]


def _noise(seed=0, n=120, n_in=5, n_out=2):
    """Inputs and targets that are independent: any fit beyond the mean is overfitting."""
    rng = np.random.default_rng(seed)
    return (rng.standard_normal((n, n_in)), rng.standard_normal((n, n_out)),
            rng.standard_normal((n, n_in)), rng.standard_normal((n, n_out)))


def _signal(seed=0, n=200, n_in=4, n_out=2):
    rng = np.random.default_rng(seed)
    W = rng.standard_normal((n_in, n_out))
    X, Xv = rng.standard_normal((n, n_in)), rng.standard_normal((n // 2, n_in))
    return X, np.tanh(X @ W) + 0.1 * rng.standard_normal((n, n_out)), Xv, np.tanh(Xv @ W)


def _losses(history):
    return [(r.index, r.train_loss, r.valid_loss, r.valid_score) for r in history]


# ---------------------------------------------------------------- references


def test_linear_model_full_batch_matches_lstsq():
    X, y = load_diabetes(return_X_y=True)  # scikit-learn's bundled diabetes data (Efron et al. 2004)
    X = StandardScaler().fit_transform(X)
    y = (y - y.mean()) / y.std()
    cfg = MLPConfig(X.shape[1], 1, ())
    tc = TrainConfig(batch_size=10_000, max_epochs=3000, patience=3000, optimizer="sgd",
                     learning_rate=0.05, momentum=0.9)
    res = fit_mlp(cfg, tc, X, y, X, y, rng=np.random.default_rng(0))
    coef, *_ = np.linalg.lstsq(np.column_stack([X, np.ones(len(X))]), y, rcond=None)
    # numpy.linalg.lstsq on [X, 1] is the reference least-squares solution
    np.testing.assert_allclose(res.network.params, coef, atol=1e-6)


def test_regression_held_out_loss_close_to_sklearn_mlp_regressor():
    X, y = load_diabetes(return_X_y=True)  # scikit-learn's bundled diabetes data
    y = y / y.std()
    Xtr, Xte, ytr, yte = X[:340], X[340:], y[:340], y[340:]
    sc = StandardScaler().fit(Xtr)
    Xtr, Xte = sc.transform(Xtr), sc.transform(Xte)
    mu = ytr.mean()
    epochs, batch, wd = 60, 34, 1e-3
    ours, ref = [], []
    for seed in range(3):
        cfg = MLPConfig(10, 1, (32,), activation="relu", init="glorot")  # sklearn initialises Glorot-uniform
        tc = TrainConfig(batch_size=batch, max_epochs=epochs, patience=epochs, learning_rate=1e-3,
                         weight_decay=wd)
        # validation = training window, so no held-out data is used to pick the epoch
        res = fit_mlp(cfg, tc, Xtr, ytr - mu, Xtr, ytr - mu, rng=np.random.default_rng(seed))
        ours.append(losses.mse(res.network.predict(Xte)[:, 0] + mu, yte))
        # scikit-learn MLPRegressor: same architecture, adam, lr, batch, epochs; alpha = wd * batch
        sk = MLPRegressor(hidden_layer_sizes=(32,), solver="adam", learning_rate_init=1e-3, batch_size=batch,
                          max_iter=epochs, alpha=wd * batch, tol=0.0, n_iter_no_change=epochs + 1,
                          random_state=seed).fit(Xtr, ytr - mu)
        ref.append(losses.mse(sk.predict(Xte) + mu, yte))
    assert np.mean(ours) <= 1.10 * np.mean(ref), (ours, ref)


def test_classification_held_out_log_loss_close_to_sklearn_mlp_classifier():
    X, y = load_digits(return_X_y=True)  # scikit-learn's bundled handwritten digits (UCI)
    Xtr, Xte, ytr, yte = X[:1200], X[1200:], y[:1200], y[1200:]
    sc = StandardScaler().fit(Xtr)
    Xtr, Xte = sc.transform(Xtr), sc.transform(Xte)
    epochs, batch = 15, 64
    ours, ref = [], []
    for seed in range(3):
        cfg = MLPConfig(64, 10, (32,), activation="relu", task="classification", init="glorot")
        tc = TrainConfig(batch_size=batch, max_epochs=epochs, patience=epochs, learning_rate=1e-3)
        res = fit_mlp(cfg, tc, Xtr, ytr, Xtr, ytr, rng=np.random.default_rng(seed))
        ours.append(losses.cross_entropy(res.network.predict_proba(Xte), yte))
        # scikit-learn MLPClassifier with the same architecture and adam settings is the reference
        sk = MLPClassifier(hidden_layer_sizes=(32,), solver="adam", learning_rate_init=1e-3, batch_size=batch,
                           max_iter=epochs, alpha=0.0, tol=0.0, n_iter_no_change=epochs + 1,
                           random_state=seed).fit(Xtr, ytr)
        ref.append(losses.cross_entropy(sk.predict_proba(Xte), yte))
    assert np.mean(ours) <= 1.10 * np.mean(ref), (ours, ref)
    assert np.mean(res.network.predict(Xte) == yte) > 0.85


# ---------------------------------------------------------------- the loop


def test_one_epoch_of_sgd_follows_shuffle_and_keeps_partial_batch():
    rng = np.random.default_rng(5)
    X, y = rng.standard_normal((10, 3)), rng.standard_normal((10, 1))
    cfg = MLPConfig(3, 1, ())
    tc = TrainConfig(batch_size=4, max_epochs=1, optimizer="sgd", learning_rate=0.1, momentum=0.0)
    res = fit_mlp(cfg, tc, X, y, X, y, rng=np.random.default_rng(11))
    # replay by hand: init from the first spawned generator, permutation from the second, batches of
    # 4, 4 and 2 rows; the gradient of mean((Xa w - y)^2) is 2 Xa^T (Xa w - y) / b (common practice)
    init_rng, shuffle_rng = np.random.default_rng(11).spawn(2)
    w = init_params(cfg, rng=init_rng).reshape(4, 1)
    Xa = np.column_stack([X, np.ones(10)])
    perm = shuffle_rng.permutation(10)
    for rows in (perm[0:4], perm[4:8], perm[8:10]):
        xb, yb = Xa[rows], y[rows]
        w = w - 0.1 * 2 * xb.T @ (xb @ w - yb) / len(rows)
    np.testing.assert_allclose(res.network.params, w.ravel(), rtol=1e-13)


def test_early_stopping_with_patience_restores_best_weights():
    X, y, Xv, yv = _noise(1)
    cfg = MLPConfig(5, 2, (64,))
    tc = TrainConfig(batch_size=8, max_epochs=200, patience=4, learning_rate=1e-2)
    res = fit_mlp(cfg, tc, X, y, Xv, yv, rng=np.random.default_rng(0))
    assert res.stop_reason == "patience"
    assert len(res.history) == res.best_epoch + 4 < 200
    vals = [r.valid_loss for r in res.history]
    assert res.best_epoch == int(np.argmin(vals)) + 1
    # the returned weights reproduce the best epoch's validation loss, not the last epoch's
    assert losses.mse(res.network.predict(Xv), yv) == pytest.approx(vals[res.best_epoch - 1], rel=1e-12)
    assert vals[-1] > vals[res.best_epoch - 1]
    assert res.gap == pytest.approx(res.valid_loss - res.train_loss)
    assert res.train_loss == res.history[res.best_epoch - 1].train_loss


def test_min_delta_counts_only_large_improvements():
    X, y, Xv, yv = _signal(2)
    cfg = MLPConfig(4, 2, (16,))
    tc = TrainConfig(batch_size=32, max_epochs=50, patience=3, min_delta=10.0)
    res = fit_mlp(cfg, tc, X, y, Xv, yv, rng=np.random.default_rng(0))
    # no decrease can exceed 10, so epoch 1 stays best and the run ends after 1 + patience epochs
    assert (res.best_epoch, len(res.history), res.stop_reason) == (1, 4, "patience")


def test_valid_score_drives_early_stopping():
    X, y, Xv, yv = _signal(3)
    cfg = MLPConfig(4, 2, (16,))
    tc = TrainConfig(batch_size=16, max_epochs=30, patience=5)
    seen = []

    def score(outputs):
        seen.append(outputs.shape)
        return 1.0  # never improves after the first epoch

    res = fit_mlp(cfg, tc, X, y, Xv, yv, rng=np.random.default_rng(0), valid_score=score)
    assert seen[0] == (100, 2)
    assert (res.best_epoch, len(res.history), res.valid_score) == (1, 6, 1.0)
    assert res.history[-1].valid_loss < res.history[0].valid_loss  # the loss alone would have gone on


def test_max_epochs_stop():
    X, y, Xv, yv = _signal(4)
    res = fit_mlp(MLPConfig(4, 2, (8,)), TrainConfig(max_epochs=3), X, y, Xv, yv, rng=np.random.default_rng(0))
    assert res.stop_reason == "max_epochs" and len(res.history) == 3 and res.stop_reason in STOP_REASONS


def test_divergence_returns_finite_initial_weights_and_says_so():
    X, y, Xv, yv = _signal(5)
    cfg = MLPConfig(4, 2, (16,))
    tc = TrainConfig(batch_size=16, max_epochs=20, optimizer="sgd", learning_rate=1e6)
    res = fit_mlp(cfg, tc, X, y, Xv, yv, rng=np.random.default_rng(0))
    assert res.stop_reason == "diverged" and res.best_epoch == 0
    assert np.isfinite(res.network.params).all()
    expected = init_params(cfg, rng=np.random.default_rng(0).spawn(2)[0])
    np.testing.assert_array_equal(res.network.params, expected)
    assert "diverged" in res.note and "initial weights" in res.note
    assert math.isnan(res.valid_loss)


def test_divergence_after_good_epochs_restores_best():
    X, y, Xv, yv = _signal(6)
    cfg = MLPConfig(4, 2, (16,))
    blow_up = {"epoch": 0}

    def score(outputs):  # a scorer that turns non-finite at epoch 4
        blow_up["epoch"] += 1
        return float(np.mean(outputs ** 2)) if blow_up["epoch"] < 4 else math.nan

    res = fit_mlp(cfg, TrainConfig(max_epochs=20), X, y, Xv, yv, rng=np.random.default_rng(0), valid_score=score)
    assert res.stop_reason == "diverged" and len(res.history) == 4 and 1 <= res.best_epoch <= 3
    assert "restored from epoch" in res.note


def test_leaving_the_loop_gives_stopped():
    X, y, Xv, yv = _signal(7)
    run = train_mlp(MLPConfig(4, 2, (8,)), TrainConfig(max_epochs=50), X, y, Xv, yv, rng=np.random.default_rng(0))
    for epoch in run:
        if epoch.index == 3:
            break
    res = run.result()
    assert res.stop_reason == "stopped" and len(res.history) == 3 and res.best_epoch >= 1
    assert [r.index for r in res.history] == [1, 2, 3] and all(r.seconds > 0 for r in res.history)


def test_dropout_is_off_in_evaluation():
    X, y, Xv, yv = _signal(8)
    cfg = MLPConfig(4, 2, (32,), dropout=0.5)
    res = fit_mlp(cfg, TrainConfig(max_epochs=3), X, y, Xv, yv, rng=np.random.default_rng(0))
    net = res.network
    np.testing.assert_array_equal(net.predict(Xv), net.predict(Xv))
    assert losses.mse(net.predict(Xv), yv) == pytest.approx(res.valid_loss, rel=1e-12)
    assert losses.mse(net.predict(X), y) == pytest.approx(res.train_loss, rel=1e-12)


def test_dropout_masks_are_inverted_with_the_configured_rate():
    X, y, Xv, yv = _signal(13, n=2000)
    cfg = MLPConfig(4, 2, (50, 30), dropout=0.3)
    stack = _Stack(cfg, TrainConfig(max_epochs=2), X, y, Xv, yv, [np.random.default_rng(0)], None)
    stack.run_epoch()
    for m in stack.masks:
        # inverted dropout (Srivastava et al. 2014, scaled at training time): kept units are scaled by 1/(1-p)
        assert set(np.unique(m)) == {0.0, 1 / 0.7}
        assert abs(np.mean(m == 0) - 0.3) < 0.01  # binomial rate p=0.3 over 60k-100k draws
        assert m.mean() == pytest.approx(1.0, abs=0.02)  # expectation preserved


def test_dropout_never_touches_inputs_or_outputs():
    # a network without hidden layers has nothing to drop: dropout must change nothing at all
    X, y, Xv, yv = _signal(14)
    tc = TrainConfig(batch_size=16, max_epochs=5)
    a = fit_mlp(MLPConfig(4, 2, (), dropout=0.5), tc, X, y, Xv, yv, rng=np.random.default_rng(3))
    b = fit_mlp(MLPConfig(4, 2, (), dropout=0.0), tc, X, y, Xv, yv, rng=np.random.default_rng(3))
    assert a.network.params.tobytes() == b.network.params.tobytes()


def test_batch_size_above_rows_is_full_batch():
    X, y, Xv, yv = _signal(15, n=50)
    cfg = MLPConfig(4, 2, (8,))
    full = fit_mlp(cfg, TrainConfig(batch_size=50, max_epochs=4), X, y, Xv, yv, rng=np.random.default_rng(0))
    huge = fit_mlp(cfg, TrainConfig(batch_size=10**6, max_epochs=4), X, y, Xv, yv, rng=np.random.default_rng(0))
    assert full.network.params.tobytes() == huge.network.params.tobytes()
    # one Adam step per epoch: the first step moves every weight that has a gradient by about lr
    # (Kingma and Ba 2015, section 2.1)
    one = fit_mlp(cfg, TrainConfig(batch_size=10**6, max_epochs=1), X, y, Xv, yv, rng=np.random.default_rng(0))
    init = init_params(cfg, rng=np.random.default_rng(0).spawn(2)[0])
    moved = np.abs(one.network.params - init)
    assert np.median(moved[moved > 0]) == pytest.approx(1e-3, rel=1e-3)


# ---------------------------------------------------------------- determinism and stacking


def test_same_seed_same_weights_and_history():
    X, y, Xv, yv = _noise(9)
    cfg = MLPConfig(5, 2, (16, 8), dropout=0.2)
    tc = TrainConfig(batch_size=16, max_epochs=8)
    a = fit_mlp(cfg, tc, X, y, Xv, yv, rng=np.random.default_rng(42))
    b = fit_mlp(cfg, tc, X, y, Xv, yv, rng=np.random.default_rng(42))
    c = fit_mlp(cfg, tc, X, y, Xv, yv, rng=np.random.default_rng(43))
    assert a.network.params.tobytes() == b.network.params.tobytes()
    assert _losses(a.history) == _losses(b.history)
    assert a.network.params.tobytes() != c.network.params.tobytes()


_CHILD = textwrap.dedent("""
    import hashlib, numpy as np
    from trainers.fit import TrainConfig, fit_mlp
    from trainers.mlp import MLPConfig
    rng = np.random.default_rng(0)
    X, y, Xv, yv = (rng.standard_normal(s) for s in [(120, 5), (120, 2), (120, 5), (120, 2)])
    res = fit_mlp(MLPConfig(5, 2, (16, 8), dropout=0.2), TrainConfig(batch_size=16, max_epochs=6),
                  X, y, Xv, yv, rng=np.random.default_rng(42))
    print(hashlib.sha256(res.network.params.tobytes()).hexdigest())
    print(repr([(r.index, r.train_loss, r.valid_loss) for r in res.history]))
""")


def test_same_seed_same_result_in_another_process():
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
    out = subprocess.run([sys.executable, "-c", _CHILD], capture_output=True, text=True, check=True, env=env).stdout
    rng = np.random.default_rng(0)
    X, y, Xv, yv = (rng.standard_normal(s) for s in [(120, 5), (120, 2), (120, 5), (120, 2)])
    res = fit_mlp(MLPConfig(5, 2, (16, 8), dropout=0.2), TrainConfig(batch_size=16, max_epochs=6),
                  X, y, Xv, yv, rng=np.random.default_rng(42))
    here = hashlib.sha256(res.network.params.tobytes()).hexdigest() + "\n" + repr(
        [(r.index, r.train_loss, r.valid_loss) for r in res.history]) + "\n"
    assert out == here


@pytest.mark.parametrize("task,activation,optimizer,dtype,hidden", [
    ("regression", "relu", "adam", "float64", (32, 16)),
    ("classification", "relu", "adam", "float64", (32, 16)),
    ("regression", "tanh", "sgd", "float32", (32, 16)),
    ("regression", "sigmoid", "adam", "float64", (8, 8, 8)),
    ("regression", "relu", "sgd", "float64", ()),
])
def test_stacked_equals_single_runs_with_different_stop_epochs(task, activation, optimizer, dtype, hidden):
    X, y, Xv, yv = _noise(10)
    if task == "classification":
        y, yv = (y[:, 0] > 0).astype(int) + (y[:, 1] > 0), (yv[:, 0] > 0).astype(int) + (yv[:, 1] > 0)
    cfg = MLPConfig(5, 3 if task == "classification" else 2, hidden, activation=activation, task=task,
                    dropout=0.1 if hidden else 0.0, dtype=dtype)
    tc = TrainConfig(batch_size=16, max_epochs=40, patience=3, optimizer=optimizer,
                     learning_rate=3e-2 if optimizer == "sgd" else 3e-3, weight_decay=1e-3)
    seeds = [0, 1, 2, 3, 4]
    stacked = fit_mlp_stacked(cfg, tc, X, y, Xv, yv, rngs=[np.random.default_rng(s) for s in seeds])
    single = [fit_mlp(cfg, tc, X, y, Xv, yv, rng=np.random.default_rng(s)) for s in seeds]
    assert len({len(r.history) for r in single}) >= 2  # the networks stop at different epochs
    for s, k in zip(single, stacked):
        assert (s.best_epoch, s.stop_reason) == (k.best_epoch, k.stop_reason)
        assert _losses(s.history) == _losses(k.history)
        # the contract: identical or within 1e-12 (float64); on one BLAS thread we see identical bits
        np.testing.assert_allclose(k.network.params, s.network.params, rtol=0, atol=1e-12)


def test_float32_training_runs_in_float32():
    X, y, Xv, yv = _signal(11)
    res = fit_mlp(MLPConfig(4, 2, (8,), dtype="float32"), TrainConfig(max_epochs=3), X, y, Xv, yv,
                  rng=np.random.default_rng(0))
    assert res.network.params.dtype == np.float32 and res.history[-1].valid_loss < res.history[0].valid_loss


# ---------------------------------------------------------------- validation


@pytest.mark.parametrize("kwargs,match", [
    ({"learning_rate": -1.0}, r"learning_rate must be a finite number > 0, got learning_rate=-1.0; "
                              r"set space.learning_rate in the study file"),
    ({"learning_rate": float("nan")}, r"learning_rate=nan"),
    ({"batch_size": 0}, r"batch_size must be an integer >= 1, got batch_size=0"),
    ({"batch_size": 8.5}, r"batch_size=8.5"),
    ({"max_epochs": True}, r"max_epochs=True"),
    ({"patience": 0}, r"patience must be an integer >= 1"),
    ({"min_delta": -0.1}, r"min_delta must be a finite number >= 0"),
    ({"optimizer": "rmsprop"}, r"optimizer must be one of .*got optimizer='rmsprop'"),
    ({"momentum": 1.0}, r"momentum must be a finite number in \[0, 1\)"),
    ({"weight_decay": -1e-4}, r"weight_decay=-0.0001"),
    ({"beta2": 1.5}, r"beta2 must be"),
    ({"eps": 0.0}, r"eps must be a finite number > 0"),
])
def test_train_config_rejects_bad_values(kwargs, match):
    with pytest.raises(ValueError, match=match):
        TrainConfig(**kwargs)


def test_train_mlp_rejects_bad_data():
    X, y, Xv, yv = _signal(12)
    cfg, tc, r = MLPConfig(4, 2, (8,)), TrainConfig(max_epochs=1), np.random.default_rng(0)
    with pytest.raises(ValueError, match=r"X_train must have shape \(n_rows >= 1, 4\), got shape \(200, 3\)"):
        train_mlp(cfg, tc, X[:, :3], y, Xv, yv, rng=r)
    Xn = X.copy()
    Xn[3, 1] = np.nan
    with pytest.raises(ValueError, match=r"X_train must hold finite numbers, got 1 NaN"):
        train_mlp(cfg, tc, Xn, y, Xv, yv, rng=r)
    with pytest.raises(ValueError, match=r"y_valid must have shape \(100, 2\)"):
        train_mlp(cfg, tc, X, y, Xv, yv[:, :1], rng=r)
    with pytest.raises(ValueError, match=r"y_train must have 200 rows"):
        train_mlp(cfg, tc, X, y[:10], Xv, yv, rng=r)
    ccfg = MLPConfig(4, 3, (8,), task="classification")
    with pytest.raises(ValueError, match=r"y_train must be integer class labels in 0..2"):
        train_mlp(ccfg, tc, X, np.full(200, 3), Xv, np.zeros(100, int), rng=r)
    with pytest.raises(TypeError, match="numpy.random.Generator"):
        train_mlp(cfg, tc, X, y, Xv, yv, rng=0)
    with pytest.raises(TypeError, match="MLPConfig and a TrainConfig"):
        train_mlp(tc, cfg, X, y, Xv, yv, rng=r)
    assert replace(tc, max_epochs=2).max_epochs == 2
