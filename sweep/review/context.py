"""A recorded study reopened: its spec and arrays rebuilt from the record, a trial's network (stored
weights, or retrained from the record) and its forecasts on a window of the study.

Everything comes from the record: the spec text, the copy of the price rows, the trial's settings and
seed. The scalers are refit on the record's training window (deterministic), so the arrays are exactly
the ones the study trained on.

Example:
    >>> ctx = open_study(Tracker.open("studies/demo.sqlite"), None)        # doctest: +SKIP
    >>> network, source = network_for(ctx, ctx.tracker.load_trial(ctx.name, 3))  # doctest: +SKIP
    >>> window_forecasts(ctx.inputs, network, "valid").shape                # doctest: +SKIP
    (590, 3)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from threadpoolctl import threadpool_limits

from sweep.errors import ReviewError
from sweep.record import StudyRecord, Tracker, TrialRecord
from sweep.search import folds_from_record, train_params
from sweep.study import StudyInputs, StudySpec
from trainers.fit import FitResult
from trainers.mlp import Network

__all__ = [
    "NETWORK_RETRAINED",
    "NETWORK_STORED",
    "StudyContext",
    "network_for",
    "network_forecasts",
    "one_blas_thread",
    "open_study",
    "ranked_complete",
    "retrain_folds",
    "retrain_trial",
    "trial_key",
    "window_forecasts",
]

NETWORK_STORED = "stored weights"
NETWORK_RETRAINED = "retrained from the record (no weights were stored for this trial)"


@dataclass(frozen=True)
class StudyContext:
    """A recorded study reopened: its record, the spec it ran with and its arrays rebuilt from the record."""

    tracker: Tracker
    record: StudyRecord
    spec: StudySpec
    inputs: StudyInputs                  # the final model's arrays: the single split, or the latest fold
    folds: tuple[StudyInputs, ...] = ()  # every fold's arrays, oldest first (empty: `inputs` is the only one)

    @property
    def name(self) -> str:
        return self.record.name

    @property
    def all_folds(self) -> tuple[StudyInputs, ...]:
        return self.folds or (self.inputs,)


def trial_key(number: int) -> str:
    """How a trial is named beside the baselines in tables and records: ``"trial 17"``."""
    return f"trial {number}"


def open_study(tracker: Tracker, study: str | None) -> StudyContext:
    """Find the study (``None``: the file's only study) and rebuild its spec and arrays from the record."""
    record = tracker.find_study(study)
    spec, folds = folds_from_record(tracker, record)
    return StudyContext(tracker=tracker, record=record, spec=spec, inputs=folds[-1], folds=tuple(folds))


def one_blas_thread():
    """One BLAS thread while training or predicting, as the sweep's workers run (same sums, same bits)."""
    return threadpool_limits(limits=1)


def ranked_complete(trials: list[TrialRecord]) -> list[TrialRecord]:
    """Complete trials with a finite objective, best (lowest) first; ties by trial number."""
    done = [t for t in trials if t.state == "complete" and t.objective is not None and math.isfinite(t.objective)]
    return sorted(done, key=lambda t: (t.objective, t.number))


def retrain_folds(ctx: StudyContext, trial: TrialRecord) -> list[FitResult]:
    """Train the trial again from its recorded settings and seed, fold by fold, stopping each fold at
    its recorded epoch count.

    A pruned (or interrupted) trial stops where the record says it stopped (folds it never reached
    are not trained); a finished one runs until it stops by itself, which on the same machine is the
    same epoch.

    Raises:
        ReviewError: the trial has no recorded epochs (it failed before training).
    """
    if trial.n_epochs < 1:
        raise ReviewError(
            f"trial {trial.number} of study {ctx.name!r} has no recorded epochs (state {trial.state}); "
            "it failed before training, so there is nothing to retrain; pick another trial (see `volsweep top`)"
        )
    per_fold = [sum(1 for e in trial.epochs if e.fold == k) for k in range(len(ctx.all_folds))]
    if len(ctx.all_folds) == 1:
        per_fold = [trial.n_epochs]
    results = []
    with one_blas_thread():
        for inputs, n_epochs in zip(ctx.all_folds, per_fold):
            if n_epochs < 1:
                break
            run = train_params(ctx.spec, inputs, trial.params, trial.seed)
            for epoch in run:
                if epoch.index >= n_epochs:
                    break
            results.append(run.result())
    return results


def retrain_trial(ctx: StudyContext, trial: TrialRecord) -> FitResult:
    """The retrained network of the trial's last fold run (the only one for a single split)."""
    return retrain_folds(ctx, trial)[-1]


def network_for(ctx: StudyContext, trial: TrialRecord) -> tuple[Network, str]:
    """The trial's network: its stored weights (loaded with ``allow_pickle=False``), else retrained.

    Returns:
        ``(network, source)`` with ``source`` ``NETWORK_STORED`` or ``NETWORK_RETRAINED``.
    """
    arrays = ctx.tracker.load_weights(ctx.name, trial.number)
    if arrays is not None:
        return Network.from_arrays(arrays), NETWORK_STORED
    result = retrain_trial(ctx, trial)
    if result.best_epoch < 1:
        raise ReviewError(
            f"trial {trial.number} of study {ctx.name!r} retrained without a finite epoch "
            f"({result.note}); it has no network to forecast with; pick another trial"
        )
    return result.network, NETWORK_RETRAINED


def network_forecasts(inputs: StudyInputs, network: Network, X: np.ndarray) -> np.ndarray:
    """Forecasts from scaled inputs ``X`` (n, n_features): level variances (n, n_horizons), or class
    probabilities (n, n_classes) for a classification study, as the record keeps them."""
    with one_blas_thread():
        raw = network.predict_proba(X) if inputs.task == "classification" else network.predict(X)
    return inputs.forecasts(raw)


def window_forecasts(inputs: StudyInputs, network: Network, window: str) -> np.ndarray:
    """The network's forecasts on one window of the study ("train", "valid" or "test")."""
    return network_forecasts(inputs, network, inputs.X[window])
