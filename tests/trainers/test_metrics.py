"""Tests of trainers/metrics.py against published formulas and reference libraries."""

import arch.data.sp500
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from arch.bootstrap import MCS, SPA
from scipy import optimize, stats
from sklearn.metrics import accuracy_score, log_loss, mean_absolute_error, mean_squared_error

from trainers import metrics
from trainers.metrics import (
    accuracy,
    cross_entropy,
    deviance,
    diebold_mariano,
    loss_series,
    mae,
    model_confidence_set,
    mse,
    mse_log,
    mz_r2,
    qlike,
    superior_predictive_ability,
)


@pytest.fixture(scope="module")
def sp500_variance():
    """Squared daily percent returns of the S&P 500 (open dataset shipped by arch) and an EWMA forecast."""
    close = arch.data.sp500.load()["Adj Close"]
    r2 = (100 * np.log(close).diff().dropna()).to_numpy() ** 2
    r2 = r2[:1500] + 1e-4  # keep every proxy value > 0 for QLIKE
    f = np.empty_like(r2)
    f[0] = r2[:22].mean()
    for t in range(1, r2.size):
        f[t] = 0.94 * f[t - 1] + 0.06 * r2[t - 1]
    return r2, f


def _positive_pair(rng, shape):
    y = rng.lognormal(0.0, 0.7, size=shape)
    f = rng.lognormal(0.0, 0.7, size=shape)
    return y, f


# ----------------------------------------------------------------------------- regression losses
def test_mse_mae_equal_sklearn_on_two_columns():
    y, f = _positive_pair(np.random.default_rng(0), (200, 3))
    # scikit-learn mean_squared_error / mean_absolute_error, uniform average over outputs
    assert mse(y, f) == pytest.approx(mean_squared_error(y, f), rel=1e-12)
    assert mae(y, f) == pytest.approx(mean_absolute_error(y, f), rel=1e-12)


def test_qlike_worked_number_and_zero_at_truth():
    # Patton (2011), J. Econometrics 160, eq. for QLIKE: L(y, f) = y/f - log(y/f) - 1.
    # Worked by hand: y=4, f=2 -> 2 - log 2 - 1 = 0.3068528...; y=f -> 0.
    assert qlike([4.0], [2.0]) == pytest.approx(1.0 - np.log(2.0), rel=1e-14)
    assert qlike([1.0, 2.0, 4.0], [1.0, 2.0, 2.0]) == pytest.approx((1.0 - np.log(2.0)) / 3, rel=1e-14)
    assert qlike([3.0, 0.5], [3.0, 0.5]) == 0.0


def test_qlike_ranks_like_log_form():
    # Patton (2011): y/f - log(y/f) - 1 differs from log f + y/f only by a function of y,
    # so the difference between the two forms is the same for every forecast f.
    rng = np.random.default_rng(1)
    y = rng.lognormal(size=300)
    diffs = []
    for scale in (0.5, 1.0, 2.0):
        f = scale * rng.lognormal(size=300)
        diffs.append(qlike(y, f) - np.mean(np.log(f) + y / f))
    assert np.ptp(diffs) < 1e-12


def test_qlike_minimised_at_mean_of_proxy():
    # Patton (2011) robustness: the constant forecast minimising expected QLIKE is the mean of the proxy.
    y = np.random.default_rng(2).lognormal(0.0, 1.0, size=500)
    best = optimize.minimize_scalar(lambda c: qlike(y, np.full_like(y, c)), bounds=(1e-3, 20), method="bounded",
                                    options={"xatol": 1e-10})
    assert best.x == pytest.approx(y.mean(), rel=1e-6)


def test_mse_log_equals_formula():
    y, f = _positive_pair(np.random.default_rng(3), (50, 2))
    # definition: mean of squared log differences (common practice)
    assert mse_log(y, f) == pytest.approx(mean_squared_error(np.log(y), np.log(f)), rel=1e-12)


