"""Reopening a recorded study to justify a choice, from the record alone.

`context` rebuilds a study (spec, arrays) and a trial's network; `replay` retrains a trial and compares
its curve; `confirm` retrains finalists on fresh seeds; `holdout` scores the test window once;
`compare` runs Diebold-Mariano tests, the model confidence set and SPA; `predict` forecasts a new price
file; `notes` keeps decision notes; `diff` says what differs between two studies.

Each command returns a frozen dataclass with typed fields (``ReplayReport``, ``ConfirmReport``,
``HoldoutReport``, ``ComparisonReport``, ``Prediction``, ``DecisionNote`` rows, ``StudyDiff``); its
``to_dict()`` is the JSON the CLI prints with ``--json``.
"""

from sweep.errors import HoldoutAlreadyUsed, ReviewError
from sweep.review.compare import (
    BENCHMARK, BaselineLoss, ComparisonReport, ConfidenceSet, DMRow, FinalistLoss, SPATest, compare_forecasts,
    dm_words, percent, row_losses,
)
from sweep.review.confirm import (
    CONFIRM_SEED_OFFSET, ConfirmedTrial, ConfirmReport, RankingCheck, SpreadSummary, confirm_seeds, confirm_trials,
)
from sweep.review.context import (
    NETWORK_RETRAINED, NETWORK_STORED, StudyContext, network_for, network_forecasts, one_blas_thread,
    open_study, ranked_complete, retrain_folds, retrain_trial, trial_key, window_forecasts,
)
from sweep.review.diff import StudyDiff, StudySide, diff_studies
from sweep.review.holdout import HoldoutLook, HoldoutReport, holdout_trial
from sweep.review.notes import DecisionNote, add_decision_note, list_notes
from sweep.review.predict import Prediction, predict_file
from sweep.review.replay import (
    EnvironmentCheck, EnvironmentDifference, EpochDifference, ReplayReport, SourceStatus, environment_differences,
    replay_trial,
)

__all__ = [
    "BENCHMARK", "CONFIRM_SEED_OFFSET", "NETWORK_RETRAINED", "NETWORK_STORED", "BaselineLoss", "ComparisonReport",
    "ConfidenceSet", "ConfirmReport", "ConfirmedTrial", "DMRow", "DecisionNote",
    "EnvironmentCheck", "EnvironmentDifference", "EpochDifference", "FinalistLoss", "HoldoutAlreadyUsed",
    "HoldoutLook", "HoldoutReport", "Prediction", "RankingCheck", "ReplayReport", "ReviewError", "SPATest",
    "SourceStatus", "SpreadSummary", "StudyContext", "StudyDiff", "StudySide", "add_decision_note",
    "compare_forecasts", "confirm_seeds", "confirm_trials", "diff_studies", "dm_words", "environment_differences",
    "holdout_trial", "list_notes", "network_for", "network_forecasts", "one_blas_thread", "open_study", "percent",
    "predict_file", "ranked_complete", "replay_trial", "retrain_folds", "retrain_trial", "row_losses", "trial_key",
    "window_forecasts",
]
