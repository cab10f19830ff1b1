"""HAR features, targets and regime classes: hand-computed values and a look-ahead proof."""

import math

import numpy as np
import pandas as pd
import pytest

from trainers.features import (
    Dataset,
    FeatureConfig,
    build_dataset,
    regime_labels,
    regime_thresholds,
)
from trainers.volatility import ESTIMATORS

# Toy closes from chosen log returns, so the close-to-close proxy r_t^2 is known by hand:
# rows 1..8 r = 0.01, -0.02, 0.03, -0.01, 0.02, 0.01, -0.03, 0.02
# r^2 (x 1e-4) = 1, 4, 9, 1, 4, 1, 9, 4
TOY_RETURNS = [0.01, -0.02, 0.03, -0.01, 0.02, 0.01, -0.03, 0.02]


def toy_frame() -> pd.DataFrame:
    close = 100.0 * np.exp(np.r_[0.0, np.cumsum(TOY_RETURNS)])
    dates = pd.DatetimeIndex(pd.bdate_range("2021-03-01", periods=len(close)), name="date")
    return pd.DataFrame({"open": close, "high": close * 1.01, "low": close * 0.99, "close": close}, index=dates)


@pytest.fixture(scope="module")
def sp500() -> pd.DataFrame:
    # Open dataset shipped by the arch package: S&P 500 daily bars from 1999-01-04; first 320 rows.
    arch_data = pytest.importorskip("arch.data.sp500")
    raw = arch_data.load().iloc[:320]
    frame = raw[["Open", "High", "Low", "Close", "Volume"]].rename(columns=str.lower).astype(float)
    frame.index = pd.DatetimeIndex(frame.index, name="date")
    return frame


def test_har_components_and_targets_by_hand_levels():
    config = FeatureConfig(har_windows=(1, 5), log=False)
    ds = build_dataset(toy_frame(), estimator="close_to_close", horizons=(1, 2), config=config)
    # Rows need r^2 on rows 1..5 for the weekly mean and rows t+1, t+2 for h2: origins rows 5, 6.
    assert list(ds.dates) == list(toy_frame().index[5:7])
    # HAR (Corsi, 2009) weekly component at row 5: (1 + 4 + 9 + 1 + 4)e-4 / 5 = 3.8e-4;
    # at row 6: (4 + 9 + 1 + 4 + 1)e-4 / 5 = 3.8e-4. Daily component: r_t^2 = 4e-4, 1e-4.
    np.testing.assert_allclose(ds.X["har_5"], [3.8e-4, 3.8e-4], rtol=1e-9)
    np.testing.assert_allclose(ds.X["har_1"], [4e-4, 1e-4], rtol=1e-9)
    # Targets: mean over t+1..t+h. Row 5: h1 = 1e-4, h2 = (1 + 9)/2 e-4 = 5e-4;
    # row 6: h1 = 9e-4, h2 = (9 + 4)/2 e-4 = 6.5e-4.
    np.testing.assert_allclose(ds.y["h1"], [1e-4, 9e-4], rtol=1e-9)
    np.testing.assert_allclose(ds.y["h2"], [5e-4, 6.5e-4], rtol=1e-9)


def test_har_log_is_log_of_the_mean():
    ds = build_dataset(toy_frame(), estimator="close_to_close", horizons=(2,),
                       config=FeatureConfig(har_windows=(5,), log=True))
    # ln(3.8e-4) = ln 3.8 + ln 1e-4 = 1.3350011 - 9.2103404 = -7.8753393, not the mean of the logs
    # (2 ln 1e-4 + 2 ln 4e-4 + ln 9e-4) / 5 = (-18.4207 - 15.6481 - 7.0131) / 5 = -8.2164
    assert ds.X["har_5"].iloc[0] == pytest.approx(-7.8753393, abs=1e-7)
    # h2 at row 5: ln(5e-4) = 1.6094379 - 9.2103404 = -7.6009025
    assert ds.y["h2"].iloc[0] == pytest.approx(-7.6009025, abs=1e-7)


