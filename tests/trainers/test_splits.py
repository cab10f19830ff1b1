"""Chronological windows with an embargo, walk-forward folds and train-only scaling."""

import numpy as np
import pandas as pd
import pytest

from trainers.features import build_dataset
from trainers.splits import (
    Scaler,
    Windows,
    fit_scaler,
    split_by_dates,
    split_by_fraction,
    walk_forward,
)


def assert_separated(w: Windows) -> None:
    """The embargo property of the task: max(earlier) + embargo < min(later), no overlap."""
    assert w.train.size and w.valid.size and w.test.size
    assert w.train.max() + w.embargo < w.valid.min()
    assert w.valid.max() + w.embargo < w.test.min()
    everything = np.concatenate([w.train, w.valid, w.test])
    assert len(np.unique(everything)) == len(everything)


def test_split_by_fraction_by_hand():
    # 1000 rows, 20% test -> rows 800..999; 20% valid -> rows 600..799 minus the last 22
    # (600..777); train 0..599 minus the last 22 (0..577).
    w = split_by_fraction(1000, valid=0.2, test=0.2, embargo=22)
    np.testing.assert_array_equal(w.train, np.arange(0, 578))
    np.testing.assert_array_equal(w.valid, np.arange(600, 778))
    np.testing.assert_array_equal(w.test, np.arange(800, 1000))
    assert w.embargo == 22
    assert_separated(w)


@pytest.mark.parametrize("n_rows,valid,test,embargo", [
    (100, 0.2, 0.2, 0), (101, 0.15, 0.25, 5), (5000, 0.3, 0.1, 22), (997, 0.33, 0.33, 66), (60, 0.3, 0.3, 5),
])
def test_split_by_fraction_windows_separated_and_ordered(n_rows, valid, test, embargo):
    w = split_by_fraction(n_rows, valid=valid, test=test, embargo=embargo)
    assert_separated(w)
    # The gaps are exactly the embargo; the test window runs to the last row.
    assert w.valid.min() - w.train.max() - 1 == embargo
    assert w.test.min() - w.valid.max() - 1 == embargo
    assert w.test.max() == n_rows - 1 and w.train.min() == 0
    for arr in (w.train, w.valid, w.test):
        assert arr.dtype == np.int64 and np.all(np.diff(arr) == 1)


def test_split_by_fraction_errors_name_the_window_and_the_fix():
    with pytest.raises(ValueError, match="the valid window is empty.*lower the embargo"):
        split_by_fraction(50, valid=0.2, test=0.2, embargo=22)
    with pytest.raises(ValueError, match="the train window is empty.*lower the embargo"):
        split_by_fraction(60, valid=0.1, test=0.1, embargo=50)
    with pytest.raises(ValueError, match="embargo must be an integer >= 0"):
        split_by_fraction(100, embargo=-1)
    with pytest.raises(ValueError, match="valid must be a fraction strictly between 0 and 1"):
        split_by_fraction(100, valid=0.0)
    with pytest.raises(ValueError, match="test must be a fraction"):
        split_by_fraction(100, test=1.2)
    with pytest.raises(ValueError, match=r"valid \+ test must be < 1"):
        split_by_fraction(100, valid=0.5, test=0.5)
    with pytest.raises(ValueError, match="n_rows must be a positive integer"):
        split_by_fraction(0)


def test_split_by_dates_uses_first_rows_on_or_after_the_dates():
    dates = pd.bdate_range("2020-01-01", periods=300)
    # 2020-06-06 is a Saturday: validation starts on Monday 2020-06-08.
    w = split_by_dates(dates, valid_start="2020-06-06", test_start=pd.Timestamp("2020-09-01"), embargo=10)
    assert dates[w.valid.min()] == pd.Timestamp("2020-06-08")
    assert dates[w.test.min()] == pd.Timestamp("2020-09-01")
    assert dates[w.train.max() + 11] == pd.Timestamp("2020-06-08")
    assert_separated(w)
    assert w.test.max() == 299


