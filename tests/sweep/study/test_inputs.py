"""Tests of sweep/study/inputs.py: a study spec and the invented market's prices -> windows, scaled arrays, scorer.

Outside references: scikit-learn's StandardScaler (fitted on the training rows alone) for the scaling,
numpy's quantile and digitize for the regime classes, scikit-learn's log_loss for the deviance, hashlib
for the file's fingerprint, and trainers.data.load_prices for the rows.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import log_loss
from sklearn.preprocessing import StandardScaler

from sweep.errors import DataError, SpecError
from sweep.study import (
    FORECAST_FLOOR,
    WindowSpan,
    build_study_dataset,
    load_spec,
    load_study_prices,
    min_rows,
    prepare_folds,
    prepare_inputs,
    score_forecasts,
    set_keys,
    split_windows,
    valid_dates,
    valid_labels,
    valid_truth,
    window_rows,
)
from sweep.study.demo import demo_study_text
from trainers import metrics
from trainers.data import load_prices
from trainers.scenario import write_market_csv

N_DAYS = 900  # about 3.5 years of the invented market: room for 22-day targets and three windows
WINDOWS = ("train", "valid", "test")


@pytest.fixture(scope="module")
def market(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("market")
    write_market_csv(folder / "data", seed=3, n_days=N_DAYS, instruments=("harbor_index",))
    return folder


def write_spec(folder: Path, name: str = "inputs", text: str | None = None, **keys):
    """The demo study file with some keys changed, written beside the market's data folder."""
    text = set_keys(text or demo_study_text(), name=f'"{name}"', **keys)
    path = folder / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    return load_spec(path)


@pytest.fixture(scope="module")
def single(market):
    spec = write_spec(market, "single")
    return spec, prepare_folds(spec, load_study_prices(spec).frame)


@pytest.fixture(scope="module")
def three_folds(market):
    spec = write_spec(market, "folds", folds="3")
    return spec, prepare_folds(spec, load_study_prices(spec).frame)


def sklearn_scaler(rows) -> StandardScaler:
    return StandardScaler().fit(np.asarray(rows, dtype=np.float64))


# ---------------------------------------------------------------- prices and the row floor


def test_load_study_prices_reads_the_file_as_load_prices_does(market, single):
    spec, _ = single
    data = load_study_prices(spec)
    path = market / "data" / "harbor_index.csv"
    # the same rows as the trainers' reader, and the fingerprint of the file's bytes (hashlib)
    assert data.frame.equals(load_prices(path).frame)
    assert data.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert len(data.frame) == N_DAYS


def test_min_rows_hand_worked_for_the_demo_study(market):
    spec = write_spec(market, "rows")
    # look-back 22 (HAR month), horizon 22, three embargo gaps of 22, and 30 rows: 22 + 22 + 66 + 30
    assert min_rows(spec) == 140
    # Yang-Zhang's rolling window adds its 22 days of look-back: 140 + 22
    assert min_rows(write_spec(market, "rows-yz", estimator='"yang_zhang"')) == 162
    # a longer look-back counts instead of the HAR month: 66 + 22 + 66 + 30
    assert min_rows(write_spec(market, "rows-lag", extra_lags="[66]")) == 184


def test_load_study_prices_refuses_a_file_below_min_rows_as_a_data_error(tmp_path):
    write_market_csv(tmp_path / "data", seed=3, n_days=139, instruments=("harbor_index",))
    spec = write_spec(tmp_path, "short")
    with pytest.raises(DataError) as info:
        load_study_prices(spec)
    # one named error with the count, the floor, where the floor comes from and the fix (no rows are bad,
    # so dropping bad rows is not offered)
    text = str(info.value)
    assert "only 139 rows, fewer than min_rows=140" in text
    assert "3 x split.embargo = 66" in text and "give a longer file or lower those settings" in text
    assert "bad_rows" not in text


