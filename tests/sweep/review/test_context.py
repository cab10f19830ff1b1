"""Tests for sweep/review/context.py: a recorded study reopened, a trial's network and its forecasts.

Outside references: the validation forecasts recorded during the sweep (made by the objective from the
training arrays, not by this module); the study's windows rebuilt by ``sweep.search.inputs_from_record``;
the training loop run directly (``trainers.fit.fit_mlp``) for a retrained network.
"""

import numpy as np
import pytest
from review_study import STUDY, fit_alone, trials_in_state

from sweep import review
from sweep.errors import ReviewError
from sweep.record import StudyNotFound, TrialRecord
from sweep.search import inputs_from_record


def test_open_study_rebuilds_the_arrays_the_study_trained_on(tracker):
    ctx = review.open_study(tracker, None)  # None: the file's only study
    assert ctx.name == STUDY and ctx.spec.study.seed == 11
    _, inputs = inputs_from_record(tracker, tracker.find_study(STUDY))
    # a single split: one fold, the same arrays the record rebuilds for the sweep
    assert ctx.all_folds == (ctx.inputs,)
    for window in ("train", "valid", "test"):
        np.testing.assert_array_equal(ctx.inputs.X[window], inputs.X[window])
        np.testing.assert_array_equal(ctx.inputs.truth[window], inputs.truth[window])


def test_open_study_unknown_name_raises(tracker):
    with pytest.raises(StudyNotFound, match="no study named 'nope'"):
        review.open_study(tracker, "nope")


def test_window_forecasts_of_the_stored_network_are_the_recorded_ones(tracker):
    ctx = review.open_study(tracker, STUDY)
    for trial in trials_in_state(tracker, "complete"):
        full = tracker.load_trial(STUDY, trial.number)
        network, source = review.network_for(ctx, full)
        assert source == review.NETWORK_STORED
        # the sweep recorded the validation forecasts of the best weights from its own arrays
        np.testing.assert_allclose(review.window_forecasts(ctx.inputs, network, "valid"), full.valid_forecasts,
                                   rtol=0, atol=1e-12)


def test_network_for_retrains_when_weights_are_missing(writable):
    writable.db.execute("DELETE FROM vs_weights WHERE study = ? AND number = 1", [STUDY])
    ctx = review.open_study(writable, STUDY)
    trial = writable.load_trial(STUDY, 1)
    network, source = review.network_for(ctx, trial)
    assert source == review.NETWORK_RETRAINED
    # retrained from the record on this machine: the recorded validation forecasts come back
    np.testing.assert_allclose(review.window_forecasts(ctx.inputs, network, "valid"), trial.valid_forecasts,
                               rtol=0, atol=1e-12)


def test_retrain_trial_matches_the_training_loop_run_directly(tracker):
    ctx = review.open_study(tracker, STUDY)
    trial = trials_in_state(tracker, "complete")[0]
    retrained = review.retrain_trial(ctx, trial)
    alone = fit_alone(tracker, trial, trial.seed)
    # same settings, same seed, one BLAS thread as the sweep: the same network, bit for bit
    assert retrained.best_epoch == alone.best_epoch
    np.testing.assert_array_equal(retrained.network.params, alone.network.params)


def test_retrain_folds_refuses_a_trial_without_epochs(writable):
    trial = trials_in_state(writable, "complete")[0]
    writable.db.execute("DELETE FROM vs_epochs WHERE study = ? AND number = ?", [STUDY, trial.number])
    writable.db.execute("UPDATE vs_trials SET n_epochs = 0, state = 'failed' WHERE study = ? AND number = ?",
                        [STUDY, trial.number])
    ctx = review.open_study(writable, STUDY)
    with pytest.raises(ReviewError, match=f"trial {trial.number} of study '{STUDY}' has no recorded epochs"):
        review.retrain_folds(ctx, writable.load_trial(STUDY, trial.number))


def test_ranked_complete_orders_by_objective_then_number():
    def trial(number, state, objective):
        return TrialRecord(study="s", number=number, state=state, params={}, objective=objective)

    trials = [trial(0, "complete", 0.3), trial(1, "pruned", 0.1), trial(2, "complete", 0.2),
              trial(3, "complete", None), trial(4, "complete", 0.2), trial(5, "complete", float("inf"))]
    # pruned, missing and infinite objectives are left out; the tie at 0.2 goes to the lower number
    assert [t.number for t in review.ranked_complete(trials)] == [2, 4, 0]


def test_trial_key_names_a_trial_beside_the_baselines():
    assert review.trial_key(17) == "trial 17"