def test_split_by_dates_errors():
    dates = pd.bdate_range("2020-01-01", periods=300)
    with pytest.raises(ValueError, match="valid_start must be before test_start"):
        split_by_dates(dates, valid_start="2020-09-01", test_start="2020-06-01")
    with pytest.raises(ValueError, match="test_start=2030-01-01 is outside the dataset's dates"):
        split_by_dates(dates, valid_start="2020-06-01", test_start="2030-01-01")
    with pytest.raises(ValueError, match="the valid window is empty.*move valid_start"):
        split_by_dates(dates, valid_start="2020-06-01", test_start="2020-06-10", embargo=22)
    with pytest.raises(ValueError, match="strictly increasing"):
        split_by_dates(dates[::-1], valid_start="2020-06-01", test_start="2020-09-01")


@pytest.mark.parametrize("expanding", [True, False])
def test_walk_forward_folds(expanding):
    folds = walk_forward(1000, n_folds=4, valid_size=100, embargo=22, expanding=expanding, test=0.2)
    assert len(folds) == 4
    test_rows = np.arange(800, 1000)
    # Valid blocks sit back to back and the last ends embargo rows before the test window:
    # 800 - 22 - 4*100 = 378 is the first validation row.
    for k, w in enumerate(folds):
        assert_separated(w)
        np.testing.assert_array_equal(w.test, test_rows)
        np.testing.assert_array_equal(w.valid, np.arange(378 + 100 * k, 478 + 100 * k))
        assert w.train.max() + 1 + 22 == w.valid.min()
    sizes = [w.train.size for w in folds]
    if expanding:
        assert all(w.train.min() == 0 for w in folds) and sizes == [356, 456, 556, 656]
    else:
        assert sizes == [356] * 4 and [w.train.min() for w in folds] == [0, 100, 200, 300]


def test_walk_forward_rolling_train_size_and_errors():
    folds = walk_forward(1000, n_folds=2, valid_size=100, embargo=10, expanding=False, train_size=200)
    assert [w.train.size for w in folds] == [200, 200]
    with pytest.raises(ValueError, match="do not fit.*use fewer folds"):
        walk_forward(200, n_folds=5, valid_size=40, embargo=22)
    with pytest.raises(ValueError, match="train_size must be an integer from 1 to"):
        walk_forward(1000, n_folds=2, valid_size=100, embargo=10, expanding=False, train_size=10_000)
    with pytest.raises(ValueError, match="n_folds must be a positive integer"):
        walk_forward(1000, n_folds=0, valid_size=100)


def test_windows_rejects_overlap_inside_the_embargo():
    with pytest.raises(ValueError, match="must end more than embargo=5 rows before valid"):
        Windows(train=np.arange(10), valid=np.arange(12, 20), test=np.arange(30, 40), embargo=5)


def test_windows_equality_and_summary():
    a = split_by_fraction(1000, embargo=22)
    assert a == split_by_fraction(1000, embargo=22) and a != split_by_fraction(1000, embargo=21)
    # Same windows as test_split_by_fraction_by_hand, as plain ints for the record.
    assert a.summary() == {"train": {"first": 0, "last": 577, "n_rows": 578},
                           "valid": {"first": 600, "last": 777, "n_rows": 178},
                           "test": {"first": 800, "last": 999, "n_rows": 200}, "embargo": 22}
    assert all(type(v) is int for w in ("train", "valid", "test") for v in a.summary()[w].values())


