"""The engine: optuna's study behind a volsweep study, its workers, and pruning on recorded curves.

The only package that imports optuna. `engine.run_study` creates or resumes a study and runs its
trials through `workers`; `objective.run_trial` is one trial (params -> configs -> training with a
pruning check per epoch -> record -> tell optuna); `pruning.PruningView` decides on recorded curves;
`storage` builds the optuna storage, sampler and pruner a study file names; `importance` rates the
searched settings.
"""

from sweep.search.engine import RunSummary, default_record_path, run_study
from sweep.search.importance import IMPORTANCE_EVALUATOR, SettingImportance, setting_importance
from sweep.search.objective import TrialOutcome, params_to_configs, run_trial, train_params, trial_seed
from sweep.search.pruning import PercentileRule, PruningView
from sweep.search.storage import (
    RECORD_STORAGE, RecordStorage, close_storage, default_storage_path, make_pruner, make_sampler, open_storage,
    percentile_rule,
)
from sweep.search.workers import FINISHED_STATES, count_states, folds_from_record, inputs_from_record

__all__ = [
    "RECORD_STORAGE", "RecordStorage", "close_storage",
    "FINISHED_STATES", "IMPORTANCE_EVALUATOR", "PercentileRule", "PruningView", "RunSummary", "SettingImportance",
    "TrialOutcome", "count_states", "default_record_path", "default_storage_path", "folds_from_record",
    "inputs_from_record",
    "make_pruner", "make_sampler", "open_storage", "params_to_configs", "percentile_rule", "run_study",
    "run_trial", "setting_importance", "train_params", "trial_seed",
]
