"""Forecasts from a recorded trial: its network (stored weights, or retrained from the record), its
forecasts on a window of the study, and forecasts on a new price file with the study's features and scaling.

Everything comes from the record: the spec text, the copy of the price rows, the trial's settings and
seed. The scalers are refit on the record's training window (deterministic), so a new file is scaled
exactly as the study's own rows were.

Example:
    >>> ctx = open_study(Tracker.open("studies/demo.sqlite"), None)        # doctest: +SKIP
    >>> network, source = network_for(ctx, ctx.tracker.load_trial(ctx.name, 3))  # doctest: +SKIP
    >>> window_forecasts(ctx.inputs, network, "valid").shape                # doctest: +SKIP
    (590, 3)
"""

from __future__ import annotations

import contextlib
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from sweep.engine import folds_from_record
from sweep.errors import VolsweepError
from sweep.inputs import StudyInputs, feature_config
from sweep.objective import train_params
from sweep.records import StudyRecord, TrialRecord
from trainers.data import load_prices
from trainers.features import feature_frame
from trainers.fit import FitResult
from trainers.mlp import Network
from trainers.volatility import daily_variance, log_returns

__all__ = [
    "TRADING_DAYS",
    "NETWORK_STORED",
    "NETWORK_RETRAINED",
    "ReviewError",
    "StudyContext",
    "one_blas_thread",
    "open_study",
    "ranked_complete",
    "retrain_trial",
    "retrain_folds",
    "network_for",
    "network_forecasts",
    "window_forecasts",
    "predict_file",
]

TRADING_DAYS = 252  # annualised volatility = sqrt(252 x daily variance) (common practice)
NETWORK_STORED = "stored weights"
NETWORK_RETRAINED = "retrained from the record (no weights were stored for this trial)"


class ReviewError(VolsweepError):
    """A review command cannot do what was asked (wrong trial state, window not opened, bad file...)."""


@dataclass(frozen=True)
class StudyContext:
    """A recorded study reopened: its record, the spec it ran with and its arrays rebuilt from the record."""

    tracker: object
    record: StudyRecord
    spec: object
    inputs: StudyInputs          # the final model's arrays: the single split, or the latest fold
    folds: tuple = ()            # every fold's arrays, oldest first (empty: `inputs` is the only one)

    @property
    def name(self) -> str:
        return self.record.name

    @property
    def all_folds(self) -> tuple:
        return self.folds or (self.inputs,)


def open_study(tracker, study: str | None) -> StudyContext:
    """Find the study (``None``: the file's only study) and rebuild its spec and arrays from the record."""
    record = tracker.find_study(study)
    spec, folds = folds_from_record(tracker, record)
    return StudyContext(tracker=tracker, record=record, spec=spec, inputs=folds[-1], folds=tuple(folds))


def one_blas_thread():
    """One BLAS thread while training or predicting, as the sweep's workers run (same sums, same bits)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - threadpoolctl is a dependency
        return contextlib.nullcontext()
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


def _new_features(ctx: StudyContext, path: Path) -> tuple[pd.DataFrame, list]:
    spec = ctx.spec
    data = load_prices(path, columns=dict(spec.data.columns), bad_rows=spec.data.bad_rows)
    frame = data.frame
    missing = [c for c in spec.features.exogenous if c not in frame.columns]
    if missing:
        raise ReviewError(
            f"{path} lacks the column(s) {', '.join(missing)} that study {ctx.name!r} uses as inputs "
            f"(features.exogenous); the file has {', '.join(frame.columns)}; add them to the file, or map "
            "its headers as the study's data.columns does"
        )
    kwargs = {"window": spec.target.yang_zhang_window} if spec.target.estimator == "yang_zhang" else {}
    variance = daily_variance(frame, spec.target.estimator, **kwargs)
    X = feature_frame(variance, log_returns(frame), frame, feature_config(spec))
    expected = list(ctx.inputs.dataset.X.columns)
    if list(X.columns) != expected:  # the same code builds both, so this guards against a changed spec reader
        raise ReviewError(f"features of {path} come out as {list(X.columns)}, the study used {expected}")
    X = X.loc[X.notna().all(axis=1)]
    if X.empty:
        longest = max(tuple(spec.features.har_windows) + tuple(k + 1 for k in spec.features.extra_lags) + (1,))
        raise ReviewError(
            f"{path} has {len(frame)} rows, too few for one complete row of features (the study's inputs "
            f"look back about {longest} days, plus the {spec.target.estimator} warm-up); give a longer file"
        )
    return X, list(data.dropped)


def predict_file(ctx: StudyContext, trial: TrialRecord, path: str | Path) -> tuple[pd.DataFrame, dict]:
    """Forecasts of a recorded trial on a new daily price file, one row per date with complete features.

    The file must have the columns the study used (open, high, low, close under the study's
    ``data.columns`` headers, plus any ``features.exogenous`` column). Features are built as the study
    built them and scaled with the scaler fitted on the record's training window.

    Returns:
        ``(frame, info)``. Regression: ``frame`` has ``date`` then, per horizon ``h``,
        ``variance_h<h>`` (mean daily variance over the next h days, level) and ``annual_vol_h<h>``
        (``sqrt(252 x variance)``). Classification: ``prob_<k>`` per regime (0 = calm) and ``regime``.
        ``info`` names the file, the rows, the dates and where the network came from.

    Raises:
        PriceFileError: the file is missing or has bad rows (every problem listed).
        ReviewError: a column the study uses is missing, or too few rows.
    """
    path = Path(path)
    X, dropped = _new_features(ctx, path)
    network, source = network_for(ctx, trial)
    forecasts = network_forecasts(ctx.inputs, network, ctx.inputs.x_scaler.transform(X.to_numpy(np.float64)))
    out = pd.DataFrame({"date": X.index.strftime("%Y-%m-%d")})
    if ctx.inputs.task == "classification":
        for k in range(forecasts.shape[1]):
            out[f"prob_{k}"] = forecasts[:, k]
        out["regime"] = forecasts.argmax(axis=1)
    else:
        for j, h in enumerate(ctx.inputs.horizons):
            variance = forecasts[:, j]  # already level and floored (StudyInputs.to_level)
            out[f"variance_h{h}"] = variance
            out[f"annual_vol_h{h}"] = np.sqrt(TRADING_DAYS * variance)
    info = {
        "study": ctx.name, "trial": trial.number, "file": str(path), "rows": int(len(out)),
        "first_date": out["date"].iloc[0], "last_date": out["date"].iloc[-1], "network": source,
        "dropped_rows": [str(p) for p in dropped], "columns": list(out.columns),
    }
    return out, info
