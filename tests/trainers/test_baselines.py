"""Tests of trainers/baselines.py against statsmodels, arch, RiskMetrics and independent recursions."""

import dataclasses
import json

import arch.data.sp500
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from arch import arch_model

from trainers.baselines import BASELINES, EWMA_INIT_DAYS, forecast_baselines
from trainers.features import FeatureConfig, build_dataset
from trainers.scenario import generate_market
from trainers.splits import Windows, split_by_fraction

HORIZONS = (1, 5, 22)


@pytest.fixture(scope="module", params=["sp500", "demo_market"])
def dataset(request):
    """Garman-Klass proxy of the first 1500 days of the S&P 500 (open dataset shipped by arch), or of
    1500 days of the invented demo market's index (trainers.scenario)."""
    if request.param == "sp500":
        px = arch.data.sp500.load().rename(columns=str.lower)[["open", "high", "low", "close"]].iloc[:1500]
    else:
        px = generate_market(seed=11, n_days=1500)["harbor_index"]
    ds = build_dataset(px, estimator="garman_klass", horizons=HORIZONS)
    windows = split_by_fraction(len(ds.dates), valid=0.2, test=0.2, embargo=22)
    return ds, windows


def _garch_frame(n_days=1200, seed=0, omega=0.05, alpha=0.08, beta=0.9):
    """Synthetic OHLC whose close-to-close percent returns follow GARCH(1,1) (Bollerslev, 1986)."""
    rng = np.random.default_rng(seed)
    r = np.empty(n_days)
    s2 = omega / (1 - alpha - beta)
    for t in range(n_days):
        r[t] = np.sqrt(s2) * rng.standard_normal()
        s2 = omega + alpha * r[t] ** 2 + beta * s2
    close = 100 * np.exp(np.cumsum(r / 100))
    open_ = np.concatenate([[100.0], close[:-1]])
    spread = np.abs(rng.normal(scale=0.004, size=n_days))
    high = np.maximum(open_, close) * np.exp(spread)
    low = np.minimum(open_, close) * np.exp(-spread)
    index = pd.bdate_range("2001-01-01", periods=n_days, name="date")
    return pd.DataFrame({"open": open_, "high": high, "low": low, "close": close}, index=index)


@pytest.fixture(scope="module")
def synthetic():
    ds = build_dataset(_garch_frame(), estimator="parkinson", horizons=HORIZONS)
    return ds, split_by_fraction(len(ds.dates), valid=0.2, test=0.2, embargo=22)


def _har_design(ds, log):
    """HAR design and targets built here from the proxy with cumulative sums (Corsi, 2009)."""
    v = ds.variance.to_numpy()
    c = np.concatenate([[0.0], np.cumsum(np.nan_to_num(v))])
    pos = ds.variance.index.get_indexer(ds.dates)
    scale = (lambda x: np.log(np.maximum(x, ds.config.floor))) if log else (lambda x: x)
    cols = [scale((c[pos + 1] - c[pos + 1 - w]) / w) for w in (1, 5, 22)]
    Z = np.column_stack([np.ones(len(pos))] + cols)
    targets = {}
    for h in HORIZONS:
        ok = pos + h + 1 < len(c)
        y = np.full(len(pos), np.nan)
        y[ok] = scale((c[pos[ok] + h + 1] - c[pos[ok] + 1]) / h)
        targets[h] = y
    return Z, targets, pos


# ----------------------------------------------------------------------------- shape and trivial cases
def test_forecast_baselines_shape_and_json(dataset):
    ds, w = dataset
    out = forecast_baselines(ds, w, horizons=HORIZONS)
    assert list(out) == list(BASELINES)
    for name, res in out.items():
        assert res.name == name
        assert res.forecasts.index.equals(ds.dates)
        assert list(res.forecasts.columns) == ["h1", "h5", "h22"]
        later = res.forecasts.iloc[np.concatenate([w.valid, w.test])].to_numpy()
        assert np.isfinite(later).all() and (later > 0).all()
        json.dumps(res.params)  # params must be plain JSON types


