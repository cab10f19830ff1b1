"""Tests of sweep/search/workers.py: a worker's arrays come from the record alone, and trial counts by state.

Outside references: the arrays `prepare_folds` builds from the original price file (read by
trainers.data.load_prices) must come back bit for bit from the record's copy of the rows, with the price
file gone; optuna's own trial states for the counts.
"""

from __future__ import annotations

import shutil

import numpy as np
import optuna
import pytest
from optuna.trial import TrialState

from sweep.record import Tracker
from sweep.search import FINISHED_STATES, count_states, folds_from_record, inputs_from_record, run_study
from sweep.study import load_spec, load_study_prices, prepare_folds, set_keys
from sweep.study.demo import demo_study_text
from trainers.scenario import write_market_csv

WINDOWS = ("train", "valid", "test")


@pytest.fixture(autouse=True)
def _quiet_optuna():
    optuna.logging.set_verbosity(optuna.logging.WARNING)


def assert_same_inputs(got, want):
    assert got.windows == want.windows
    assert got.dataset.dates.equals(want.dataset.dates)
    assert (got.task, got.objective, got.log, got.horizons) == (want.task, want.objective, want.log, want.horizons)
    assert got.x_scaler == want.x_scaler and got.y_scaler == want.y_scaler
    for w in WINDOWS:
        # bit for bit: the record keeps the rows with repr precision
        np.testing.assert_array_equal(got.X[w], want.X[w])
        np.testing.assert_array_equal(got.y[w], want.y[w])
        np.testing.assert_array_equal(got.truth[w], want.truth[w])
        if want.labels:
            np.testing.assert_array_equal(got.labels[w], want.labels[w])
    if want.thresholds is None:
        assert got.thresholds is None
    else:
        np.testing.assert_array_equal(got.thresholds, want.thresholds)


@pytest.mark.parametrize("keys", [
    {},                                                          # one chronological split
    {"folds": "3"},                                              # walk-forward folds
    {"task": '"classification"', "objective": '"deviance"', "folds": "2", "scale": '"level"'},
], ids=["split", "folds", "regimes"])
def test_folds_from_record_rebuilds_the_arrays_of_the_original_file(tmp_path, keys):
    write_market_csv(tmp_path / "data", seed=3, n_days=900, instruments=("harbor_index",))
    path = tmp_path / "w.toml"
    path.write_text(set_keys(demo_study_text(), name='"w"', include='["random_walk"]', **keys), encoding="utf-8")
    spec = load_spec(path)
    original = prepare_folds(spec, load_study_prices(spec).frame)
    # the run saves the study and its copy of the rows; no trial is needed
    run_study(spec, record_path=tmp_path / "w.sqlite", n_trials=0, n_workers=1)
    shutil.rmtree(tmp_path / "data")  # the record alone is enough
    with Tracker.open(tmp_path / "w.sqlite", create=False) as tracker:
        study = tracker.find_study("w")
        rebuilt_spec, rebuilt = folds_from_record(tracker, study)
        final_spec, final = inputs_from_record(tracker, study)
    assert rebuilt_spec.spec_hash() == spec.spec_hash() == final_spec.spec_hash()
    assert len(rebuilt) == len(original)
    for got, want in zip(rebuilt, original):
        assert_same_inputs(got, want)
    # the final model's arrays are the latest fold's
    assert_same_inputs(final, original[-1])


def test_count_states_counts_finished_trials_only():
    study = optuna.create_study()
    for value in (0.3, 0.1):
        study.tell(study.ask(), value)
    pruned = study.ask()
    pruned.report(0.9, 1)
    study.tell(pruned, state=TrialState.PRUNED)
    study.tell(study.ask(), state=TrialState.FAIL)
    study.ask()                                # running
    study.enqueue_trial({"x": 1.0})            # waiting
    assert [t.state for t in study.trials].count(TrialState.RUNNING) == 1
    assert count_states(study) == {"complete": 2, "pruned": 1, "failed": 1}
    assert set(FINISHED_STATES) == {TrialState.COMPLETE, TrialState.PRUNED, TrialState.FAIL}


def test_count_states_of_an_empty_study_is_zero_for_each_state():
    assert count_states(optuna.create_study()) == {"complete": 0, "pruned": 0, "failed": 0}


def test_count_states_leaves_out_interrupted_trials_whose_settings_ran_again():
    # an interrupted trial is failed in optuna and queued again: the retry uses the budget, not both
    study = optuna.create_study()
    study.tell(study.ask(), 0.2)
    stopped = study.ask()
    stopped.set_user_attr("interrupted", True)
    study.tell(stopped, state=TrialState.FAIL)
    study.tell(study.ask(), 0.3)  # the retry
    assert count_states(study) == {"complete": 2, "pruned": 0, "failed": 0}
