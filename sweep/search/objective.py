"""One trial: sampled settings -> configs -> training with a report per epoch -> prune or finish -> record.

The training loop knows nothing of pruning: it yields one record per epoch, and this module decides,
by asking the optuna trial, whether to leave the loop.
"""

from __future__ import annotations

import os
import socket
import time
import traceback
from collections.abc import Mapping
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from typing import Any

import numpy as np
import optuna

from sweep.record import EpochRow, Tracker, TrialRecord, finite_or_none
from sweep.search.pruning import PruningView
from sweep.study import SETTINGS, StudyInputs, StudySpec, TrainingSection, fold_mean, suggest_params
from trainers.fit import FitResult, TrainConfig, TrainingRun, train_mlp
from trainers.mlp import MLPConfig

__all__ = ["TrialOutcome", "params_to_configs", "run_trial", "train_params", "trial_seed"]


@dataclass(frozen=True)
class TrialOutcome:
    """What a worker tells the main process about a finished trial (for the progress display)."""

    number: int
    state: str
    objective: float | None
    seconds: float
    error: str | None = None


def trial_seed(study_seed: int, number: int) -> list[int]:
    """The seed sequence of a trial: reproducible from the record alone."""
    return [int(study_seed), int(number)]


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds")


def params_to_configs(params: Mapping[str, Any], *, n_inputs: int, n_outputs: int, task: str,
                      training: TrainingSection) -> tuple[MLPConfig, TrainConfig]:
    """Turn one trial's parameters into the network and training configs.

    Args:
        params: every setting of SETTINGS (as `suggest_params` returns them).
        n_inputs: number of input columns.
        n_outputs: regression targets, or classes for classification.
        task: "regression" or "classification".
        training: the study's `[training]` section.

    Returns:
        (MLPConfig, TrainConfig); hidden layers are `(hidden_units,) * layers`.

    Raises:
        ValueError: when a setting is missing from `params`.
    """
    missing = [name for name in SETTINGS if name not in params]
    if missing:
        raise ValueError(f"params lack {', '.join(missing)}; got {dict(params)!r}; "
                         "pass every setting, fixed ones included (suggest_params returns them all)")
    mlp = MLPConfig(
        n_inputs=n_inputs,
        n_outputs=n_outputs,
        hidden=(int(params["hidden_units"]),) * int(params["layers"]),
        activation=params["activation"],
        task=task,
        dropout=float(params["dropout"]),
    )
    train = TrainConfig(
        batch_size=int(params["batch_size"]),
        max_epochs=training.max_epochs,
        patience=int(params["patience"]),
        min_delta=training.min_delta,
        optimizer=training.optimizer,
        learning_rate=float(params["learning_rate"]),
        momentum=training.momentum,
        weight_decay=float(params["weight_decay"]),
    )
    return mlp, train


def train_params(spec: StudySpec, inputs: StudyInputs, params: dict, seed: list[int]) -> TrainingRun:
    """Build the configs of one setting and return its training run (an iterable of epochs)."""
    mlp_config, train_config = params_to_configs(
        params,
        n_inputs=inputs.n_inputs,
        n_outputs=inputs.n_outputs,
        task=inputs.task,
        training=spec.training,
    )
    rng = np.random.default_rng(seed)
    return train_mlp(
        mlp_config,
        train_config,
        inputs.X["train"],
        inputs.y["train"],
        inputs.X["valid"],
        inputs.y["valid"],
        rng=rng,
        valid_score=inputs.scorer("valid"),
    )


def valid_forecasts(inputs: StudyInputs, result: FitResult) -> np.ndarray:
    """The best network's forecasts on the validation window, as the record keeps them."""
    network = result.network
    X = inputs.X["valid"]
    raw = network.predict_proba(X) if inputs.task == "classification" else network.predict(X)
    return inputs.forecasts(raw)


def _aggregate(results: list[FitResult], state: str) -> dict:
    """A trial's fields from its folds' results (one result for a single split).

    Losses and the objective are means over the folds run (the fold's value itself for one split);
    the best epoch and stop reason are those of the last fold run.
    """
    last = results[-1]
    objective = [finite_or_none(r.valid_score) for r in results]
    train_loss = [finite_or_none(r.train_loss) for r in results]
    valid_loss = [finite_or_none(r.valid_loss) for r in results]

    def mean(values):
        return None if any(v is None for v in values) else fold_mean(values)

    fields = dict(
        best_epoch=int(last.best_epoch),
        n_epochs=sum(len(r.history) for r in results),
        stop_reason="pruned" if state == "pruned" else last.stop_reason,
        objective=mean(objective),
        train_loss=mean(train_loss),
        valid_loss=mean(valid_loss),
    )
    if len(results) == 1:
        fields.update(gap=finite_or_none(last.gap), gap_ratio=finite_or_none(last.gap_ratio))
    elif fields["train_loss"] is not None and fields["valid_loss"] is not None:
        fields.update(gap=fields["valid_loss"] - fields["train_loss"],
                      gap_ratio=finite_or_none(fields["valid_loss"] / fields["train_loss"]))
    return fields


