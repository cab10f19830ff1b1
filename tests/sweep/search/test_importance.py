"""setting_importance against optuna's own get_param_importances (the reference library) on the same trials."""

from __future__ import annotations

import math

import optuna
import pytest

from sweep.record import TrialRecord
from sweep.search import IMPORTANCE_EVALUATOR, SettingImportance, setting_importance
from sweep.study import Choice, FloatRange, IntRange

optuna.logging.set_verbosity(optuna.logging.WARNING)
SPACE = {"hidden_units": IntRange(4, 32, log=True), "dropout": FloatRange(0.0, 0.5),
         "batch_size": Choice((32, 64))}


def _reference(n_trials=30):
    study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=1))

    def objective(trial):
        hidden = trial.suggest_int("hidden_units", 4, 32, log=True)
        dropout = trial.suggest_float("dropout", 0.0, 0.5)
        trial.suggest_categorical("batch_size", [32, 64])
        return (math.log(hidden) - math.log(10)) ** 2 + 0.01 * dropout

    study.optimize(objective, n_trials=n_trials)
    return study


def _records(study):
    return [TrialRecord(study="s", number=t.number, state="complete", params=dict(t.params), objective=t.value)
            for t in study.trials]


def test_setting_importance_equals_optunas_on_the_same_trials():
    reference = _reference()
    want = optuna.importance.get_param_importances(reference)
    got = setting_importance(_records(reference), list(SPACE), SPACE)
    assert isinstance(got, SettingImportance) and got.evaluator == IMPORTANCE_EVALUATOR and got.reason is None
    assert got.values == pytest.approx(want, rel=1e-9) and list(got.values) == list(want)


def test_setting_importance_infers_distributions_without_a_space():
    # the spec could not be read: distributions come from the values seen; the ranking still finds the
    # one setting the objective depends on (by construction of the objective above)
    got = setting_importance(_records(_reference()), list(SPACE), {})
    assert got.reason is None and max(got.values, key=got.values.get) == "hidden_units"


@pytest.mark.parametrize("records, reason", [
    ([], "at least 2 complete trials"),
    ([TrialRecord(study="s", number=i, state="complete", params={"dropout": 0.1}, objective=0.1 * i)
      for i in range(3)], "no searched setting took more than one value"),
])
def test_setting_importance_says_why_it_is_absent(records, reason):
    got = setting_importance(records, ["dropout"], {"dropout": FloatRange(0.0, 0.5)})
    assert got.values == {} and reason in got.reason
