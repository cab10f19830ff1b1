"""The classic benchmarks of a study, fitted and scored on the same windows as its trials.

Regression studies get `trainers.baselines` (random walk, EWMA, HAR, GARCH); classification studies
get the no-skill benchmark (the training window's class shares).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sweep.errors import SpecError
from sweep.study.inputs import SCORED_WINDOWS, StudyInputs
from sweep.study.scores import fold_mean, mean_dicts, score_forecasts, window_losses
from sweep.study.spec import StudySpec
from trainers import metrics
from trainers.baselines import forecast_baselines

__all__ = ["BaselineScore", "compute_baselines"]


@dataclass(frozen=True)
class BaselineScore:
    """One baseline's forecasts and losses on one window."""

    name: str
    window: str
    objective: float
    losses: dict
    params: dict
    forecasts: np.ndarray


def compute_baselines(spec: StudySpec, folds) -> list[BaselineScore]:
    """The classic benchmarks on the validation and test windows of a regression study.

    Args:
        spec: the study spec.
        folds: the study's StudyInputs, one per fold (a single StudyInputs is one fold). Each fold's
            baselines are fitted on its own training window; the validation forecasts of all folds
            are concatenated, oldest first, like the trials'; the test window is forecast from the
            latest fold.
    """
    folds = [folds] if isinstance(folds, StudyInputs) else list(folds)
    if folds[-1].task == "classification":
        return _class_share_baseline(folds)
    fitted = [_fit_baselines(spec, f, k, len(folds)) for k, f in enumerate(folds)]
    last = folds[-1]
    scores = []
    for name, result in fitted[-1].items():
        for window in SCORED_WINDOWS:
            if window == "valid":
                parts = [(f.truth["valid"], fit[name].forecasts.to_numpy(dtype=np.float64)[f.windows.valid])
                         for fit, f in zip(fitted, folds)]
            else:
                parts = [(last.truth["test"], result.forecasts.to_numpy(dtype=np.float64)[last.windows.test])]
            scores.append(
                BaselineScore(
                    name=name,
                    window=window,
                    objective=fold_mean([score_forecasts(last.objective, t, f) for t, f in parts]),
                    losses=mean_dicts([window_losses(t, f) for t, f in parts]),
                    params=result.params,
                    forecasts=np.concatenate([f for _, f in parts]),
                )
            )
    return scores


def _fit_baselines(spec: StudySpec, inputs: StudyInputs, k: int, n_folds: int) -> dict:
    """One fold's baselines, fitted on its training window.

    Raises:
        SpecError: the training window is too short for a baseline (the rolling HAR needs its
            minimum rows, HAR its regression rows); names the baseline, the rows and the keys to change.
    """
    try:
        return forecast_baselines(
            inputs.dataset,
            inputs.windows,
            horizons=inputs.horizons,
            names=tuple(spec.baselines.include),
            ewma_lambda=spec.baselines.ewma_lambda,
            har_window=spec.baselines.har_window,
            log=inputs.log,
        )
    except ValueError as exc:  # trainers.baselines: too few training rows to fit or forecast a baseline
        dates = inputs.dates("train")
        fold = f" of fold {k + 1}" if n_folds > 1 else ""
        raise SpecError([
            f"baselines: {exc} (the training window{fold} has {len(dates)} rows of {spec.data.file.name}, "
            f"{dates[0].date()} to {dates[-1].date()}); give a longer price file, lower split.valid, "
            "split.test or split.embargo, or leave that baseline out of baselines.include"
        ], path=spec.path) from exc


def _class_share_baseline(folds: list[StudyInputs]) -> list[BaselineScore]:
    """Predict the latest training window's class shares every day: the no-skill benchmark for regimes."""
    inputs = folds[-1]
    n_classes = inputs.n_outputs
    counts = np.bincount(inputs.labels["train"], minlength=n_classes).astype(np.float64)
    shares = (counts + 1.0) / (counts.sum() + n_classes)  # add-one so no class has probability 0
    scores = []
    for window in SCORED_WINDOWS:
        blocks = [f.labels["valid"] for f in folds] if window == "valid" else [inputs.labels["test"]]
        losses = mean_dicts([
            {"deviance": float(metrics.deviance(b, np.tile(shares, (len(b), 1)))),
             "accuracy": float(metrics.accuracy(b, np.tile(shares, (len(b), 1))))}
            for b in blocks
        ])
        scores.append(
            BaselineScore(
                name="class_shares",
                window=window,
                objective=losses["deviance"],
                losses=losses,
                params={"shares": shares.tolist()},
                forecasts=np.tile(shares, (sum(len(b) for b in blocks), 1)),
            )
        )
    return scores