@pytest.mark.parametrize("name", metrics.LOSSES)
def test_loss_series_is_per_row_mean_over_columns(name):
    y, f = _positive_pair(np.random.default_rng(4), (40, 3))
    rows = loss_series(name, y, f)
    per_column = np.column_stack([loss_series(name, y[:, j], f[:, j]) for j in range(3)])
    assert rows.shape == (40,)
    np.testing.assert_allclose(rows, per_column.mean(axis=1), rtol=1e-14)
    scalar = {"mse": mse, "mae": mae, "qlike": qlike, "mse_log": mse_log}[name]
    assert scalar(y, f) == pytest.approx(rows.mean(), rel=1e-12)


def test_mz_r2_equals_statsmodels_on_sp500(sp500_variance):
    y, f = sp500_variance
    # statsmodels OLS of y on a constant and f (Mincer-Zarnowitz regression), rsquared
    ref = sm.OLS(y, sm.add_constant(f)).fit().rsquared
    assert mz_r2(y, f) == pytest.approx(ref, rel=1e-10)
    assert mz_r2(y[:, None], f[:, None]) == pytest.approx(ref, rel=1e-10)


def test_losses_on_sp500_match_sklearn(sp500_variance):
    y, f = sp500_variance
    assert mse(y, f) == pytest.approx(mean_squared_error(y, f), rel=1e-12)  # scikit-learn
    # QLIKE by its formula (Patton 2011) element by element in plain Python
    ref = sum(a / b - np.log(a / b) - 1 for a, b in zip(y.tolist(), f.tolist())) / y.size
    assert qlike(y, f) == pytest.approx(ref, rel=1e-12)


@pytest.mark.parametrize(
    ("func", "y", "f", "match"),
    [
        (qlike, [1.0, -1.0], [1.0, 1.0], "qlike needs level variances > 0"),
        (mse_log, [1.0, 1.0], [0.0, 1.0], "mse_log needs level variances > 0"),
        (mse, [1.0, 2.0], [1.0], "same shape"),
        (mae, [1.0, np.nan], [1.0, 1.0], "non-finite"),
        (mz_r2, np.ones((5, 2)), np.ones((5, 2)), "one forecast column"),
        (mz_r2, [1.0, 1.0, 1.0], [1.0, 2.0, 3.0], "constant target"),
    ],
)
def test_regression_losses_reject_bad_input(func, y, f, match):
    with pytest.raises(ValueError, match=match):
        func(y, f)


def test_loss_series_rejects_unknown_name():
    with pytest.raises(ValueError, match="unknown loss 'rmse'"):
        loss_series("rmse", [1.0], [1.0])


# ----------------------------------------------------------------------------- classification
def _proba(rng, n, k):
    raw = rng.random((n, k)) + 0.05
    return raw / raw.sum(axis=1, keepdims=True)


def test_accuracy_equals_sklearn():
    rng = np.random.default_rng(5)
    labels = rng.integers(0, 3, size=200)
    proba = _proba(rng, 200, 3)
    # scikit-learn accuracy_score on the argmax classes
    assert accuracy(labels, proba) == pytest.approx(accuracy_score(labels, proba.argmax(axis=1)), abs=0)
    assert accuracy(labels, proba.argmax(axis=1)) == accuracy_score(labels, proba.argmax(axis=1))


def test_cross_entropy_and_deviance_equal_sklearn_log_loss():
    rng = np.random.default_rng(6)
    labels = rng.integers(0, 3, size=150)
    proba = _proba(rng, 150, 3)
    ref = log_loss(labels, proba, labels=[0, 1, 2])  # scikit-learn mean cross-entropy
    assert cross_entropy(labels, proba) == pytest.approx(ref, rel=1e-12)
    assert deviance(labels, proba) == pytest.approx(2 * 150 * ref, rel=1e-12)


def test_deviance_equals_statsmodels_binomial_deviance():
    rng = np.random.default_rng(7)
    labels = rng.integers(0, 2, size=120)
    p1 = rng.uniform(0.05, 0.95, size=120)
    # statsmodels Binomial family deviance (twice the log-likelihood ratio to the saturated model)
    ref = sm.families.Binomial().deviance(labels.astype(float), p1)
    assert deviance(labels, np.column_stack([1 - p1, p1])) == pytest.approx(ref, rel=1e-10)


def test_cross_entropy_clips_zero_probability_like_sklearn():
    labels = np.array([0, 1])
    proba = np.array([[1.0, 0.0], [1.0, 0.0]])
    assert cross_entropy(labels, proba) == pytest.approx(log_loss(labels, proba, labels=[0, 1]), rel=1e-12)