def test_extra_lags_returns_abs_returns_and_exogenous_as_of_t():
    frame = toy_frame().assign(spread=np.arange(9.0))
    config = FeatureConfig(har_windows=(1,), log=False, extra_lags=(2,), returns=True, abs_returns=True,
                           exogenous=("spread",))
    ds = build_dataset(frame, estimator="close_to_close", horizons=(1,), config=config)
    assert list(ds.X.columns) == ["har_1", "lag_2", "return", "abs_return", "spread"]
    # First origin is row 3 (lag 2 needs r^2 on row 1). lag_2 at rows 3..7 = r^2 on rows 1..5.
    np.testing.assert_allclose(ds.X["lag_2"], [1e-4, 4e-4, 9e-4, 1e-4, 4e-4], rtol=1e-9)
    np.testing.assert_allclose(ds.X["return"], TOY_RETURNS[2:7], rtol=1e-9)
    np.testing.assert_allclose(ds.X["abs_return"], np.abs(TOY_RETURNS[2:7]), rtol=1e-9)
    np.testing.assert_array_equal(ds.X["spread"], [3.0, 4.0, 5.0, 6.0, 7.0])


@pytest.mark.parametrize("estimator,first", [("garman_klass", 21), ("close_to_close", 22), ("yang_zhang", 43)])
def test_build_dataset_drops_warm_up_and_last_horizon_rows(sp500, estimator, first):
    # garman_klass exists from row 0, so har_22 first exists at row 21; close_to_close needs a
    # previous close (row 22); yang_zhang(22) is NaN on rows 0-21, so har_22 starts at row 43.
    ds = build_dataset(sp500, estimator=estimator, horizons=(1, 5, 22))
    assert isinstance(ds, Dataset)
    assert ds.dates[0] == sp500.index[first]
    assert ds.dates[-1] == sp500.index[len(sp500) - 23]  # h22 needs rows t+1..t+22
    assert ds.n_rows == len(sp500) - 22 - first
    assert not ds.X.isna().any().any() and not ds.y.isna().any().any()
    assert ds.variance.index.equals(sp500.index) and ds.returns.index.equals(sp500.index)
    # Every target is the log of the mean level proxy over the next h days (definition in the
    # task; Corsi (2009) uses the same forward averages for multi-step targets).
    v = ds.variance.to_numpy()
    pos = sp500.index.get_indexer(ds.dates)
    for h in (1, 5, 22):
        expected = [math.log(max(v[p + 1:p + 1 + h].mean(), 1e-10)) for p in pos]
        np.testing.assert_allclose(ds.y[f"h{h}"], expected, rtol=1e-12)


def test_floor_keeps_log_features_finite_on_zero_variance_days():
    # Parkinson (1980) is exactly 0 when high == low; ln(0) = -inf, so the log uses the floor.
    frame = toy_frame()
    frame.loc[frame.index[4], ["high", "low"]] = frame["close"].iloc[4]
    ds = build_dataset(frame, estimator="parkinson", horizons=(1,),
                       config=FeatureConfig(har_windows=(1,), floor=1e-9))
    assert ds.X.loc[frame.index[4], "har_1"] == pytest.approx(math.log(1e-9))
    assert ds.y.loc[frame.index[3], "h1"] == pytest.approx(math.log(1e-9))
    assert np.isfinite(ds.X.to_numpy()).all()


def _perturb_after(frame: pd.DataFrame, cut: int, seed: int = 1) -> pd.DataFrame:
    """Move every price and the volume on rows after position ``cut``, keeping bars consistent."""
    rng = np.random.default_rng(seed)
    out = frame.copy()
    n = len(frame) - cut - 1
    level = np.exp(rng.normal(0.0, 0.02, n))
    wider = np.exp(np.abs(rng.normal(0.0, 0.01, n)))
    rows = out.index[cut + 1:]
    for c in ("open", "close"):
        out.loc[rows, c] *= level
    out.loc[rows, "high"] *= level * wider
    out.loc[rows, "low"] *= level / wider
    out.loc[rows, "volume"] *= 2.0
    return out


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_no_look_ahead_future_prices_move_nothing_before_cut(sp500, estimator):
    # Changing prices after day D must leave features on days <= D and targets on days <= D - h
    # unchanged, and must change the feature on D + 1 and the target on D - h + 1 (the first
    # row whose window t+1..t+h reaches past D), so the check can fail both ways.
    config = FeatureConfig(extra_lags=(1, 3), returns=True, abs_returns=True, exogenous=("volume",))
    horizons = (1, 5, 22)
    cut = 200
    before = build_dataset(sp500, estimator=estimator, horizons=horizons, config=config)
    after = build_dataset(_perturb_after(sp500, cut), estimator=estimator, horizons=horizons, config=config)
    day = sp500.index
    pd.testing.assert_frame_equal(before.X.loc[:day[cut]], after.X.loc[:day[cut]])
    assert (before.X.loc[day[cut + 1]] != after.X.loc[day[cut + 1]]).any()
    for h in horizons:
        col = f"h{h}"
        pd.testing.assert_series_equal(before.y.loc[:day[cut - h], col], after.y.loc[:day[cut - h], col])
        assert before.y.loc[day[cut - h + 1], col] != after.y.loc[day[cut - h + 1], col]