def test_min_rows_passes_the_file_check_and_a_split_too_small_for_it_is_named(tmp_path):
    # with min_rows rows the file check passes; the demo split's fractions (0.2 each, a 22-row embargo)
    # then leave the validation window fewer than MIN_WINDOW_ROWS rows, and cutting it names the split
    spec = write_spec(tmp_path, "floor")
    write_market_csv(tmp_path / "data", seed=3, n_days=min_rows(spec), instruments=("harbor_index",))
    frame = load_study_prices(spec).frame
    assert len(frame) == min_rows(spec)
    with pytest.raises(SpecError, match="split: the valid window is empty"):
        prepare_folds(spec, frame)


# ---------------------------------------------------------------- windows


def test_split_windows_single_split_is_chronological_with_the_embargo_gap(single):
    spec, (inputs,) = single
    (w,) = split_windows(spec, inputs.dataset)
    assert w == inputs.windows
    n = inputs.dataset.n_rows
    embargo = spec.split.embargo
    # train from the first row, test to the last; each window contiguous and in time order
    assert w.train[0] == 0 and w.test[-1] == n - 1
    for name in WINDOWS:
        rows = getattr(w, name)
        np.testing.assert_array_equal(rows, np.arange(rows[0], rows[-1] + 1))
    # exactly `embargo` rows left out before validation and before test
    assert w.valid[0] - w.train[-1] - 1 == embargo
    assert w.test[0] - w.valid[-1] - 1 == embargo
    # test is round(0.2 n) rows; validation and its embargo gap the round(0.2 n) rows before it
    assert len(w.test) == round(0.2 * n)
    assert len(w.valid) + embargo == round(0.2 * n)
    # the target of origin t is the mean over rows t+1 .. t+h, so the last training target ends
    # before the first validation origin (an embargo of at least the horizon: common practice)
    assert w.train[-1] + max(spec.target.horizons) < w.valid[0]
    dates = inputs.dataset.dates
    assert dates[w.train].max() < dates[w.valid].min() and dates[w.valid].max() < dates[w.test].min()


def test_split_windows_walk_forward_blocks_sit_back_to_back(three_folds):
    spec, folds = three_folds
    assert len(folds) == 3
    n = folds[0].dataset.n_rows
    embargo = spec.split.embargo
    block = int(0.2 * n) // 3  # split.valid is the share of all three blocks together
    for k, f in enumerate(folds):
        w = f.windows
        assert len(w.valid) == block
        # expanding: every fold trains from the first row up to `embargo` rows before its block
        assert w.train[0] == 0 and w.valid[0] - w.train[-1] - 1 == embargo
        # the same final test window for every fold
        np.testing.assert_array_equal(w.test, folds[-1].windows.test)
        if k:
            assert w.valid[0] == folds[k - 1].windows.valid[-1] + 1
    assert folds[-1].windows.test[0] - folds[-1].windows.valid[-1] - 1 == embargo
    assert len(folds[-1].windows.test) == round(0.2 * n)


def test_split_windows_by_dates_start_on_or_after_the_given_days(market, single):
    _, (inputs,) = single
    dates = inputs.dataset.dates
    valid_start, test_start = dates[500], dates[700]
    text = demo_study_text().replace(
        "valid = 0.2 ", f"valid_start = {valid_start.date().isoformat()}\n#").replace(
        "test = 0.2 ", f"test_start = {test_start.date().isoformat()}\n#")
    spec = write_spec(market, "by-dates", text=text)
    assert spec.split.by_dates
    (w,) = split_windows(spec, build_study_dataset(spec, load_study_prices(spec).frame))
    # the windows begin at the first rows on or after the given dates; the embargo is cut before them
    assert (w.valid[-1] + spec.split.embargo + 1, w.test[0]) == (700, 700)
    assert w.train[-1] + spec.split.embargo + 1 == 500


# ---------------------------------------------------------------- scaling, truth and scorer