def test_fit_scaler_matches_sklearn_standard_scaler():
    # Reference: sklearn.preprocessing.StandardScaler fitted on the same training rows
    # (population standard deviation; constant columns get scale 1).
    preprocessing = pytest.importorskip("sklearn.preprocessing")
    rng = np.random.default_rng(0)
    X = rng.normal(3.0, 2.0, (400, 4)) * np.array([1.0, 10.0, 1e-3, 1.0])
    X[:, 3] = 7.25  # a constant column
    train, later = X[:300], X[300:]
    ours = fit_scaler(train)
    ref = preprocessing.StandardScaler().fit(train)
    np.testing.assert_allclose(ours.mean, ref.mean_, rtol=1e-12)
    np.testing.assert_allclose(ours.scale, ref.scale_, rtol=1e-12)
    assert ours.scale[3] == 1.0
    np.testing.assert_allclose(ours.transform(later), ref.transform(later), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(ours.inverse_transform(ours.transform(later)), later, rtol=1e-12)


def test_scaler_keeps_frames_and_checks_shapes():
    frame = pd.DataFrame({"a": [1.0, 2.0, 3.0], "b": [0.0, 0.0, 0.0]}, index=pd.bdate_range("2020-01-01", periods=3))
    s = fit_scaler(frame)
    out = s.transform(frame)
    assert isinstance(out, pd.DataFrame) and out.index.equals(frame.index)
    # (1 - 2)/sqrt(2/3) = -1.2247449 (population std of 1, 2, 3 is sqrt(2/3)); the constant column -> 0.
    np.testing.assert_allclose(out["a"], [-1.2247449, 0.0, 1.2247449], rtol=1e-7)
    np.testing.assert_array_equal(out["b"], [0.0, 0.0, 0.0])
    assert isinstance(s, Scaler)
    with pytest.raises(ValueError, match=r"X must have shape \(n_samples, 2\)"):
        s.transform(np.zeros((3, 3)))
    with pytest.raises(ValueError, match="NaN or infinite"):
        fit_scaler(np.array([[1.0], [np.nan]]))
    with pytest.raises(ValueError, match="scales > 0"):
        Scaler(mean=np.zeros(2), scale=np.array([1.0, 0.0]))


@pytest.fixture(scope="module")
def sp500() -> pd.DataFrame:
    # Open dataset shipped by the arch package: S&P 500 daily bars from 1999-01-04; first 600 rows.
    arch_data = pytest.importorskip("arch.data.sp500")
    raw = arch_data.load().iloc[:600]
    frame = raw[["Open", "High", "Low", "Close"]].rename(columns=str.lower).astype(float)
    frame.index = pd.DatetimeIndex(frame.index, name="date")
    return frame


def _move_prices_from(frame: pd.DataFrame, start: pd.Timestamp) -> pd.DataFrame:
    out = frame.copy()
    rows = out.index >= start
    factor = np.exp(np.random.default_rng(3).normal(0.0, 0.03, rows.sum()))
    out.loc[rows, ["open", "high", "low", "close"]] = out.loc[rows, ["open", "high", "low", "close"]].mul(factor, axis=0)
    out.loc[rows, "high"] *= 1.01
    out.loc[rows, "low"] /= 1.01
    return out


def test_embargo_keeps_training_rows_blind_to_the_validation_period(sp500):
    # Look-ahead interplay: with embargo = max horizon, every training row (features and
    # targets) is unchanged when all prices from the first validation day on are changed; with
    # embargo 0 the last training targets would move, so the check can fail.
    horizons = (1, 5, 22)
    ds = build_dataset(sp500, estimator="garman_klass", horizons=horizons)
    for embargo, blind in ((22, True), (0, False)):
        w = split_by_fraction(ds.n_rows, valid=0.2, test=0.2, embargo=embargo)
        first_valid_day = ds.dates[w.valid.min()]
        moved = build_dataset(_move_prices_from(sp500, first_valid_day), estimator="garman_klass", horizons=horizons)
        train_days = ds.dates[w.train]
        same_X = ds.X.loc[train_days].equals(moved.X.loc[train_days])
        same_y = ds.y.loc[train_days].equals(moved.y.loc[train_days])
        assert same_X  # features look back only, with or without the embargo
        assert same_y is blind, embargo
        # The last training target ends on frame day pos(last train) + 22, before validation.
        last = sp500.index.get_loc(train_days[-1])
        assert (sp500.index[last + max(horizons)] < first_valid_day) is blind