def test_regime_thresholds_match_pandas_qcut():
    # pandas.qcut cuts at the same j/n quantiles; with n = 302 no cut point lands on a data
    # value ((n-1) j/3 is not an integer), so the bin conventions at edges do not matter.
    values = np.random.default_rng(0).lognormal(-9.0, 1.0, 302)
    cuts = regime_thresholds(values, 3)
    assert cuts.shape == (2,)
    np.testing.assert_array_equal(regime_labels(values, cuts), pd.qcut(values, 3, labels=False))
    np.testing.assert_array_equal(np.bincount(regime_labels(values, cuts)), [101, 100, 101])


def test_regime_labels_by_hand_and_log_invariance():
    # Cut points 1 and 2: below 1 -> 0 (calm), [1, 2) -> 1, 2 and above -> 2.
    np.testing.assert_array_equal(regime_labels([0.5, 1.0, 1.5, 2.0, 3.0], [1.0, 2.0]), [0, 1, 1, 2, 2])
    values = np.random.default_rng(1).lognormal(-9.0, 1.0, 500)
    train, later = values[:300], values[300:]
    level = regime_labels(later, regime_thresholds(train, 4))
    logged = regime_labels(np.log(later), regime_thresholds(np.log(train), 4))
    # Quantiles commute with the increasing log only up to interpolation between two points, so
    # allow a disagreement or two next to a cut point.
    assert (level != logged).sum() <= 2 and set(level) == {0, 1, 2, 3}


def test_bad_input_messages():
    with pytest.raises(ValueError, match="floor must be a finite number > 0"):
        FeatureConfig(floor=0.0)
    with pytest.raises(ValueError, match="har_windows must hold positive integers"):
        FeatureConfig(har_windows=(0, 5))
    with pytest.raises(ValueError, match="selects no features"):
        FeatureConfig(har_windows=())
    with pytest.raises(ValueError, match="horizons must not be empty"):
        build_dataset(toy_frame(), horizons=())
    with pytest.raises(ValueError, match=r"exogenous column\(s\) \['vix'\] are not in the price frame"):
        build_dataset(toy_frame(), horizons=(1,), config=FeatureConfig(har_windows=(1,), exogenous=("vix",)))
    with pytest.raises(ValueError, match="no complete rows: the frame has 9 rows"):
        build_dataset(toy_frame(), horizons=(5,), config=FeatureConfig(har_windows=(22,)))
    with pytest.raises(ValueError, match="not in date order"):
        build_dataset(toy_frame().iloc[::-1], horizons=(1,), config=FeatureConfig(har_windows=(1,)))
    with pytest.raises(ValueError, match="1 repeated date"):
        build_dataset(toy_frame().iloc[[0, 1, 1, 2, 3, 4]], horizons=(1,), config=FeatureConfig(har_windows=(1,)))
    with pytest.raises(ValueError, match="n_classes must be an integer >= 2"):
        regime_thresholds([1.0, 2.0, 3.0], 1)
    with pytest.raises(ValueError, match="distinct cut points"):
        regime_thresholds([1e-10] * 50 + [1.0, 2.0], 3)
    with pytest.raises(ValueError, match="NaN or infinite"):
        regime_labels([np.nan, 1.0], [0.5])