def test_prepare_folds_scales_inputs_and_targets_on_the_training_window_only(single):
    _, (inputs,) = single
    X_all = inputs.dataset.X.to_numpy()
    y_all = inputs.dataset.y.to_numpy()
    train = inputs.windows.train
    # reference: scikit-learn's StandardScaler fitted on the training rows alone
    sk_x, sk_y = sklearn_scaler(X_all[train]), sklearn_scaler(y_all[train])
    np.testing.assert_allclose(inputs.x_scaler.mean, sk_x.mean_, rtol=1e-12)
    np.testing.assert_allclose(inputs.x_scaler.scale, sk_x.scale_, rtol=1e-12)
    np.testing.assert_allclose(inputs.y_scaler.mean, sk_y.mean_, rtol=1e-12)
    np.testing.assert_allclose(inputs.y_scaler.scale, sk_y.scale_, rtol=1e-12)
    for w in WINDOWS:
        rows = getattr(inputs.windows, w)
        np.testing.assert_allclose(inputs.X[w], sk_x.transform(X_all[rows]), rtol=1e-10, atol=1e-12)
        np.testing.assert_allclose(inputs.y[w], sk_y.transform(y_all[rows]), rtol=1e-10, atol=1e-12)
    # the check has teeth: statistics over every row differ from the training rows' ones
    assert not np.allclose(sklearn_scaler(X_all).mean_, sk_x.mean_, rtol=1e-3)
    assert (inputs.n_inputs, inputs.n_outputs) == (X_all.shape[1], 3)


def test_prepare_folds_fits_each_fold_on_its_own_training_rows(three_folds):
    _, folds = three_folds
    means = []
    for f in folds:
        # reference: scikit-learn's StandardScaler on this fold's training rows
        sk = sklearn_scaler(f.dataset.X.to_numpy()[f.windows.train])
        np.testing.assert_allclose(f.x_scaler.mean, sk.mean_, rtol=1e-12)
        np.testing.assert_allclose(f.x_scaler.scale, sk.scale_, rtol=1e-12)
        means.append(f.x_scaler.mean)
    assert not np.allclose(means[0], means[-1], rtol=1e-6)
    # the final model's arrays are the latest fold's
    assert prepare_inputs(three_folds[0], load_study_prices(three_folds[0]).frame).windows == folds[-1].windows


def test_prepare_folds_truth_is_the_level_variance_target(market, single):
    _, (inputs,) = single
    for w in WINDOWS:
        rows = getattr(inputs.windows, w)
        # log scale: the dataset's targets are log mean variances, the truth their exponential
        np.testing.assert_allclose(inputs.truth[w], np.exp(inputs.dataset.y.to_numpy()[rows]), rtol=1e-15)
    level = write_spec(market, "level", scale='"level"')
    (lv,) = prepare_folds(level, load_study_prices(level).frame)
    np.testing.assert_array_equal(lv.truth["valid"], lv.dataset.y.to_numpy()[lv.windows.valid])
    # the same days, the same variance whatever the scale the network learns in
    np.testing.assert_allclose(lv.truth["valid"], inputs.truth["valid"], rtol=1e-12)


def test_scorer_equals_score_forecasts_on_the_back_transformed_output(single):
    spec, (inputs,) = single
    rng = np.random.default_rng(0)
    out = rng.normal(size=inputs.y["valid"].shape)
    y_all = inputs.dataset.y.to_numpy()
    # back-transform by hand: scikit-learn's inverse of the training scaling, then exp of the log variance
    level = np.exp(sklearn_scaler(y_all[inputs.windows.train]).inverse_transform(out))
    expected = score_forecasts(spec.study.objective, inputs.truth["valid"], level)
    assert inputs.scorer("valid")(out) == pytest.approx(expected, rel=1e-12)
    np.testing.assert_allclose(inputs.forecasts(out), level, rtol=1e-12)
    # the scorer of another window scores against that window's truth
    out_test = rng.normal(size=inputs.y["test"].shape)
    level_test = np.exp(sklearn_scaler(y_all[inputs.windows.train]).inverse_transform(out_test))
    assert inputs.scorer("test")(out_test) == pytest.approx(
        score_forecasts(spec.study.objective, inputs.truth["test"], level_test), rel=1e-12)


def test_scorer_of_a_level_study_floors_negative_forecasts(market):
    spec = write_spec(market, "level-score", scale='"level"', objective='"mse"')
    (inputs,) = prepare_folds(spec, load_study_prices(spec).frame)
    out = np.full(inputs.y["valid"].shape, -50.0)  # far below the mean: negative level variances
    level = sklearn_scaler(inputs.dataset.y.to_numpy()[inputs.windows.train]).inverse_transform(out)
    assert (level < 0).all()
    floored = np.maximum(level, FORECAST_FLOOR)
    # reference: the mean squared error of the floored forecasts, by hand
    expected = float(np.mean((inputs.truth["valid"] - floored) ** 2))
    assert inputs.scorer("valid")(out) == pytest.approx(expected, rel=1e-12)