@pytest.mark.parametrize(
    ("labels", "proba", "match"),
    [
        ([0, 1], [[0.5, 0.6], [0.3, 0.7]], "sum to 1"),
        ([0, 3], [[0.5, 0.5], [0.3, 0.7]], "labels must lie in 0..1"),
        ([0, 1, 1], [[0.5, 0.5], [0.3, 0.7]], "labels has 3 rows"),
        ([0.5, 1], [[0.5, 0.5], [0.3, 0.7]], "integer class indices"),
    ],
)
def test_classification_rejects_bad_input(labels, proba, match):
    with pytest.raises(ValueError, match=match):
        cross_entropy(labels, proba)


# ----------------------------------------------------------------------------- Diebold-Mariano
def test_diebold_mariano_worked_example():
    # Worked by hand from Diebold & Mariano (1995) and Harvey, Leybourne & Newbold (1997):
    # d = [1, 1, 3, 3, 2], T = 5, h = 2: dbar = 2, gamma0 = 4/5, gamma1 = 1/5,
    # LRV = 0.8 + 2*0.2 = 1.2, DM = 2 / sqrt(1.2/5) = 4.0824829;
    # HLN factor sqrt((5 + 1 - 4 + 2/5)/5) = sqrt(0.48), DM* = 2*sqrt(2) = 2.8284271.
    res = diebold_mariano(np.array([1.0, 1, 3, 3, 2]) + 5.0, np.full(5, 5.0), horizon=2)
    assert res.mean_diff == pytest.approx(2.0, rel=1e-14)
    assert res.long_run_variance == pytest.approx(1.2, rel=1e-14)
    assert res.statistic == pytest.approx(2.0 / np.sqrt(0.24), rel=1e-14)
    assert res.hln_statistic == pytest.approx(2.0 * np.sqrt(2.0), rel=1e-14)
    # Student t table (from memory): two-sided 5% critical value for 4 df is 2.776, 4% is 2.999,
    # so the HLN p-value lies between 0.04 and 0.05.
    assert 0.04 < res.hln_pvalue < 0.05
    assert (res.n, res.horizon) == (5, 2)


@pytest.mark.parametrize("horizon", [1, 2, 5, 22])
def test_diebold_mariano_equals_statsmodels_hac(horizon):
    rng = np.random.default_rng(8)
    e = rng.normal(size=600 + horizon)
    d = 0.08 + np.convolve(e, np.ones(horizon), mode="valid")[:600] / np.sqrt(horizon)  # MA(h-1)
    loss_b = rng.lognormal(size=600)
    loss_a = loss_b + d
    res = diebold_mariano(loss_a, loss_b, horizon=horizon)
    # statsmodels: OLS of d on a constant with HAC errors, rectangular (uniform) kernel, maxlags h-1,
    # no small-sample correction -> the DM statistic and its normal p-value (Diebold & Mariano 1995).
    fit = sm.OLS(loss_a - loss_b, np.ones((600, 1))).fit(
        cov_type="HAC", cov_kwds={"maxlags": horizon - 1, "kernel": "uniform", "use_correction": False}
    )
    assert res.statistic == pytest.approx(fit.tvalues[0], rel=1e-10)
    assert res.pvalue == pytest.approx(fit.pvalues[0], rel=1e-8)
    # Harvey, Leybourne & Newbold (1997) correction factor, eq. (9), Student t with T-1 df
    t, h = 600, horizon
    factor = np.sqrt((t + 1 - 2 * h + h * (h - 1) / t) / t)
    assert res.hln_statistic == pytest.approx(fit.tvalues[0] * factor, rel=1e-10)
    assert res.hln_pvalue == pytest.approx(2 * stats.t.sf(abs(fit.tvalues[0] * factor), df=t - 1), rel=1e-8)