def _trial_record(spec: StudySpec, trial_number, params, seed, state, results, started, t0, error=None):
    epochs = ()
    fields = dict(best_epoch=0, n_epochs=0, stop_reason="error", objective=None,
                  train_loss=None, valid_loss=None, gap=None, gap_ratio=None)
    if results:
        epochs = tuple(
            EpochRow(
                epoch=int(e.index),
                train_loss=float(e.train_loss),
                valid_loss=float(e.valid_loss),
                valid_score=finite_or_none(e.valid_score),
                seconds=float(e.seconds),
                fold=fold,
            )
            for fold, result in enumerate(results)
            for e in result.history
        )
        fields.update(_aggregate(results, state))
    return TrialRecord(
        study=spec.study.name,
        number=int(trial_number),
        state=state,
        params=dict(params),
        seed=list(seed),
        started=started,
        finished=_now(),
        seconds=time.perf_counter() - t0,
        error=error,
        epochs=epochs,
        worker=f"{socket.gethostname()}:{os.getpid()}",
        **fields,
    )


def run_trial(study: optuna.Study, spec: StudySpec, folds: list[StudyInputs] | StudyInputs, tracker: Tracker,
              view: PruningView, *, stop=None, trial: optuna.trial.Trial | None = None) -> TrialOutcome:
    """Ask the study for one trial, train it on every fold, record it, and tell the study how it ended.

    The record is written before optuna is told, so a trial optuna calls finished is always in the
    record. A trial that raises is recorded as failed with its traceback; the sweep goes on. With
    walk-forward folds the trial trains one network per fold with the same settings and seed, oldest
    fold first; the pruner sees fold k's epochs as steps after those of the earlier folds.

    Args:
        study: the optuna study (any storage).
        spec: the `StudySpec`.
        folds: the study's arrays, a list of StudyInputs (one per fold) or one StudyInputs.
        tracker: an open `Tracker` of the record.
        view: the worker's `PruningView`; the pruner decides on it after every epoch.
        stop: optional object with `is_set()`; when set, the trial is left at the next epoch,
            recorded as failed with the error "interrupted", and its settings queued again.
        trial: a trial already asked of the study (`sweep.search.workers.claim_trial`); None asks one.

    Returns:
        A TrialOutcome for the progress display.
    """
    folds = [folds] if isinstance(folds, StudyInputs) else list(folds)
    view.refresh(tracker, spec.study.name)
    trial = study.ask() if trial is None else trial
    started, t0 = _now(), time.perf_counter()
    seed = trial_seed(spec.study.seed, trial.number)
    params: dict = {}
    results: list[FitResult] = []
    try:
        params = suggest_params(trial, spec.space)
        state = "complete"
        view.start()
        for k, inputs in enumerate(folds):
            run = train_params(spec, inputs, params, seed)
            for epoch in run:
                if epoch.valid_score is not None and np.isfinite(epoch.valid_score):
                    if view.should_prune(view.step(k, epoch.index), epoch.valid_score):
                        state = "pruned"
                        break
                if stop is not None and stop.is_set():
                    state = "interrupted"
                    break
            results.append(run.result())
            if state != "complete":
                break
        if state == "interrupted":
            raise KeyboardInterrupt
        if state == "complete" and finite_or_none(_aggregate(results, state)["objective"]) is None:
            state = "diverged"
    except KeyboardInterrupt:
        view.finish(trial.number, "failed")
        record = _trial_record(spec, trial.number, params, seed, "failed", results, started, t0,
                               error="interrupted: the run was stopped before this trial finished")
        tracker.record_trial(record)
        trial.set_user_attr("interrupted", True)
        study.tell(trial, state=optuna.trial.TrialState.FAIL)
        if params:
            study.enqueue_trial(params, skip_if_exists=False)
        return TrialOutcome(trial.number, "interrupted", None, record.seconds, record.error)
    except Exception:
        view.finish(trial.number, "failed")
        error = traceback.format_exc(limit=8)
        record = _trial_record(spec, trial.number, params, seed, "failed", results, started, t0, error=error)
        tracker.record_trial(record)
        trial.set_user_attr("error", error[-4000:])
        study.tell(trial, state=optuna.trial.TrialState.FAIL)
        return TrialOutcome(trial.number, "failed", None, record.seconds, error.strip().splitlines()[-1])

    if state == "diverged":  # no finite score at any epoch: failed, with its curve up to the divergence
        view.finish(trial.number, "failed")
        hint = (f"{results[-1].note or 'diverged: no finite validation score at any epoch'}; lower "
                "space.learning_rate or narrow its range")
        record = replace(_trial_record(spec, trial.number, params, seed, "failed", results, started, t0,
                                       error=hint), stop_reason="diverged")
        tracker.record_trial(record)
        trial.set_user_attr("error", hint)
        study.tell(trial, state=optuna.trial.TrialState.FAIL)
        return TrialOutcome(trial.number, "failed", None, record.seconds, hint)
    record = _trial_record(spec, trial.number, params, seed, state, results, started, t0)
    view.finish(trial.number, state, record.objective)
    forecasts = None
    if len(results) == len(folds) and all(r.best_epoch > 0 for r in results):
        forecasts = np.concatenate([valid_forecasts(f, r) for f, r in zip(folds, results)])
    weights = results[-1].network.to_arrays() if state == "complete" else None
    record = replace(record, valid_forecasts=forecasts, weights=weights)
    tracker.record_trial(record)
    if state == "pruned":
        # one intermediate value, so optuna's value of a pruned trial is the recorded objective
        if record.objective is not None:
            trial.report(record.objective, view.step(len(results) - 1, results[-1].epochs_run))
        study.tell(trial, state=optuna.trial.TrialState.PRUNED)
    else:
        study.tell(trial, record.objective)
    return TrialOutcome(trial.number, state, record.objective, record.seconds)
