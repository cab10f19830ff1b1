"""How a study scores level variance forecasts: its objective, every loss a table shows, and the mean over folds.

Pure functions on arrays; the loss formulas themselves are `trainers.metrics` (each with its source).
"""

from __future__ import annotations

import math

import numpy as np

from sweep.study.spec import OBJECTIVES
from trainers import metrics

__all__ = ["FORECAST_FLOOR", "fold_mean", "mean_dicts", "score_forecasts", "window_losses"]

# Floor applied to level forecasts before a log or a ratio (the same floor the features use).
FORECAST_FLOOR = 1e-10


def score_forecasts(objective: str, truth: np.ndarray, forecast: np.ndarray) -> float:
    """Score level variance forecasts against level truth, averaged over rows and horizons.

    Args:
        objective: "qlike" (Patton, 2011), "mse_log" (MSE of log variances) or "mse" (levels).
        truth: realised mean variance, shape (n_rows, n_horizons).
        forecast: forecast of the same, same shape.

    Returns:
        The mean loss; lower is better. NaN when a forecast is not finite (a diverged network),
        so the training loop stops that network as diverged.
    """
    if objective not in OBJECTIVES["regression"]:
        raise ValueError(f"unknown objective {objective!r}; use one of {', '.join(OBJECTIVES['regression'])}")
    forecast = np.asarray(forecast, dtype=np.float64)
    if not np.isfinite(forecast).all():
        return math.nan
    forecast = np.maximum(forecast, FORECAST_FLOOR)
    truth = np.maximum(np.asarray(truth, dtype=np.float64), FORECAST_FLOOR)
    loss = {"qlike": metrics.qlike, "mse_log": metrics.mse_log, "mse": metrics.mse}[objective]
    return float(loss(truth, forecast))


def window_losses(truth: np.ndarray, forecast: np.ndarray) -> dict:
    """Every regression loss of level forecasts on one window, for tables and the board."""
    losses = {name: score_forecasts(name, truth, forecast) for name in OBJECTIVES["regression"]}
    losses["mae"] = float(metrics.mae(truth, np.maximum(forecast, FORECAST_FLOOR)))
    losses["mz_r2"] = float(
        np.mean([metrics.mz_r2(truth[:, j], forecast[:, j]) for j in range(truth.shape[1])])
    )
    return losses


def fold_mean(values) -> float:
    """A score over walk-forward folds: the mean of the folds' scores (the score itself for one split)."""
    values = [float(v) for v in values]
    return values[0] if len(values) == 1 else float(np.mean(values))


def mean_dicts(dicts: list[dict]) -> dict:
    """Key by key, the `fold_mean` of several dicts with the same keys."""
    return {k: fold_mean([d[k] for d in dicts]) for k in dicts[0]}