def test_random_walk_is_last_proxy_value(dataset):
    ds, w = dataset
    f = forecast_baselines(ds, w, horizons=HORIZONS, names=("random_walk",))["random_walk"].forecasts
    # random walk: tomorrow's variance is today's proxy, for every horizon (common practice)
    for col in f.columns:
        np.testing.assert_array_equal(f[col].to_numpy(), ds.variance.loc[ds.dates].to_numpy())


# ----------------------------------------------------------------------------- EWMA
@pytest.mark.parametrize("lam", [0.94, 0.97])
def test_ewma_equals_plain_python_recursion(dataset, lam):
    ds, w = dataset
    res = forecast_baselines(ds, w, horizons=HORIZONS, names=("ewma",), ewma_lambda=lam)["ewma"]
    # RiskMetrics Technical Document (J.P. Morgan/Reuters 1996): s2_{t+1} = lam s2_t + (1 - lam) r_t^2,
    # seeded with the mean squared return of the first 22 returns from the first training origin
    r = ds.returns.loc[ds.dates[w.train[0]]:].tolist()
    seed = sum(x * x for x in r[:EWMA_INIT_DAYS]) / EWMA_INIT_DAYS
    s2, path = seed, []
    for x in r:
        s2 = lam * s2 + (1 - lam) * x * x
        path.append(s2)
    ref = pd.Series(path, index=ds.returns.loc[ds.dates[w.train[0]]:].index).loc[ds.dates]
    for col in ("h1", "h5", "h22"):  # flat over horizons
        np.testing.assert_allclose(res.forecasts[col].to_numpy(), ref.to_numpy(), rtol=1e-12)
    assert res.params["lambda"] == lam and res.params["init_variance"] == pytest.approx(seed, rel=1e-12)


# ----------------------------------------------------------------------------- HAR
@pytest.mark.parametrize("log", [True, False])
def test_har_coefficients_equal_statsmodels(dataset, log):
    ds, w = dataset
    res = forecast_baselines(ds, w, horizons=HORIZONS, names=("har",), log=log)["har"]
    Z, targets, _ = _har_design(ds, log)
    for h in HORIZONS:
        # statsmodels OLS on the same design over the training rows (embargo 22 >= h: all rows usable)
        fit = sm.OLS(targets[h][w.train], Z[w.train]).fit()
        ours = np.array(list(res.params["coefficients"][f"h{h}"].values()))
        np.testing.assert_allclose(ours, fit.params, rtol=1e-8, atol=1e-12)
        assert res.params["n_obs"][f"h{h}"] == len(w.train)
        assert res.params["resid_var"][f"h{h}"] == pytest.approx(fit.scale, rel=1e-8)
        pred = fit.predict(Z)
        level = np.exp(pred) if log else np.maximum(pred, ds.config.floor)  # exp without bias correction
        np.testing.assert_allclose(res.forecasts[f"h{h}"].to_numpy(), level, rtol=1e-8)


def test_har_drops_training_targets_unknown_at_validation_start(dataset):
    ds, _ = dataset
    n = len(ds.dates)
    w = Windows(train=np.arange(0, 800), valid=np.arange(803, 1100), test=np.arange(1130, n), embargo=2)
    res = forecast_baselines(ds, w, horizons=HORIZONS, names=("har",))["har"]
    # a target at s covers s+1..s+h, so only s + h <= first validation origin is known there
    pos = ds.variance.index.get_indexer(ds.dates)
    for h in HORIZONS:
        assert res.params["n_obs"][f"h{h}"] == int(np.sum(pos[:800] + h <= pos[803]))
    assert res.params["n_obs"]["h22"] < 800


