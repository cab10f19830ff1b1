"""How much each searched setting mattered: optuna's default importance evaluator on recorded trials.

The trials are copied into an in-memory optuna study (nothing is written anywhere); the board shows
the shares it returns.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field

import optuna
from optuna.distributions import CategoricalDistribution, FloatDistribution, IntDistribution

from sweep.record import TrialRecord, finite_or_none
from sweep.study import Choice, FloatRange, IntRange, Setting

__all__ = ["IMPORTANCE_EVALUATOR", "SettingImportance", "setting_importance"]

IMPORTANCE_EVALUATOR = "PedAnovaImportanceEvaluator"


@dataclass(frozen=True, kw_only=True)
class SettingImportance:
    """What ``setting_importance`` found: each setting's share, or why there is none.

    Attributes:
        values: setting -> share of importance (they sum to 1), largest first; empty when ``reason`` is set.
        evaluator: the optuna evaluator that made the shares (``IMPORTANCE_EVALUATOR``).
        n_trials: how many complete trials with an objective were rated.
        reason: why importance is absent (a sentence the board shows), or None.
    """

    values: dict[str, float] = field(default_factory=dict)
    evaluator: str = IMPORTANCE_EVALUATOR
    n_trials: int
    reason: str | None = None


def _distribution(setting):
    if isinstance(setting, IntRange):
        return IntDistribution(setting.low, setting.high, log=setting.log, step=setting.step)
    if isinstance(setting, FloatRange):
        return FloatDistribution(setting.low, setting.high, log=setting.log, step=setting.step)
    if isinstance(setting, Choice):
        return CategoricalDistribution(list(setting.values))
    return None


def _categorical_value(value):
    return value if value is None or isinstance(value, (bool, int, float, str)) else json.dumps(value)


def _inferred(values: list):
    """A distribution covering the values seen (when the spec's space cannot be used)."""
    if all(isinstance(v, int) and not isinstance(v, bool) for v in values):
        return IntDistribution(min(values), max(values))
    if all(finite_or_none(v) is not None for v in values):
        return FloatDistribution(float(min(values)), float(max(values)))
    return CategoricalDistribution(sorted({_categorical_value(v) for v in values}, key=str))


def _frozen_trial(trial, distributions):
    """An optuna FrozenTrial of a recorded complete trial (raises ValueError for a value outside its space)."""
    params = {}
    for name, dist in distributions.items():
        value = trial.params[name]
        params[name] = _categorical_value(value) if isinstance(dist, CategoricalDistribution) \
            else value
    return optuna.trial.create_trial(params=params, distributions=distributions, value=trial.objective)


def setting_importance(done: list[TrialRecord], searched: list[str], space: Mapping[str, Setting],
                       direction: str = "minimize") -> SettingImportance:
    """Setting importance by optuna's default evaluator on an in-memory study of complete trials.

    Args:
        done: complete trials with a finite objective.
        searched: the settings to rate (those the study searched).
        space: the study's space (``sweep.study.space`` forms: a range -> Int/Float distribution with
            the same low, high, log and step; a list -> categorical); empty when the spec could not be
            read. Settings that took a single value among the trials are left out. When the space cannot
            be used (missing, or a value outside it), distributions are inferred from the values seen.

    Returns:
        A ``SettingImportance``: the shares largest first, or empty with the ``reason`` they are absent.
    """
    n_trials = len(done)
    if n_trials < 2:
        return SettingImportance(n_trials=n_trials, reason=(f"setting importance needs at least 2 complete trials "
                                                            f"with an objective; this study has {n_trials}"))
    names = [n for n in searched
             if all(n in t.params for t in done) and len({json.dumps(t.params[n]) for t in done}) > 1]
    if not names:
        return SettingImportance(n_trials=n_trials, reason="no searched setting took more than one value among "
                                                           "the complete trials")
    space = dict(space)
    made = None
    for distributions in ({n: _distribution(space.get(n)) for n in names},
                          {n: _inferred([t.params[n] for t in done]) for n in names}):
        if any(d is None for d in distributions.values()):
            continue
        try:
            made = [_frozen_trial(t, distributions) for t in done]
            break
        except ValueError:  # a recorded value outside the spec's space: infer from the values instead
            continue
    if made is None:
        return SettingImportance(n_trials=n_trials, reason="the recorded settings fit no search space optuna accepts")
    verbosity = optuna.logging.get_verbosity()
    optuna.logging.set_verbosity(optuna.logging.WARNING)  # no "study created" line on the terminal
    try:
        study = optuna.create_study(direction=direction, storage=optuna.storages.InMemoryStorage())
        study.add_trials(made)
        importances = optuna.importance.get_param_importances(study)
    except (ValueError, RuntimeError) as exc:
        return SettingImportance(n_trials=n_trials, reason=f"optuna could not estimate setting importance: {exc}")
    finally:
        optuna.logging.set_verbosity(verbosity)
    return SettingImportance(n_trials=n_trials, values={k: float(v) for k, v in importances.items()})


