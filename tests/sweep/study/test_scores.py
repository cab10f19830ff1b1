"""Tests of sweep/study/scores.py against hand-worked numbers.

Sources: QLIKE as in Patton (2011), "Volatility forecast comparison using imperfect volatility proxies",
J. Econometrics 160: L(y, f) = y/f - log(y/f) - 1 on variances; the log MSE mean((log y - log f)^2);
the Mincer-Zarnowitz R^2 against statsmodels' OLS.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm

from sweep.study import FORECAST_FLOOR, OBJECTIVES, fold_mean, mean_dicts, score_forecasts, window_losses

TRUTH = np.array([[2.0, 1.0], [1.0, 4.0]])
FORECAST = np.array([[1.0, 2.0], [1.0, 1.0]])


def test_score_forecasts_qlike_hand_worked():
    # Patton (2011): y/f - log(y/f) - 1 per entry:
    #   (2, 1): 2 - ln 2 - 1;  (1, 2): 1/2 + ln 2 - 1;  (1, 1): 0;  (4, 1): 4 - ln 4 - 1
    # sum = 3.5 - 2 ln 2, mean of 4 = 0.875 - ln(2)/2 = 0.52842640972...
    assert score_forecasts("qlike", TRUTH, FORECAST) == pytest.approx(0.875 - math.log(2) / 2, rel=1e-14)
    assert score_forecasts("qlike", TRUTH, FORECAST) == pytest.approx(0.5284264097200273, rel=1e-14)
    # a perfect forecast has loss 0 (Patton 2011: the minimum is at f = y)
    assert score_forecasts("qlike", TRUTH, TRUTH) == 0.0


def test_score_forecasts_qlike_depends_only_on_the_ratio():
    # y/f - log(y/f) - 1 is unchanged when y and f share a scale (Patton 2011, homogeneous of degree 0):
    # daily variances of about 1e-4 score as the same ratios in units of 1
    assert score_forecasts("qlike", 1e-4 * TRUTH, 1e-4 * FORECAST) == pytest.approx(
        score_forecasts("qlike", TRUTH, FORECAST), rel=1e-12)


def test_score_forecasts_mse_log_hand_worked():
    # (log e - log 1)^2 = 1 and (log 1 - log e^2)^2 = 4: mean 2.5
    truth = np.array([[math.e, 1.0]])
    forecast = np.array([[1.0, math.e ** 2]])
    assert score_forecasts("mse_log", truth, forecast) == pytest.approx(2.5, rel=1e-14)


def test_score_forecasts_mse_hand_worked():
    # squared errors 1, 1, 0, 9: mean 11/4
    assert score_forecasts("mse", TRUTH, FORECAST) == pytest.approx(2.75, rel=1e-15)


@pytest.mark.parametrize("objective", OBJECTIVES["regression"])
@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_score_forecasts_non_finite_forecast_gives_nan(objective, bad):
    forecast = FORECAST.copy()
    forecast[1, 0] = bad
    # a diverged network scores NaN (not a number that could rank), whatever the objective
    assert math.isnan(score_forecasts(objective, TRUTH, forecast))


def test_score_forecasts_floors_zero_and_negative_forecasts():
    truth = np.array([[4 * FORECAST_FLOOR]])
    # a forecast of 0 or below is raised to the floor: y/f = 4, QLIKE = 4 - ln 4 - 1 (Patton 2011)
    for forecast in (0.0, -1.0):
        assert score_forecasts("qlike", truth, np.array([[forecast]])) == pytest.approx(3 - math.log(4), rel=1e-12)


def test_score_forecasts_refuses_an_unknown_objective():
    with pytest.raises(ValueError, match=r"unknown objective 'deviance'; use one of qlike, mse_log, mse"):
        score_forecasts("deviance", TRUTH, FORECAST)


def test_window_losses_lists_every_regression_loss():
    rng = np.random.default_rng(0)
    truth = rng.lognormal(size=(40, 3))
    forecast = truth * rng.lognormal(sigma=0.3, size=(40, 3))
    losses = window_losses(truth, forecast)
    assert list(losses) == ["qlike", "mse_log", "mse", "mae", "mz_r2"]
    for name in OBJECTIVES["regression"]:
        assert losses[name] == score_forecasts(name, truth, forecast)
    # mean absolute error by hand
    assert losses["mae"] == pytest.approx(np.mean(np.abs(truth - forecast)), rel=1e-14)
    # Mincer-Zarnowitz: R^2 of the OLS of y on a constant and f (statsmodels), averaged over horizons
    r2 = [sm.OLS(truth[:, j], sm.add_constant(forecast[:, j])).fit().rsquared for j in range(3)]
    assert losses["mz_r2"] == pytest.approx(np.mean(r2), rel=1e-10)


def test_window_losses_hand_worked_on_the_small_example():
    truth = np.vstack([TRUTH, [[3.0, 2.0]]])
    forecast = np.vstack([FORECAST, [[3.0, 2.0]]])
    losses = window_losses(truth, forecast)
    # absolute errors 1, 1, 0, 3, 0, 0: mean 5/6; squared errors 1, 1, 0, 9, 0, 0: mean 11/6
    assert losses["mae"] == pytest.approx(5 / 6, rel=1e-15)
    assert losses["mse"] == pytest.approx(11 / 6, rel=1e-15)
    # Patton (2011) QLIKE: the same four entries as before plus two perfect ones, over 6 entries
    assert losses["qlike"] == pytest.approx((3.5 - 2 * math.log(2)) / 6, rel=1e-14)


def test_fold_mean_of_one_split_is_its_score_and_of_folds_their_mean():
    # one split: the value itself, not a recomputed mean
    assert fold_mean([0.1 + 0.2]) == 0.1 + 0.2
    assert fold_mean([np.float32(0.5)]) == 0.5 and type(fold_mean([np.float32(0.5)])) is float
    # several folds: their arithmetic mean
    assert fold_mean([1.0, 2.0, 4.0]) == pytest.approx(7 / 3, rel=1e-15)
    assert math.isnan(fold_mean([1.0, float("nan")]))


def test_mean_dicts_takes_the_fold_mean_key_by_key():
    assert mean_dicts([{"qlike": 1.0, "mse": 2.0}, {"qlike": 3.0, "mse": 6.0}]) == {"qlike": 2.0, "mse": 4.0}
    assert mean_dicts([{"qlike": 0.25}]) == {"qlike": 0.25}