@pytest.mark.parametrize("refit", [1, 7])
def test_har_rolling_equals_statsmodels_on_known_rows(dataset, refit):
    ds, w = dataset
    window, min_rows = 400, 120
    res = forecast_baselines(ds, w, horizons=HORIZONS, names=("har_rolling",), har_window=window,
                             har_min_rows=min_rows, har_refit=refit)["har_rolling"]
    Z, targets, pos = _har_design(ds, True)
    for h in HORIZONS:
        col = res.forecasts[f"h{h}"].to_numpy()
        known = [np.flatnonzero(pos + h <= pos[i]) for i in range(len(pos))]  # rows whose target is known at i
        first = next(i for i in range(len(pos)) if len(known[i]) >= min_rows)
        assert np.isnan(col[:first]).all() and np.isfinite(col[first:]).all()
        for i in (first, first + refit + 3, int(w.valid[0]), int(w.test[-1])):
            fit_at = first + ((i - first) // refit) * refit  # last refit origin at or before i
            rows = known[fit_at][-window:]
            # statsmodels OLS on the last `window` rows whose targets are fully known at the refit origin
            fit = sm.OLS(targets[h][rows], Z[rows]).fit()
            assert col[i] == pytest.approx(np.exp(Z[i] @ fit.params), rel=1e-8)
        assert res.params["n_fits"][f"h{h}"] == -(-(len(pos) - first) // refit)


# ----------------------------------------------------------------------------- GARCH
def test_garch_equals_arch_and_garch_recursion(dataset):
    ds, w = dataset
    res = forecast_baselines(ds, w, horizons=HORIZONS, names=("garch",))["garch"]
    r = 100 * ds.returns.loc[ds.dates[w.train[0]]:]
    n_fit = ds.returns.index.get_loc(ds.dates[w.train[-1]]) - ds.returns.index.get_loc(ds.dates[w.train[0]]) + 1
    # arch called directly: zero mean GARCH(1,1) on percent returns, fitted on the training origins' returns
    ref = arch_model(r.to_numpy(), mean="Zero", vol="GARCH", p=1, q=1).fit(disp="off", last_obs=n_fit)
    assert res.params["omega"] == pytest.approx(ref.params["omega"], rel=1e-10)
    assert res.params["alpha"] == pytest.approx(ref.params["alpha[1]"], rel=1e-10)
    assert res.params["beta"] == pytest.approx(ref.params["beta[1]"], rel=1e-10)
    assert res.params["n_obs"] == n_fit and res.params["converged"]
    path = ref.forecast(start=0, horizon=22, reindex=False).variance.to_numpy() / 1e4
    rows = pd.Index(r.index).get_indexer(ds.dates[w.train[0]:])
    for h in HORIZONS:
        np.testing.assert_allclose(res.forecasts[f"h{h}"].to_numpy()[w.train[0]:],
                                   path[rows, :h].mean(axis=1), rtol=1e-10)
    # Bollerslev (1986) recursion s2_{t+1} = omega + alpha r_t^2 + beta s2_t, filtered here from arch's
    # first conditional variance, and the k-step forecast omega sum_{i<k-1} p^i + p^(k-1) s2_{t+1}
    om, al, be = res.params["omega"], res.params["alpha"], res.params["beta"]
    s2, one_step = float(ref.conditional_volatility[0]) ** 2, []
    for x in r.tolist():
        s2 = om + al * x * x + be * s2
        one_step.append(s2)
    one_step = np.array(one_step)[rows]
    p = al + be
    for h in HORIZONS:
        k = np.arange(1, h + 1)
        steps = om * (1 - p ** (k - 1)) / (1 - p) + p ** (k - 1) * one_step[:, None]
        np.testing.assert_allclose(res.forecasts[f"h{h}"].to_numpy()[w.train[0]:], steps.mean(axis=1) / 1e4,
                                   rtol=1e-9)


def test_garch_recovers_simulated_parameters(synthetic):
    ds, w = synthetic
    res = forecast_baselines(ds, w, horizons=HORIZONS, names=("garch",))["garch"]
    # the frame's returns were simulated from GARCH(1,1) with alpha 0.08, beta 0.9 (Bollerslev, 1986)
    assert res.params["alpha"] == pytest.approx(0.08, abs=0.06)
    assert res.params["beta"] == pytest.approx(0.9, abs=0.08)
    assert res.params["persistence"] < 1


# ----------------------------------------------------------------------------- timing and settings
def test_baselines_do_not_look_ahead(synthetic):
    ds, w = synthetic
    cut = int(w.valid[40])
    out = forecast_baselines(ds, w, horizons=HORIZONS, har_window=300, har_min_rows=100)
    # change every proxy and return after origin `cut`: forecasts at origins <= cut must not move
    # (a forecast at t uses information up to t only; common practice)
    after = ds.variance.index > ds.dates[cut]
    changed = dataclasses.replace(ds, variance=ds.variance.where(~after, ds.variance * 3.0),
                                  returns=ds.returns.where(~after, -2.0 * ds.returns))
    moved = forecast_baselines(changed, w, horizons=HORIZONS, har_window=300, har_min_rows=100)
    for name in BASELINES:
        a = out[name].forecasts.iloc[: cut + 1].to_numpy()
        b = moved[name].forecasts.iloc[: cut + 1].to_numpy()
        np.testing.assert_array_equal(a, b, err_msg=name)
        assert not np.allclose(out[name].forecasts.iloc[cut + 2:], moved[name].forecasts.iloc[cut + 2:]), name


def test_har_uses_corsi_windows_even_when_study_features_differ():
    frame = _garch_frame(n_days=900, seed=3)
    ds = build_dataset(frame, estimator="parkinson", horizons=(1, 5), config=FeatureConfig(har_windows=(1, 5)))
    w = split_by_fraction(len(ds.dates), valid=0.2, test=0.2, embargo=5)
    out = forecast_baselines(ds, w, horizons=(1, 5), names=("har", "har_rolling"), har_window=300,
                             har_min_rows=100)
    # the study's features start after 5 days; the 22-day HAR component needs 22, so the first rows are NaN
    assert out["har"].forecasts.iloc[:17].isna().all().all()
    assert np.isfinite(out["har"].forecasts.iloc[w.valid[0]:]).all().all()
    assert np.isfinite(out["har_rolling"].forecasts.iloc[w.valid[0]:]).all().all()


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"names": ("harx",)}, "names must be distinct baselines"),
        ({"ewma_lambda": 1.2}, "ewma_lambda must be in"),
        ({"har_window": 2}, "har_window must be an integer"),
        ({"har_window": 100, "har_min_rows": 200}, "har_min_rows=200 exceeds har_window=100"),
        ({"horizons": (1, 1)}, "horizons must be distinct"),
        ({"horizons": (0,)}, "horizons must be an integer >= 1"),
    ],
)
def test_forecast_baselines_rejects_bad_settings(dataset, kwargs, match):
    ds, w = dataset
    args = {"horizons": HORIZONS} | kwargs
    with pytest.raises(ValueError, match=match):
        forecast_baselines(ds, w, **args)


def test_forecast_baselines_rejects_windows_outside_dataset(dataset):
    ds, _ = dataset
    w = Windows(train=np.arange(0, 100), valid=np.arange(130, 200), test=np.arange(230, 5000), embargo=22)
    with pytest.raises(ValueError, match="windows.test has row positions outside"):
        forecast_baselines(ds, w, horizons=HORIZONS)


def test_har_rolling_needs_enough_rows_before_validation(dataset):
    ds, _ = dataset
    n = len(ds.dates)
    w = Windows(train=np.arange(0, 200), valid=np.arange(223, 600), test=np.arange(623, n), embargo=22)
    # 200 training rows cannot give the 250-row rolling fit the first validation origin needs
    with pytest.raises(ValueError, match="har_rolling has no forecast for .* rows from the first validation origin"):
        forecast_baselines(ds, w, horizons=HORIZONS, names=("har_rolling",))
    ok = forecast_baselines(ds, w, horizons=HORIZONS, names=("har_rolling",), har_min_rows=150)["har_rolling"]
    assert np.isfinite(ok.forecasts.iloc[223:]).all().all()
