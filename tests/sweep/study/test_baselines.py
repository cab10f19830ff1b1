"""Tests of sweep/study/baselines.py: benchmarks scored on the trials' windows, fold by fold.

Outside references: the random walk forecast is the variance proxy of the origin day (the definition
in trainers/baselines.py, common practice for a no-change benchmark); the class-share deviance is worked
by hand and checked against scikit-learn's log_loss (deviance = 2 n log_loss, common practice for a
multinomial model).
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest
from sklearn.metrics import log_loss

from sweep.study import (
    compute_baselines, fold_mean, load_spec, load_study_prices, mean_dicts, prepare_folds, score_forecasts,
    set_keys, valid_truth, window_losses,
)
from sweep.study.demo import demo_study_text
from trainers.baselines import forecast_baselines
from trainers.scenario import write_market_csv

INCLUDE = ("random_walk", "ewma", "har")


@pytest.fixture(scope="module")
def market(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("market")
    write_market_csv(folder / "data", seed=3, n_days=900, instruments=("harbor_index",))
    return folder


def study(folder: Path, name: str, **keys):
    text = set_keys(demo_study_text(), name=f'"{name}"', include='["random_walk", "ewma", "har"]', **keys)
    path = folder / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    spec = load_spec(path)
    return spec, prepare_folds(spec, load_study_prices(spec).frame)


@pytest.fixture(scope="module")
def three_folds(market):
    spec, folds = study(market, "folds", folds="3")
    return spec, folds, compute_baselines(spec, folds)


def by_key(scores):
    return {(s.name, s.window): s for s in scores}


def test_compute_baselines_scores_every_baseline_on_both_windows(three_folds):
    _, _, scores = three_folds
    # one score per baseline and window, in the order of the study file's list, validation first
    assert [(s.name, s.window) for s in scores] == [(n, w) for n in INCLUDE for w in ("valid", "test")]


def test_compute_baselines_concatenates_every_folds_validation_forecasts_oldest_first(three_folds):
    spec, folds, scores = three_folds
    got = by_key(scores)
    valid_rows = np.concatenate([f.windows.valid for f in folds])
    dataset = folds[0].dataset
    # random walk: the proxy on the origin day, for every horizon (trainers/baselines.py definition)
    proxy = np.maximum(dataset.variance.loc[dataset.dates[valid_rows]].to_numpy(), dataset.config.floor)
    np.testing.assert_array_equal(got["random_walk", "valid"].forecasts, np.repeat(proxy[:, None], 3, axis=1))
    for name in INCLUDE:
        # fold k's forecasts come from the baseline fitted on fold k's own training window
        per_fold = [forecast_baselines(f.dataset, f.windows, horizons=f.horizons, names=(name,),
                                       ewma_lambda=spec.baselines.ewma_lambda,
                                       har_window=spec.baselines.har_window, log=f.log)[name]
                    .forecasts.to_numpy()[f.windows.valid] for f in folds]
        np.testing.assert_array_equal(got[name, "valid"].forecasts, np.concatenate(per_fold))
        assert got[name, "valid"].forecasts.shape == valid_truth(folds).shape
    # the check has teeth: the oldest fold's HAR differs from the latest fold's fit on the same rows
    latest_fit = forecast_baselines(folds[-1].dataset, folds[-1].windows, horizons=folds[-1].horizons,
                                    names=("har",), log=True)["har"].forecasts.to_numpy()
    first_block = got["har", "valid"].forecasts[: len(folds[0].windows.valid)]
    assert not np.allclose(first_block, latest_fit[folds[0].windows.valid], rtol=1e-6)


def test_compute_baselines_objective_is_the_fold_mean_of_score_forecasts(three_folds):
    spec, folds, scores = three_folds
    got = by_key(scores)
    truth = valid_truth(folds)
    sizes = np.cumsum([len(f.windows.valid) for f in folds])[:-1]
    for name in INCLUDE:
        s = got[name, "valid"]
        blocks = np.split(s.forecasts, sizes)
        truths = np.split(truth, sizes)
        per_fold = [score_forecasts(spec.study.objective, t, f) for t, f in zip(truths, blocks)]
        assert s.objective == fold_mean(per_fold)
        # the blocks are of equal size, so the mean of the folds' means is the mean over every row
        assert s.objective == pytest.approx(score_forecasts(spec.study.objective, truth, s.forecasts), rel=1e-12)
        assert s.losses == mean_dicts([window_losses(t, f) for t, f in zip(truths, blocks)])


def test_compute_baselines_forecasts_the_test_window_from_the_latest_fold(three_folds):
    spec, folds, scores = three_folds
    got = by_key(scores)
    last = folds[-1]
    for name in INCLUDE:
        s = got[name, "test"]
        assert s.forecasts.shape == last.truth["test"].shape
        assert s.objective == pytest.approx(score_forecasts(spec.study.objective, last.truth["test"], s.forecasts),
                                            rel=1e-15)
    dataset = last.dataset
    proxy = np.maximum(dataset.variance.loc[dataset.dates[last.windows.test]].to_numpy(), dataset.config.floor)
    np.testing.assert_array_equal(got["random_walk", "test"].forecasts, np.repeat(proxy[:, None], 3, axis=1))


def test_compute_baselines_of_one_split_scores_its_own_windows(market):
    spec, (inputs,) = study(market, "single")
    got = by_key(compute_baselines(spec, inputs))  # a single StudyInputs is one fold
    for window in ("valid", "test"):
        s = got["random_walk", window]
        rows = getattr(inputs.windows, window)
        proxy = np.maximum(inputs.dataset.variance.loc[inputs.dataset.dates[rows]].to_numpy(),
                           inputs.dataset.config.floor)
        np.testing.assert_array_equal(s.forecasts, np.repeat(proxy[:, None], 3, axis=1))
        assert s.objective == score_forecasts("qlike", inputs.truth[window], s.forecasts)
        assert s.losses == window_losses(inputs.truth[window], s.forecasts)


# ---------------------------------------------------------------- classification: the class shares


@pytest.fixture(scope="module")
def regime_folds(market):
    return study(market, "regimes", task='"classification"', objective='"deviance"', folds="2")


def test_compute_baselines_class_shares_with_add_one_smoothing_by_hand(regime_folds):
    spec, folds = regime_folds
    # hand-made labels on a real fold: training classes 0, 0, 0, 1, 2, 2
    inputs = dataclasses.replace(folds[-1], labels={"train": np.array([0, 0, 0, 1, 2, 2]),
                                                   "valid": np.array([0, 2]), "test": np.array([1, 1, 2])})
    valid, test = compute_baselines(spec, inputs)
    # add one to each count: (3 + 1, 1 + 1, 2 + 1) / (6 + 3) = 4/9, 2/9, 3/9
    shares = [4 / 9, 2 / 9, 3 / 9]
    assert (valid.name, valid.window, test.window) == ("class_shares", "valid", "test")
    np.testing.assert_allclose(valid.params["shares"], shares, rtol=1e-15)
    np.testing.assert_allclose(valid.forecasts, [shares, shares], rtol=1e-15)
    # deviance = -2 * sum of log probabilities of the true classes:
    #   valid 0, 2:     -2 (ln 4/9 + ln 3/9) = 2 ln(27/4)
    #   test  1, 1, 2:  -2 (2 ln 2/9 + ln 3/9) = 2 ln(243/4)
    assert valid.objective == pytest.approx(2 * math.log(27 / 4), rel=1e-12)
    assert test.objective == pytest.approx(2 * math.log(243 / 4), rel=1e-12)
    # scikit-learn: deviance = 2 n log_loss
    assert valid.objective == pytest.approx(2 * 2 * log_loss([0, 2], [shares, shares], labels=[0, 1, 2]), rel=1e-12)
    # the most likely class is 0: right on one validation row of two, on no test row
    assert (valid.losses["accuracy"], test.losses["accuracy"]) == (0.5, 0.0)
    assert valid.losses["deviance"] == valid.objective
    assert test.forecasts.shape == (3, 3)


def test_compute_baselines_class_shares_over_folds(regime_folds):
    spec, folds = regime_folds
    old = dataclasses.replace(folds[0], labels={**folds[0].labels, "valid": np.array([0])})
    new = dataclasses.replace(folds[1], labels={"train": np.array([0, 0, 0, 1, 2, 2]),
                                               "valid": np.array([2, 2]), "test": np.array([1])})
    valid, _ = compute_baselines(spec, [old, new])
    # the shares are the latest fold's (4/9, 2/9, 3/9), forecast on every validation row of both folds
    assert valid.forecasts.shape == (3, 3)
    np.testing.assert_allclose(valid.params["shares"], [4 / 9, 2 / 9, 3 / 9], rtol=1e-15)
    # the objective is the mean of the folds' deviances: (-2 ln 4/9 + -4 ln 3/9) / 2 = ln(9/4) + 2 ln 3
    assert valid.objective == pytest.approx(math.log(9 / 4) + 2 * math.log(3), rel=1e-12)
    # accuracy: fold 0 right (class 0), fold 1 wrong twice: mean of 1 and 0
    assert valid.losses["accuracy"] == 0.5