def test_diebold_mariano_sign_and_one_sided(sp500_variance):
    y, f = sp500_variance
    good = loss_series("qlike", y, f)
    bad = loss_series("qlike", y, np.full_like(f, y.mean()))  # a constant forecast, far worse on S&P 500
    res = diebold_mariano(good, bad, horizon=1, alternative="less")
    assert res.mean_diff < 0 and res.statistic < 0
    # one-sided p-value is the normal lower tail of the statistic (Diebold & Mariano 1995)
    assert res.pvalue == pytest.approx(stats.norm.cdf(res.statistic), rel=1e-12)
    assert res.pvalue < 1e-3
    two = diebold_mariano(good, bad)
    assert two.pvalue == pytest.approx(2 * res.pvalue, rel=1e-9)


@pytest.mark.parametrize(
    ("a", "b", "kwargs", "match"),
    [
        (np.ones(10), np.ones(10), {}, "long-run variance"),
        (np.ones(10), np.ones(9), {}, "same shape"),
        (np.arange(10.0), np.ones(10), {"horizon": 0}, "horizon must be an integer >= 1"),
        (np.arange(10.0), np.ones(10), {"horizon": 6}, "at least"),
        (np.arange(10.0), np.ones(10), {"alternative": "up"}, "alternative"),
    ],
)
def test_diebold_mariano_rejects_bad_input(a, b, kwargs, match):
    with pytest.raises(ValueError, match=match):
        diebold_mariano(a, b, **kwargs)


# ----------------------------------------------------------------------------- MCS and SPA
@pytest.fixture(scope="module")
def loss_table():
    rng = np.random.default_rng(9)
    base = rng.lognormal(size=(400, 1))
    noise = rng.normal(scale=0.3, size=(400, 4))
    table = pd.DataFrame(base + np.abs(noise), columns=["har", "ewma", "mlp_3", "random_walk"])
    table["random_walk"] += 0.6  # clearly worse
    table["ewma"] += 0.02
    return table


def test_model_confidence_set_equals_arch(loss_table):
    ours = model_confidence_set(loss_table, size=0.10, reps=300, seed=3)
    # arch.bootstrap.MCS called directly on the same losses and seed
    ref = MCS(loss_table, size=0.10, reps=300, seed=3)
    ref.compute()
    assert ours.included == tuple(ref.included)
    assert ours.excluded == tuple(ref.excluded)
    assert ours.pvalues == {k: float(v) for k, v in ref.pvalues["Pvalue"].items()}
    assert all(type(v) is float for v in ours.pvalues.values())


def test_model_confidence_set_excludes_clearly_worse_model(loss_table):
    res = model_confidence_set(loss_table, size=0.10, reps=300, seed=0)
    # a model with +0.6 on every loss cannot be among the best (Hansen, Lunde & Nason 2011)
    assert "random_walk" in res.excluded
    assert res.pvalues["random_walk"] < 0.10
    assert set(res.included) | set(res.excluded) == set(loss_table.columns)


def test_superior_predictive_ability_equals_arch(loss_table):
    bench = loss_table["random_walk"]
    models = loss_table.drop(columns="random_walk")
    ours = superior_predictive_ability(bench, models, reps=300, seed=4)
    # arch.bootstrap.SPA called directly
    ref = SPA(bench.to_numpy(), models.to_numpy(), reps=300, seed=4)
    ref.compute()
    assert ours.pvalues == {k: float(v) for k, v in ref.pvalues.items()}
    assert ours.better_models == tuple(models.columns[ref.better_models(0.05)])
    # sanity: every model beats a benchmark that is 0.6 worse on every row
    assert ours.pvalues["consistent"] < 0.05
    assert set(ours.better_models) == set(models.columns)


def test_superior_predictive_ability_benchmark_best_is_not_rejected(loss_table):
    bench = loss_table["har"]
    models = loss_table[["random_walk"]]
    res = superior_predictive_ability(bench, models, reps=300, seed=5)
    # Hansen (2005): a model that is worse everywhere gives no evidence against the benchmark,
    # so the null (no model beats it) is not rejected at 10%
    assert res.pvalues["consistent"] > 0.10
    assert res.better_models == ()


def test_mcs_and_spa_reject_bad_input(loss_table):
    with pytest.raises(ValueError, match="size must be in"):
        model_confidence_set(loss_table, size=1.5)
    with pytest.raises(ValueError, match="non-finite"):
        model_confidence_set(loss_table.where(loss_table > 0.3))
    with pytest.raises(ValueError, match="bench_losses has 10 rows"):
        superior_predictive_ability(np.ones(10), loss_table)