def test_prepare_folds_classification_cuts_regimes_at_training_quantiles(market):
    spec = write_spec(market, "regimes", task='"classification"', objective='"deviance"')
    (inputs,) = prepare_folds(spec, load_study_prices(spec).frame)
    first = np.exp(inputs.dataset.y.to_numpy()[:, 0])
    train = inputs.windows.train
    # reference: numpy's tertiles of the first horizon's variance on the training rows
    np.testing.assert_allclose(inputs.thresholds, np.quantile(first[train], [1 / 3, 2 / 3]), rtol=1e-12)
    for w in WINDOWS:
        rows = getattr(inputs.windows, w)
        # numpy's digitize puts a value equal to a cut point in the upper class, as documented
        np.testing.assert_array_equal(inputs.labels[w], np.digitize(first[rows], inputs.thresholds))
        np.testing.assert_array_equal(inputs.y[w], inputs.labels[w])
    assert inputs.y_scaler is None and inputs.n_outputs == 3
    # the scorer is the deviance: 2 n times scikit-learn's log_loss (mean negative log-likelihood)
    proba = np.random.default_rng(1).dirichlet(np.ones(3), size=len(inputs.windows.valid))
    expected = 2 * len(proba) * log_loss(inputs.labels["valid"], proba, labels=[0, 1, 2])
    assert inputs.scorer("valid")(proba) == pytest.approx(expected, rel=1e-10)
    assert metrics.deviance(inputs.labels["valid"], proba) == pytest.approx(expected, rel=1e-10)
    np.testing.assert_array_equal(inputs.forecasts(proba), proba)


# ---------------------------------------------------------------- rows of a window across folds


def test_window_rows_of_one_split_are_that_split(single):
    _, (inputs,) = single
    for w in WINDOWS:
        rows = window_rows(inputs, w)
        np.testing.assert_array_equal(rows.truth, inputs.truth[w])
        assert rows.labels is None
        assert rows.dates.equals(inputs.dataset.dates[getattr(inputs.windows, w)])


def test_window_rows_valid_spans_every_fold_oldest_first(three_folds):
    _, folds = three_folds
    rows = window_rows(folds, "valid")
    # every fold's validation block, oldest first: the rows of the recorded validation forecasts
    np.testing.assert_array_equal(rows.truth, np.concatenate([f.truth["valid"] for f in folds]))
    np.testing.assert_array_equal(rows.truth, valid_truth(folds))
    assert rows.dates.is_monotonic_increasing and not rows.dates.has_duplicates
    assert rows.dates.equals(valid_dates(folds))
    expected_dates = folds[0].dataset.dates[np.concatenate([f.windows.valid for f in folds])]
    assert rows.dates.equals(expected_dates)
    # the training and test windows are the latest fold's
    for w in ("train", "test"):
        np.testing.assert_array_equal(window_rows(folds, w).truth, folds[-1].truth[w])


def test_window_rows_carries_the_labels_of_a_classification_study(market):
    spec = write_spec(market, "regime-folds", task='"classification"', objective='"deviance"', folds="2")
    folds = prepare_folds(spec, load_study_prices(spec).frame)
    rows = window_rows(folds, "valid")
    np.testing.assert_array_equal(rows.labels, np.concatenate([f.labels["valid"] for f in folds]))
    np.testing.assert_array_equal(rows.labels, valid_labels(folds))
    np.testing.assert_array_equal(window_rows(folds, "test").labels, folds[-1].labels["test"])


def test_window_span_from_dates():
    dates = pd.DatetimeIndex(["2015-06-17", "2015-06-18", "2016-01-19"])
    span = WindowSpan.from_dates(dates)
    assert span == WindowSpan(rows=3, first="2015-06-17", last="2016-01-19")
    assert span.to_dict() == {"rows": 3, "first": "2015-06-17", "last": "2016-01-19"}
